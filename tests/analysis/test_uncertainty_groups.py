"""The budgets worked out per group of figures (sweeprig.analysis.budget_groups) are the
budgets figure_budget gives one figure at a time: for every figure the same lines (name,
text, half-width, distribution, divisor, sensitivity, contribution, GUM type, origin, in
the same order) and the same expanded uncertainty within 1e-12 dB. The reference is the
per-figure path itself (per_figure_budgets); the GUM arithmetic it follows is pinned in
test_uncertainty.py and test_uncertainty_worked_examples.py."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd

from sweeprig.analysis import reduce as rd
from sweeprig.analysis.budget_groups import grouped_budgets, per_figure_budgets
from sweeprig.analysis.figures import Figure
from sweeprig.analysis.reduce import reduce_run
from sweeprig.analysis.synthetic import synthetic_run
from sweeprig.analysis.uncertainty import (
    UNCALIBRATED,
    Budget,
    CalibrationState,
    InstrumentSpecs,
    PointLevels,
    Spec,
    attach_uncertainty,
    made_budget,
    made_line,
    small_signal_gain_u,
)
from sweeprig.engine.session import run_sequence, shipped_sequences_dir
from sweeprig.store.sqlite import SqliteRunStore


def assert_same_budgets(figures: list[Figure], captures: pd.DataFrame,
                        specs: InstrumentSpecs | None = None,
                        cal: CalibrationState = UNCALIBRATED) -> int:
    """Assert the grouped path gives every figure the per-figure path's budget; return how
    many figures have one."""
    specs = specs or InstrumentSpecs()
    levels = PointLevels.from_captures(captures)
    small_signal_u = small_signal_gain_u(figures, levels)
    reference = per_figure_budgets(figures, levels, specs, cal, small_signal_u)
    grouped = grouped_budgets(figures, levels, specs, cal, small_signal_u)
    assert len(grouped) == len(figures)
    count = 0
    for figure, want, got in zip(figures, reference, grouped, strict=True):
        assert (want is None) == (got is None), figure
        if want is None or got is None:
            continue
        count += 1
        assert abs(got.expanded_db - want.expanded_db) <= 1e-12, figure
        assert got.coverage_factor == want.coverage_factor
        assert got.contributions == want.contributions, figure
        assert ([c.as_dict() for c in got.contributions]
                == [c.as_dict() for c in want.contributions]), figure
    return count


def test_grouped_budgets_are_the_per_figure_budgets_on_the_demo_run(tmp_path: Path):
    quick = shipped_sequences_dir() / "demo" / "quick.toml"
    outcome = run_sequence(quick, sim=True, store_path=tmp_path / "runs.sqlite",
                           log_dir=tmp_path)
    assert outcome.status == "complete", outcome.reason
    with SqliteRunStore(tmp_path / "runs.sqlite", create=False) as store:
        run = reduce_run(store, outcome.run_id)
    figures = list(run.figures)
    assert assert_same_budgets(figures, run.captures) >= 25
    # with other specifications and a calibration of the source connections too
    specs = InstrumentSpecs(input_level=Spec(0.7, "normal-k2", "bench file"), part_match=0.3,
                            coverage_factor=3.0)
    cal = CalibrationState(frozenset({"rf", "rf2", "lo"}), 0.02, "calibration 3")
    assert assert_same_budgets(figures, run.captures, specs, cal) >= 25


def _synthetic(rows: int, seed: int) -> tuple[list[Figure], pd.DataFrame]:
    captures = synthetic_run(rows, seed=seed, temperatures_c=(25.0, 85.0), supplies_v=(3.3,),
                             lo_powers_dbm=(0.0, 3.0))
    # some readings averaged over 4 sweeps, some floors unknown: every branch of the lines
    rng = np.random.default_rng(seed)
    captures["averages"] = rng.choice([1, 4], size=len(captures))
    floors = captures["noise_floor_dbm"].to_numpy(dtype=float).copy()
    floors[rng.random(len(floors)) < 0.02] = math.nan
    captures["noise_floor_dbm"] = floors
    points = captures.drop_duplicates("point").reset_index(drop=True)
    figures = rd._figures(captures, rd._study_infos(captures, points, None), [])
    return figures, captures


def test_grouped_budgets_are_the_per_figure_budgets_on_a_synthetic_run():
    figures, captures = _synthetic(12_000, seed=8)
    assert assert_same_budgets(figures, captures) >= 3_000


def _captures(rows: list[tuple]) -> pd.DataFrame:
    return pd.DataFrame(rows, columns=["point", "reading", "level_dbm", "noise_floor_dbm",
                                       "rf_power_dbm", "averages", "m", "n"])


EDGES = _captures([
    (0, "if", -10.0, -90.0, -20.0, 1, math.nan, math.nan),
    (0, "im3_low", -70.0, -80.0, -20.0, 4, math.nan, math.nan),
    (0, "im3_high", -72.0, -80.0, -20.0, 1, math.nan, math.nan),
    (0, "spur", -60.0, -85.0, -20.0, 1, 2.0, 1.0),
    (0, "spur", -83.0, -85.0, -20.0, 1, 1.0, 2.0),
    (1, "if", -11.0, math.nan, -20.0, 1, math.nan, math.nan),       # no floor known
    (1, "im3_low", -70.0, -math.inf, -20.0, 1, math.nan, math.nan),  # SNR +inf
    (2, "if", -10.0, -90.0, -20.0, 1, math.nan, math.nan),
    (2, "lo_at_if", -95.0, -90.0, -20.0, 2, math.nan, math.nan),    # under the floor
    (3, "if", -10.0, -90.0, -20.0, 1, math.nan, math.nan),          # same SNR as point 2
    (4, "if", -10.0, -90.0, -20.0, 1, math.nan, math.nan),
])


def test_grouped_budgets_agree_at_the_edges():
    figures = [
        Figure("conversion_gain", 10.0, "dB", points=(0,)),
        Figure("conversion_gain", 9.0, "dB", points=(1,)),
        Figure("conversion_gain", 10.0, "dB", points=(2,)),
        Figure("conversion_gain", 10.0, "dB", points=(3,)),
        Figure("conversion_gain", 10.0, "dB", points=(9,)),          # no such point
        Figure("im3_low", -50.0, "dBc", points=(0,)),
        Figure("im3_low", -50.0, "dBc", points=(1,)),
        Figure("iip3_point_low", 5.0, "dBm", points=(0,)),
        Figure("oip3_point_low", 15.0, "dBm", points=(0,)),
        Figure("im3_asymmetry", 2.0, "dB", points=(0,)),
        Figure("spur_dbc", -50.0, "dBc", conditions={"m": 2, "n": 1}, points=(0,)),
        Figure("spur_dbc", -73.0, "dBc", conditions={"m": 1, "n": 2}, points=(0,)),
        Figure("lo_suppression", 85.0, "dB", points=(2,)),
        Figure("lo_if_isolation", 40.0, "dB", points=(2,)),
        Figure("gain_flatness", 0.5, "dB", points=(0, 2, 3)),           # several points
        Figure("iip3_low", 5.0, "dBm", points=(0, 1)),                  # fitted
        Figure("small_signal_gain", 10.0, "dB", points=(2, 3, 4)),       # fitted
        Figure("conversion_gain", -80.0, "dB", bound="<", points=(0,)),  # a bound
        Figure("supply_current", 0.03, "A", points=(0,)),                # not in dB
        Figure("output_psat", 12.0, "dBm", points=(4,)),                 # no noisy reading
    ]
    assert assert_same_budgets(figures, EDGES) == 18
    cal = CalibrationState(frozenset({"rf", "rf2", "if"}), 0.05, "calibration 1")
    assert assert_same_budgets(figures, EDGES, InstrumentSpecs(coverage_factor=2.5), cal) == 18


def test_figures_with_the_same_lines_share_one_budget():
    figures = [Figure("conversion_gain", 10.0, "dB", points=(p,)) for p in (2, 3, 4)]
    budgets = grouped_budgets(figures, PointLevels.from_captures(EDGES), InstrumentSpecs(),
                              UNCALIBRATED)
    assert budgets[0] is budgets[1] is budgets[2]
    attached = attach_uncertainty(figures, EDGES)
    assert attached[0].budget is attached[1].budget
    assert attached[0].uncertainty_db == attached[2].uncertainty_db


def test_fast_lines_and_budgets_are_the_dataclasses():
    line = made_line("noise", "analyzer noise", 0.043, "rectangular", -0.5, "B", "measured")
    assert type(line).__name__ == "Contribution"
    from sweeprig.analysis.uncertainty import Contribution

    twin = Contribution("noise", "analyzer noise", 0.043, "rectangular", -0.5, "B",
                        "measured")
    assert line == twin and hash(line) == hash(twin)
    assert line.contribution_db == twin.contribution_db
    budget = made_budget((line, twin), 2.0)
    assert isinstance(budget, Budget)
    assert budget == Budget((twin, line), 2.0)
    assert budget.combined_db == Budget((twin, line), 2.0).combined_db
