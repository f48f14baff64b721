"""Helpers of the twin tests: a small sequence, a calibration and a run of it on the
simulated bench."""

from __future__ import annotations

from pathlib import Path

import pytest

from sweeprig.engine.calibrate import calibrate_sources
from sweeprig.engine.session import run_sequence

SMALL = Path(__file__).parent / "data" / "small.toml"


def calibrate_on_sim(sequence: Path, folder: Path, sim_description: str | None = None) -> Path:
    """Calibrate the simulated bench (default: the default one, with a real bench's errors)
    for ``sequence`` as an engineer would before measuring; the file ``folder``/cal.toml."""
    out = folder / "cal.toml"
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("SWEEPRIG_LOCK_DIR", str(folder / "locks"))
        calibrate_sources(sequence, None, out, sim=True, repeats=1,
                          sim_description=sim_description)
    return out


def run_on_sim(sequence: Path, folder: Path, sim_description: str | None = "clean", *,
               calibration: Path | None = None) -> Path:
    """Run ``sequence`` on the simulated bench into ``folder``/runs.sqlite; the store.

    The clean bench by default: a twin fitted to an uncalibrated run on the default bench
    (its sources up to 1 dB off) would learn the bench's errors, not the part. With
    ``calibration`` (:func:`calibrate_on_sim`), the run uses it, as the engineer's path does:
    calibrate the default bench, then measure (pass ``sim_description=None`` for it)."""
    store = folder / "runs.sqlite"
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("SWEEPRIG_LOCK_DIR", str(folder / "locks"))
        outcome = run_sequence(sequence, sim=True, sim_description=sim_description,
                               store_path=store, calibration=calibration)
    assert outcome.status == "complete", outcome.reason
    return store
