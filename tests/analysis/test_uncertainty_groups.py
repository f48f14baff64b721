"""The budgets of a run (sweeprig.analysis.budget_groups: a shared part per kind of figure,
the noise lines and u_c per figure, worked out per group with numpy) are the budgets the
earlier path built one figure at a time, whole: for every figure the same lines (name, text,
half-width, distribution, divisor, sensitivity, contribution, GUM type, origin, in the same
order, put back together by budget_parts.budget_lines) and the same combined and expanded
uncertainty within 1e-12 dB. The reference is that earlier path, kept here only
(reference_budget); the GUM arithmetic it follows is pinned in test_uncertainty.py and
test_uncertainty_worked_examples.py."""

from __future__ import annotations

import math
from collections.abc import Mapping
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from sweeprig.analysis import reduce as rd
from sweeprig.analysis.budget_groups import attach_uncertainty, figure_budget, grouped_budgets
from sweeprig.analysis.budget_parts import (
    budget_lines,
    noise_contributions_db,
    scatter_contributions_db,
)
from sweeprig.analysis.figures import Figure
from sweeprig.analysis.reduce import reduce_run
from sweeprig.analysis.synthetic import synthetic_run
from sweeprig.analysis.uncertainty import (
    _DB_UNITS,
    MODELS,
    UNCALIBRATED,
    Budget,
    CalibrationState,
    Contribution,
    InstrumentSpecs,
    PointLevels,
    Spec,
    _level_terms,
    _noise_reading,
    _plain,
    compression_lines,
    intercept_fit_u_db,
    made_line,
    mean_u_db,
    noise_bias_db,
    noise_scatter_db,
    small_signal_gain_u,
)
from sweeprig.engine.session import run_sequence, shipped_sequences_dir
from sweeprig.store.sqlite import SqliteRunStore


def reference_budget(figure: Figure, levels: PointLevels, specs: InstrumentSpecs,
                     cal: CalibrationState = UNCALIBRATED,
                     small_signal_u: Mapping[tuple, float] | None = None) -> Budget | None:
    """The whole budget of one figure, every line made here, as the per-figure path of
    earlier versions built it (the reference the shared-part path is held to)."""
    model = MODELS.get(figure.name)
    if model is None or not figure.is_number or figure.unit not in _DB_UNITS:
        return None
    terms = list(_level_terms(model, specs, cal))
    pts = [int(p) for p in figure.points]
    noisy = [(r, c) for r, c in [(_noise_reading(model, figure), model.noise_c),
                                  *model.noise_also] if r is not None and c]
    for reading, c in noisy:
        snr = levels.min_snr_db(pts, reading)
        if math.isfinite(snr):
            terms.append(Contribution(
                "noise", f"analyzer noise under {_plain(reading)} (lowest SNR {snr:.1f} dB)",
                noise_bias_db(snr), "rectangular", c, "B",
                "measured noise floor; one-sided bias taken as rectangular (common "
                "practice, no source)"))
    fit_terms: list[Contribution] = []
    if model.fit == "intercept" and model.product is not None:
        x = levels.inputs_dbm(pts)
        fund = levels.levels_dbm(pts, "if")
        prod = levels.levels_dbm(pts, model.product)
        u = intercept_fit_u_db(x, fund, prod, model.order)
        if math.isfinite(u):
            fit_terms.append(Contribution(
                "fit", f"scatter about the slope-1/slope-{model.order} lines ({len(pts)} "
                "points)", u, "standard", 1.0, "A", "measured: regression standard error"))
    elif model.fit == "linear":
        gains = [lv - x for lv, x in zip(levels.levels_dbm(pts, "if"), levels.inputs_dbm(pts),
                                         strict=True)]
        u = mean_u_db(gains)
        if math.isfinite(u):
            fit_terms.append(Contribution(
                "fit", f"scatter of the gain over the linear region ({len(pts)} points)", u,
                "standard", 1.0, "A", "measured: standard deviation of the mean"))
    elif model.fit == "compression":
        # the curve's slope between the two bracketing points (the earlier path's own)
        slope = math.nan
        if len(pts) == 2:
            x = levels.inputs_dbm(pts)
            g = [lv - xi for lv, xi in zip(levels.levels_dbm(pts, "if"), x, strict=True)]
            if x[1] != x[0]:
                slope = abs((g[1] - g[0]) / (x[1] - x[0]))
        terms += compression_lines(figure, slope, specs, small_signal_u)
    terms += fit_terms
    for reading, c in noisy if not fit_terms else ():
        worst = levels.worst_scatter(pts, reading)
        if worst is not None and worst[0] > 0.0:
            sigma, snr, avg = worst
            terms.append(Contribution(
                "noise_scatter",
                f"scatter of one reading of {_plain(reading)} in the analyzer noise "
                f"(SNR {snr:.1f} dB, {avg} sweep{'s' if avg > 1 else ''}): "
                "(20/ln 10)·sqrt(1/(2ρ))/√averages", sigma, "standard",
                model.relative_c or c, "A",
                "measured level and noise floor; small-noise expansion of "
                "20·log10|A + n|"))
    return Budget(tuple(terms), specs.coverage_factor)


def assert_same_budgets(figures: list[Figure], captures: pd.DataFrame,
                        specs: InstrumentSpecs | None = None,
                        cal: CalibrationState = UNCALIBRATED) -> int:
    """Assert the shared-part path gives every figure the reference's budget, line for
    line (and figure_budget, one figure at a time, too); return how many have one."""
    specs = specs or InstrumentSpecs()
    levels = PointLevels.from_captures(captures)
    small_signal_u = small_signal_gain_u(figures, levels)
    grouped = grouped_budgets(figures, captures, specs, cal)
    assert len(grouped) == len(figures)
    attached = attach_uncertainty(figures, captures, specs, cal)
    count = 0
    for figure, got, with_u in zip(figures, grouped, attached, strict=True):
        want = reference_budget(figure, levels, specs, cal, small_signal_u)
        if figure.name in MODELS:  # (a worse-of-two-sides headline takes its side's)
            assert (with_u.budget is None) == (got is None), figure
            if got is not None and with_u.budget is not None:
                assert budget_lines(with_u.budget) == budget_lines(got), figure
                assert with_u.uncertainty_db == got.expanded_db, figure
        alone = figure_budget(figure, levels, specs, cal, small_signal_u=small_signal_u)
        assert (want is None) == (got is None) == (alone is None), figure
        if want is None or got is None or alone is None:
            continue
        count += 1
        for made in (got, alone):
            assert abs(made.combined_db - want.combined_db) <= 1e-12, figure
            assert abs(made.expanded_db - want.expanded_db) <= 1e-12, figure
            assert made.coverage_factor == want.coverage_factor
            lines = budget_lines(made)
            assert lines == want.contributions, figure
            assert ([c.as_dict() for c in lines]
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
    figures, captures = _synthetic(3_000, seed=8)
    assert assert_same_budgets(figures, captures) >= 600


def test_budgets_made_after_the_output_frequency_are_the_budgets_made_before():
    """The reduction gives each figure its output frequency first, in place (the old
    conditions mappings freed before the budgets are made), then its budget in place: the
    figures, budgets and uncertainties of the copying passes in the other order (a budget
    does not depend on the output frequency; a worse-of-two-sides headline still takes its
    side's budget)."""
    from sweeprig.analysis.budget_groups import attach_uncertainty_in_place
    from sweeprig.analysis.direction import add_output_frequency_in_place, with_output_frequency

    figures, captures = _synthetic(800, seed=3)
    expected = with_output_frequency(attach_uncertainty(figures, captures), (1, -1))
    owned = list(figures)
    add_output_frequency_in_place(owned, (1, -1))
    attach_uncertainty_in_place(owned, captures)
    assert owned == expected
    assert all(dict(a.conditions) == dict(b.conditions)
               and (a.budget is None) == (b.budget is None)
               and (a.budget is None or budget_lines(a.budget) == budget_lines(b.budget))
               and (a.uncertainty_db == b.uncertainty_db
                    or (math.isnan(a.uncertainty_db) and math.isnan(b.uncertainty_db)))
               for a, b in zip(owned, expected, strict=True))
    assert sum(f.budget is not None for f in owned) >= 300
    assert any(f.name in ("iip3", "oip3") and f.budget is not None for f in owned)


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


def test_figures_of_one_kind_share_one_shared_part():
    figures = [Figure("conversion_gain", 10.0, "dB", points=(p,)) for p in (2, 3, 4)]
    figures.append(Figure("im3_low", -50.0, "dBc", points=(0,)))
    budgets = grouped_budgets(figures, EDGES, InstrumentSpecs(), UNCALIBRATED)
    assert budgets[0] is not None and budgets[1] is not None and budgets[2] is not None
    assert budgets[0].shared is budgets[1].shared is budgets[2].shared
    assert budgets[3] is not None and budgets[3].shared is not budgets[0].shared
    attached = attach_uncertainty(figures, EDGES)
    assert attached[0].uncertainty_db == attached[2].uncertainty_db
    assert attached[0].budget is not None and attached[0].budget.snr_db == (80.0,)


def test_the_noise_columns_are_the_scalar_lines():
    """noise_contributions_db and scatter_contributions_db (numpy, a group at once) are the
    scalar noise_bias_db and noise_scatter_db lines' |c|·u, within 1e-15 dB."""
    snr = np.array([-math.inf, -3.0, 0.0, 0.5, 3.0, 10.0, 47.25, 299.0, 320.0, math.inf,
                    math.nan])
    averages = np.array([1, 2, 1, 4, 1, 16, 1, 1, 3, 1, 1])
    noise = noise_contributions_db(snr, -0.5)
    scatter = scatter_contributions_db(snr, averages, 1.5)
    for s, a, n_db, s_db in zip(snr.tolist(), averages.tolist(), noise.tolist(),
                                scatter.tolist(), strict=True):
        want_n = (made_line("noise", "", noise_bias_db(s), "rectangular", -0.5, "B",
                            "").contribution_db if math.isfinite(s) else 0.0)
        want_s = 1.5 * noise_scatter_db(s, a)
        assert abs(n_db - want_n) <= 1e-15 and abs(s_db - want_s) <= 1e-15, (s, a)


def _dict_levels(captures: pd.DataFrame) -> tuple[dict, dict, dict, dict]:
    """The captures' levels as dicts, row by row (as earlier versions held them): the
    attenuation repeats left out, the later row winning, an m×n spur under its own name."""
    level: dict = {}
    floor: dict = {}
    averages: dict = {}
    drive: dict = {}
    for row in captures.to_dict("records"):
        if row.get("atten_check") is True:
            continue
        names = [str(row["reading"])]
        m, n = float(row.get("m", math.nan)), float(row.get("n", math.nan))
        if names[0] == "spur" and math.isfinite(m) and math.isfinite(n):
            names.append(f"spur.{int(m)}x{int(n)}")
        av = float(row.get("averages", math.nan))
        for name in names:
            key = (int(row["point"]), name)
            level[key] = float(row["level_dbm"])
            floor[key] = float(row.get("noise_floor_dbm", math.nan))
            averages[key] = int(av) if math.isfinite(av) and av >= 1 else 1
        drive[int(row["point"])] = float(row["rf_power_dbm"])
    return level, floor, averages, drive


def test_point_levels_are_the_captures_row_by_row():
    """PointLevels (numpy tables per reading) gives every level, input power, lowest SNR and
    worst scatter a row-by-row reading of the captures gives."""
    _, synthetic = _synthetic(600, seed=3)
    for captures in (EDGES, synthetic.assign(atten_check=synthetic["point"] % 7 == 0)):
        levels = PointLevels.from_captures(captures)
        level, floor, averages, drive = _dict_levels(captures)
        points = sorted({p for p, _ in level} | {10_000})
        readings = sorted({r for _, r in level} | {"nothing"})
        assert levels.inputs_dbm(points) == pytest.approx(
            [drive.get(p, math.nan) for p in points], nan_ok=True)
        for reading in readings:
            assert levels.levels_dbm(points, reading) == pytest.approx(
                [level.get((p, reading), math.nan) for p in points], nan_ok=True)
            for p in points[:40]:
                key = (p, reading)
                snr = level[key] - floor[key] if key in level else math.nan
                got = levels.min_snr_db([p], reading)
                assert (got == snr) or (math.isnan(got) and not math.isfinite(snr))
                worst = levels.worst_scatter([p], reading)
                if math.isnan(snr):
                    assert worst is None
                else:
                    assert worst == (noise_scatter_db(snr, averages[key]), snr, averages[key])


def test_fast_lines_are_the_dataclass():
    line = made_line("noise", "analyzer noise", 0.043, "rectangular", -0.5, "B", "measured")
    assert type(line) is Contribution
    twin = Contribution("noise", "analyzer noise", 0.043, "rectangular", -0.5, "B",
                        "measured")
    assert line == twin and hash(line) == hash(twin)
    assert line.contribution_db == twin.contribution_db
    assert Budget((line, twin), 2.0).combined_db == Budget((twin, twin), 2.0).combined_db
