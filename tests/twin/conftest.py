"""One small run of the demo part on the simulated bench, and its twin, shared by the twin
tests (a run and a fit each take seconds: done once per module that asks)."""

from __future__ import annotations

from pathlib import Path

import pytest

from sweeprig.engine.session import run_sequence
from sweeprig.twin.from_run import StoredRunTwin, fit_stored_run

SMALL = Path(__file__).parent / "data" / "small.toml"


def run_on_sim(sequence: Path, folder: Path, sim_description: str | None = None) -> Path:
    """Run ``sequence`` on the simulated bench into ``folder``/runs.sqlite; the store."""
    store = folder / "runs.sqlite"
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("SWEEPRIG_LOCK_DIR", str(folder / "locks"))
        outcome = run_sequence(sequence, sim=True, sim_description=sim_description,
                               store_path=store)
    assert outcome.status == "complete", outcome.reason
    return store


@pytest.fixture(scope="module")
def small_store(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return run_on_sim(SMALL, tmp_path_factory.mktemp("small-run"))


@pytest.fixture(scope="module")
def small_twin(small_store: Path) -> StoredRunTwin:
    return fit_stored_run(small_store, 1)
