"""Helpers of the twin tests: a small sequence and a run of it on the simulated bench."""

from __future__ import annotations

from pathlib import Path

import pytest

from sweeprig.engine.session import run_sequence

SMALL = Path(__file__).parent / "data" / "small.toml"


def run_on_sim(sequence: Path, folder: Path, sim_description: str | None = "clean") -> Path:
    """Run ``sequence`` on the simulated bench into ``folder``/runs.sqlite; the store.

    The clean bench by default: a twin fitted to an uncalibrated run on the default bench
    (its sources up to 1 dB off) would learn the bench's errors, not the part."""
    store = folder / "runs.sqlite"
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("SWEEPRIG_LOCK_DIR", str(folder / "locks"))
        outcome = run_sequence(sequence, sim=True, sim_description=sim_description,
                               store_path=store)
    assert outcome.status == "complete", outcome.reason
    return store
