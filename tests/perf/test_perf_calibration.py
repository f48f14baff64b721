"""Benchmark: issue 10's figures for calibrated figures on the simulated bench with a real
bench's errors (the shipped ``bench-errors`` description), printed.

What it does: calibrates the demo's needs twice (two independent calibrations, two sweeps
each), runs the demo characterisation without a calibration and with the first one, and
compares every conversion gain, input P1dB and IIP3 figure with the model's own value
(:mod:`sweeprig.sim.figure_truth`). Printed: the largest error before and after calibration,
the fraction of figures whose stated k = 2 uncertainty covers the actual error (JCGM
100:2008 6.2–6.3: about 95 % when the budget is honest), the median expanded uncertainty of
the gain, the calibration's simulated bench time, its repeatability within one calibration
(standard deviation between sweeps) and between the two calibrations (largest difference of
any table entry), and the IIP3 against its small-signal limit as well.

Targets (issue 10): uncalibrated gain off by ≥ 1 dB somewhere; after: gain ±0.05 dB, P1dB
±0.1 dB, IIP3 ±0.15 dB; coverage ≥ 95 %; median U(gain) ≤ 0.5 dB; calibration ≤ 15 min of
bench time, repeatable within ±0.02 dB. Measured on the development machine (2 cores,
shared; 85 s of wall time), with the sensor zeroed and its calibration factor applied:
uncalibrated gain −0.23 .. +1.04 dB; calibrated gain −0.023 .. +0.032 dB, P1dB +0.008 ..
+0.049 dB, IIP3 −0.105 .. −0.059 dB (two-tone truth; −0.336 .. −0.214 dB against its
small-signal limit); coverage 100 % of 75 figures; median U(gain) 0.301 dB; calibration
0.6 min of bench time; repeatability 0.0032 dB (1 σ), largest spread 0.0084 dB.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from sweeprig.analysis.reduce import RunFigures, reduce_run
from sweeprig.engine.calibrate import calibrate_sources
from sweeprig.engine.session import run_sequence, shipped_sequences_dir
from sweeprig.sim.bench import prepare_part, resolve_description
from sweeprig.sim.figure_truth import figure_truth, small_signal_iip3_dbm
from sweeprig.store.sqlite import SqliteRunStore

pytestmark = pytest.mark.perf

ERRORS = "bench-errors"
DEMO = shipped_sequences_dir() / "demo" / "kx2417-characterisation.toml"


def _reduced(store: Path, run_id: int) -> RunFigures:
    with SqliteRunStore(store, create=False) as s:
        return reduce_run(s, run_id)


def _rows(run: RunFigures, fig: object) -> object:
    return run.captures[run.captures["point"].isin(fig.points)].drop_duplicates("point")  # type: ignore[attr-defined]


def _errors(run: RunFigures, name: str, *, small_signal: bool = False
            ) -> list[tuple[float, float]]:
    part = prepare_part(resolve_description(ERRORS))
    out = []
    for fig in run.figures_named(name):
        rows = _rows(run, fig)
        truth = (small_signal_iip3_dbm(part, rows) if small_signal
                 else figure_truth(part, name, rows))
        out.append((fig.value - truth, fig.uncertainty_db))
    return out


def test_calibrated_figures_on_a_bench_with_errors(tmp_path: Path) -> None:
    cal_a = calibrate_sources(DEMO, None, tmp_path / "a.toml", sim=True, repeats=2,
                              sim_description=ERRORS)
    cal_b = calibrate_sources(DEMO, None, tmp_path / "b.toml", sim=True, repeats=2,
                              sim_description=ERRORS)
    between = max(float(np.max(np.abs(np.subtract(cal_a.tables[c][1], cal_b.tables[c][1]))))
                  for c in cal_a.tables)
    store = tmp_path / "runs.sqlite"
    plain = run_sequence(DEMO, sim=True, sim_description=ERRORS, store_path=store)
    fixed = run_sequence(DEMO, sim=True, sim_description=ERRORS, store_path=store,
                         calibration=cal_a.path)
    before = _reduced(store, plain.run_id)
    after = _reduced(store, fixed.run_id)
    gain_before = _errors(before, "conversion_gain")
    gain = _errors(after, "conversion_gain")
    p1db = _errors(after, "input_p1db")
    iip3 = _errors(after, "iip3_low") + _errors(after, "iip3_high")
    iip3_small = (_errors(after, "iip3_low", small_signal=True)
                  + _errors(after, "iip3_high", small_signal=True))
    every = gain + p1db + iip3
    covered = sum(abs(e) <= u for e, u in every) / len(every)

    def worst(errors: list[tuple[float, float]]) -> str:
        values = [e for e, _ in errors]
        return f"{min(values):+.3f} .. {max(values):+.3f} dB (n = {len(values)})"

    print()
    print(f"gain error, uncalibrated        {worst(gain_before)}")
    print(f"gain error, calibrated          {worst(gain)}   target ±0.05")
    print(f"input P1dB error, calibrated    {worst(p1db)}   target ±0.1")
    print(f"IIP3 error, calibrated          {worst(iip3)}   target ±0.15 (two-tone truth)")
    print(f"IIP3 vs small-signal limit      {worst(iip3_small)}   (reference_figures)")
    print(f"k = 2 coverage                  {100 * covered:.1f} % of {len(every)} figures"
          "   target ≥ 95 %")
    print(f"median U(gain), k = 2           {np.median([u for _, u in gain]):.3f} dB"
          "   target ≤ 0.5")
    print(f"calibration bench time          {cal_a.duration_s / 60:.1f} min   target ≤ 15")
    print(f"repeatability within a cal      {cal_a.repeatability_db:.4f} dB (1 σ), "
          f"largest spread {max(cal_a.spread_db.values()):.4f} dB   target ≤ 0.02")
    print(f"two calibrations differ by      ≤ {between:.4f} dB   target ≤ 0.02 (the same "
          "simulator seed: alike by construction; the spread within one is the measure)")
    assert plain.status == fixed.status == "complete"
