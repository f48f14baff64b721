"""Fixtures for every test."""

from __future__ import annotations

from pathlib import Path

import pytest

from tests.pg_fixtures import pg_server, pg_url  # noqa: F401  (the lab database)

# pytester checks the sequence-test plugin (tests/seqtest) with pytest's own machinery
pytest_plugins = ["pytester"]


@pytest.fixture(autouse=True)
def private_lock_dir(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Path:
    """Instrument locks of each test in a folder of its own: simulated instruments all answer
    *IDN? alike, so two test sessions on one machine would otherwise hold each other's."""
    folder = tmp_path / "locks"
    monkeypatch.setenv("SWEEPRIG_LOCK_DIR", str(folder))
    monkeypatch.delenv("SWEEPRIG_DB", raising=False)  # a lab database only where a test says
    return folder
