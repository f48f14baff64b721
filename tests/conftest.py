"""Fixtures for every test."""

from __future__ import annotations

import atexit
import os
import shutil
import tempfile
from datetime import date
from pathlib import Path

import pytest
from hypothesis import settings

from tests.pg_fixtures import pg_server, pg_url  # noqa: F401  (the lab database)

# No per-example deadline: the default suite asserts no times (speed is printed by the
# benchmarks under tests/perf), and on a loaded machine a slow example is not a failure.
# A test that sets its own settings keeps them.
settings.register_profile("sweeprig", deadline=None)
settings.load_profile("sweeprig")

# pytester checks the sequence-test plugin (tests/seqtest) with pytest's own machinery
pytest_plugins = ["pytester"]


#: Instrument locks of this test session (each process of it) in a folder of its own, for the
#: fixtures that open instruments before a test's own folder is set (module- or
#: session-scoped): else they would take the machine-wide folder's locks and collide with any
#: other run on the same machine.
os.environ["SWEEPRIG_LOCK_DIR"] = _SESSION_LOCKS = tempfile.mkdtemp(prefix="sweeprig-test-locks-")


def _remove_session_locks(owner: int = os.getpid()) -> None:
    """The session's lock folder removed when its process ends (not by a forked child)."""
    if os.getpid() == owner:
        shutil.rmtree(_SESSION_LOCKS, ignore_errors=True)


atexit.register(_remove_session_locks)


@pytest.fixture(autouse=True)
def private_lock_dir(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Path:
    """Instrument locks of each test in a folder of its own: simulated instruments all answer
    *IDN? alike, so two test sessions on one machine would otherwise hold each other's."""
    folder = tmp_path / "locks"
    monkeypatch.setenv("SWEEPRIG_LOCK_DIR", str(folder))
    monkeypatch.delenv("SWEEPRIG_DB", raising=False)  # a lab database only where a test says
    return folder


#: The day the tests judge ENR tables' expiry on: the shipped demo table (ns-0417) expires on
#: 2028-06-12, and the suite must not start failing on that date. Tests of expiry itself pass
#: their own ``today``.
TEST_TODAY = date(2026, 12, 1)


@pytest.fixture(autouse=True)
def enr_judged_on_a_fixed_day(monkeypatch: pytest.MonkeyPatch) -> None:
    """Every in-process check of an ENR table's expiry sees :data:`TEST_TODAY`."""
    import sweeprig.plan.noise_check as noise_check

    monkeypatch.setattr(noise_check, "today_utc", lambda: TEST_TODAY)
