"""Fixtures for engine tests: a simulated bench served in this process, reached by the
engine over real pyvisa/TCP exactly as it reaches hardware."""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

import pytest

from sweeprig.clock import VirtualClock
from sweeprig.sim.bench import SimBench, start_sim_bench


@pytest.fixture
def sim_bench() -> Iterator[SimBench]:
    with start_sim_bench(clock=VirtualClock()) as bench:
        yield bench


@pytest.fixture
def realtime_sim_bench() -> Iterator[SimBench]:
    """A simulated bench whose waits take wall time (for tests that stop a run midway)."""
    with start_sim_bench(clock=VirtualClock(realtime_factor=1.0)) as bench:
        yield bench


@pytest.fixture(autouse=True)
def private_lock_dir(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Path:
    """Instrument locks of each test in a folder of its own."""
    folder = tmp_path / "locks"
    monkeypatch.setenv("SWEEPRIG_LOCK_DIR", str(folder))
    return folder
