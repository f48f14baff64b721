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
shared and loaded), with the sensor zeroed and its calibration factor applied, every source
calibrated over a grid of the demo's levels (rf 10 levels −40..+5 dBm, rf2 6, lo 5) and the
bench's port mismatch (padded test ports, |Γ| 0.01; sensor 0.05; part 0.1–0.15) left
uncorrected: uncalibrated gain −0.20 .. +1.22 dB; calibrated gain −0.037 .. +0.024 dB,
P1dB −0.033 .. −0.000 dB, IIP3 −0.122 .. −0.069 dB (two-tone truth; −0.322 .. −0.230 dB
against its small-signal limit); coverage 100 % of 75 figures; median U(gain) 0.301 dB;
calibration 1.9 min of bench time; repeatability 0.0029 dB (1 σ), largest spread 0.0087 dB.
The same with each source measured at one level only and that loss used at every level:
gain −0.024 .. +0.293 dB, input P1dB −1.19 .. −1.01 dB (why the level grid is needed).
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


def test_a_calibration_at_one_level_misses_the_targets(tmp_path: Path) -> None:
    """Why a source is calibrated over levels: the same demo with every source measured at
    one level and that loss used at every level (a table without a level axis, what a
    one-level calibration amounts to). Printed: its gain and P1dB errors against the model's
    truth; the errors bench's sources drift by up to ±0.3 dB with their setting."""
    from sweeprig.formats.calibration import calibration_text, load_calibration

    one = calibrate_sources(DEMO, None, tmp_path / "one.toml", sim=True, repeats=1,
                            sim_description=ERRORS,
                            levels={"rf": [-10.0], "rf2": [-10.0], "lo": [0.0]})
    cal = load_calibration(one.path)
    m = cal.model
    flat = {c: (list(t.freq), list(t.loss_db[0] if t.level else t.loss_db))  # type: ignore[arg-type]
            for c, t in m.loss.items()}
    path = tmp_path / "flat.toml"
    path.write_text(calibration_text(
        created=m.created, expires=m.expires, temperature_c=m.temperature, bench=m.bench,
        method=m.method + " (level axis dropped)", instruments=m.instruments, tables=flat,
        repeatability_db=m.repeatability), encoding="utf-8")
    store = tmp_path / "runs.sqlite"
    run = run_sequence(DEMO, sim=True, sim_description=ERRORS, store_path=store,
                       calibration=path)
    after = _reduced(store, run.run_id)
    gain = [e for e, _ in _errors(after, "conversion_gain")]
    p1db = [e for e, _ in _errors(after, "input_p1db")]
    print()
    print(f"one level only: gain error {min(gain):+.3f} .. {max(gain):+.3f} dB, input P1dB "
          f"error {min(p1db):+.3f} .. {max(p1db):+.3f} dB (targets ±0.05, ±0.1)")
    assert run.status == "complete"
