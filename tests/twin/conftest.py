"""One small run of the demo part on the simulated bench, and its twin, shared by the twin
tests (a run and a fit each take seconds: done once per module that asks).

The run takes the engineer's path: the default simulated bench, which has a real bench's
errors (sources up to 1 dB off), calibrated first, then the sequence run with that
calibration; the twin is fitted to it and served on the same bench."""

from __future__ import annotations

from pathlib import Path

import pytest

from sweeprig.twin.from_run import StoredRunTwin, fit_stored_run
from tests.twin.runs import SMALL, calibrate_on_sim, run_on_sim


@pytest.fixture(scope="module")
def small_store(tmp_path_factory: pytest.TempPathFactory) -> Path:
    folder = tmp_path_factory.mktemp("small-run")
    return run_on_sim(SMALL, folder, None, calibration=calibrate_on_sim(SMALL, folder))


@pytest.fixture(scope="module")
def small_calibration(small_store: Path) -> Path:
    """The calibration the small run was measured with (the same bench and sequence)."""
    return small_store.parent / "cal.toml"


@pytest.fixture(scope="module")
def small_twin(small_store: Path) -> StoredRunTwin:
    return fit_stored_run(small_store, 1)
