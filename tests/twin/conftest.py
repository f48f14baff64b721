"""One small run of the demo part on the simulated bench, and its twin, shared by the twin
tests (a run and a fit each take seconds: done once per module that asks)."""

from __future__ import annotations

from pathlib import Path

import pytest

from sweeprig.twin.from_run import StoredRunTwin, fit_stored_run
from tests.twin.runs import SMALL, run_on_sim


@pytest.fixture(scope="module")
def small_store(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return run_on_sim(SMALL, tmp_path_factory.mktemp("small-run"))


@pytest.fixture(scope="module")
def small_twin(small_store: Path) -> StoredRunTwin:
    return fit_stored_run(small_store, 1)
