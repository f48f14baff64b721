"""Uncertainty budgets (sweeprig.analysis.uncertainty), checked against the GUM and the
published mismatch formula, and against numpy/scipy computations done another way."""

from __future__ import annotations

import math
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy.optimize import curve_fit

from sweeprig.analysis.budget_groups import attach_uncertainty, figure_budget
from sweeprig.analysis.figures import Figure
from sweeprig.analysis.limits import FAIL, INCONCLUSIVE, PASS, Limit, assess, judge
from sweeprig.analysis.reduce import RunFigures, reduce_run
from sweeprig.analysis.uncertainty import (
    ASSUMED,
    DIVISORS,
    Budget,
    CalibrationState,
    Contribution,
    InstrumentSpecs,
    PointLevels,
    Spec,
    combine,
    intercept_fit_u_db,
    mean_u_db,
    mismatch_half_width_db,
    mismatch_limits_db,
    noise_bias_db,
    noise_scatter_db,
    standard_uncertainty,
    uncertainty_text,
)
from sweeprig.engine.session import run_sequence, shipped_sequences_dir
from sweeprig.sim.bench import BENCHES_DIR
from sweeprig.store.sqlite import SqliteRunStore

# ---------------------------------------------------------------------------------------------
# the GUM's rules


def test_divisors_are_the_gums():
    # JCGM 100:2008 4.3.7: a rectangular distribution of half-width a has u = a/√3;
    # 4.3.9: a triangular one u = a/√6; 6.2.1: U = k·u, so a value stated at k = 2 has u = U/2.
    assert standard_uncertainty(0.3, "rectangular") == pytest.approx(0.3 / math.sqrt(3))
    assert standard_uncertainty(0.3, "triangular") == pytest.approx(0.3 / math.sqrt(6))
    assert standard_uncertainty(0.3, "normal-k2") == pytest.approx(0.15)
    # U-shaped (arcsine) distribution of half-width a: variance a²/2 (EA-4/02 M, from memory;
    # it is the variance of a·cos φ with φ uniform, checked numerically below).
    assert standard_uncertainty(0.3, "u-shaped") == pytest.approx(0.3 / math.sqrt(2))
    phases = np.linspace(0.0, 2.0 * np.pi, 200_001)
    assert float(np.std(0.3 * np.cos(phases))) == pytest.approx(0.3 / math.sqrt(2), rel=1e-4)
    with pytest.raises(ValueError, match="unknown distribution"):
        standard_uncertainty(0.3, "gaussian")


def test_rss_and_k2_follow_jcgm_100_equation_10():
    # JCGM 100:2008 eq. (10), uncorrelated inputs: u_c² = Σ (c_i u(x_i))²; 6.2.1: U = k u_c.
    terms = (
        Contribution("a", "", 0.5, "rectangular", -1.0),
        Contribution("b", "", 0.1, "normal-k2", 1.0),
        Contribution("c", "", 0.2, "standard", 0.5),
    )
    by_hand = math.sqrt((0.5 / math.sqrt(3)) ** 2 + 0.05 ** 2 + (0.5 * 0.2) ** 2)
    budget = Budget(terms)
    assert budget.combined_db == pytest.approx(by_hand)
    assert budget.expanded_db == pytest.approx(2.0 * by_hand)
    assert combine([3.0, 4.0]) == pytest.approx(5.0)
    assert combine([]) == 0.0


def test_combined_uncertainty_agrees_with_a_monte_carlo_propagation():
    # JCGM 101:2008 (GUM Supplement 1): propagate the distributions themselves by sampling;
    # for a linear model the standard deviation of the output must equal eq. (10)'s u_c, and
    # the interval ± U (k = 2) must hold at least about 95 % of the outputs.
    rng = np.random.default_rng(10)
    n = 400_000
    rect = rng.uniform(-1.0, 1.0, n)                       # input level, ±1 dB rectangular
    arcsine = 0.087 * np.cos(rng.uniform(0, 2 * np.pi, n))  # mismatch, U-shaped
    normal = rng.normal(0.0, 0.25, n)                      # analyzer, 0.5 dB at k = 2
    fit = rng.normal(0.0, 0.1, n)                          # Type A term
    output = -1.0 * rect + 1.0 * arcsine + 1.0 * normal + 0.5 * fit
    budget = Budget((
        Contribution("in", "", 1.0, "rectangular", -1.0),
        Contribution("mm", "", 0.087, "u-shaped", 1.0),
        Contribution("sa", "", 0.5, "normal-k2", 1.0),
        Contribution("fit", "", 0.1, "standard", 0.5, "A"),
    ))
    assert float(np.std(output)) == pytest.approx(budget.combined_db, rel=0.01)
    assert float(np.mean(np.abs(output) <= budget.expanded_db)) >= 0.95


# ---------------------------------------------------------------------------------------------
# mismatch and noise


def test_mismatch_limits_are_the_published_formula():
    # Mismatch uncertainty limits 20·log10(1 ± |Γs||ΓL|) (e.g. Pozar, Microwave Engineering;
    # from memory). Worked example of a power-sensor user manual (a published guide): a source
    # of VSWR 1.50 (|Γ| = 0.200) on a sensor of VSWR 1.20 (|Γ| = 0.091): the power may be off
    # by (1 ± 0.200·0.091)² − 1 = ±3.67 %.
    gamma_s = (1.50 - 1) / (1.50 + 1)
    gamma_l = (1.20 - 1) / (1.20 + 1)
    low, high = mismatch_limits_db(gamma_s, gamma_l)
    assert 100 * (10 ** (high / 10) - 1) == pytest.approx(3.67, abs=0.01)
    assert low == pytest.approx(20 * math.log10(1 - gamma_s * gamma_l))
    # Second published worked example (an RF knowledge-base page): |Γs| = 0.20, |ΓL| = 0.07
    # gives ±20·log10(1 ± 0.014) = ±0.121 dB (the lower limit is −0.122 dB).
    low, high = mismatch_limits_db(0.20, 0.07)
    assert high == pytest.approx(0.121, abs=0.0005)
    assert low == pytest.approx(-0.1225, abs=0.0005)
    # The budget uses the larger magnitude (the safe side).
    assert mismatch_half_width_db(0.20, 0.07) == pytest.approx(-low)
    assert mismatch_limits_db(0.0, 0.5) == (0.0, 0.0)


def test_noise_raises_a_product_by_the_power_sum():
    # Powers of uncorrelated signals add: a product at the noise level reads 10·log10(2) high.
    assert noise_bias_db(0.0) == pytest.approx(10 * math.log10(2))
    assert noise_bias_db(10.0) == pytest.approx(10 * math.log10(1.1))
    assert noise_bias_db(60.0) < 1e-5
    assert noise_bias_db(math.nan) == 0.0


def test_noise_scatter_agrees_with_a_monte_carlo_of_a_sine_in_complex_gaussian_noise():
    # numpy Monte Carlo of the envelope |A + n| (n circular complex Gaussian, E|n|² = 1,
    # A² = ρ) read in dB: its standard deviation against the small-noise expansion
    # (20/ln 10)·sqrt(1/(2ρ)) (derived in noise_scatter_db's docstring).
    rng = np.random.default_rng(2417)
    draws = 200_000
    noise = (rng.standard_normal(draws) + 1j * rng.standard_normal(draws)) / math.sqrt(2.0)
    for snr_db, rel in ((10.0, 0.03), (15.0, 0.03), (20.0, 0.03), (30.0, 0.03), (40.0, 0.03),
                        (3.0, 0.07), (6.0, 0.07)):
        rho = 10.0 ** (snr_db / 10.0)
        simulated = float(np.std(20.0 * np.log10(np.abs(math.sqrt(rho) + noise))))
        # the displayed level holds the noise power as well: it reads 10·log10(ρ + 1) above it
        stated = noise_scatter_db(10.0 * math.log10(rho + 1.0))
        assert stated == pytest.approx(simulated, rel=rel), snr_db
        # averaging N sweeps: the mean of N independent readings, σ/√N (JCGM 100:2008 4.2.3)
        four = 20.0 * np.log10(np.abs(math.sqrt(rho) + noise[: draws // 4 * 4])).reshape(-1, 4)
        assert noise_scatter_db(10.0 * math.log10(rho + 1.0), 4) == pytest.approx(
            float(np.std(four.mean(axis=1))), rel=rel + 0.02), snr_db
    # Noise alone (A = 0): |n|² ~ Exp(1), std of its log (10/ln 10)·π/√6 = 5.57 dB (standard
    # result), the ceiling where the expansion no longer holds; it bounds the Monte Carlo.
    alone = float(np.std(20.0 * np.log10(np.abs(noise))))
    assert noise_scatter_db(-3.0) == pytest.approx(alone, rel=0.01)
    for snr_db in (0.0, 1.0, 2.0):
        rho = 10.0 ** (snr_db / 10.0)
        simulated = float(np.std(20.0 * np.log10(np.abs(math.sqrt(rho) + noise))))
        assert simulated <= noise_scatter_db(10.0 * math.log10(rho + 1.0)) <= alone + 0.05
    assert noise_scatter_db(math.nan) == 0.0 and noise_scatter_db(400.0) == 0.0


def test_noise_scatter_is_counted_once():
    # A single reading takes the scatter with the figure's sensitivity; a fitted figure's
    # Type A fit term already holds the scatter of its points, so it does not take it again.
    rows = []
    for i, x in enumerate(np.arange(-30.0, -18.0, 2.0)):
        rows.append((i, "if", x, x + 12.0 + 0.02 * (-1) ** i, -100.0))
        rows.append((i, "im3_low", x, 3 * x + 20.0 + 0.1 * (-1) ** i, -100.0))
    levels = PointLevels.from_captures(_captures(rows))
    fitted = figure_budget(Figure("iip3_low", -4.0, "dBm", points=tuple(range(6))), levels,
                           InstrumentSpecs())
    single = figure_budget(Figure("iip3_point_low", -4.0, "dBm", points=(0,)), levels,
                           InstrumentSpecs())
    assert fitted is not None and single is not None
    assert "noise_scatter" not in {c.name for c in fitted.contributions}
    (term,) = [c for c in single.contributions if c.name == "noise_scatter"]
    assert term.sensitivity == -0.5  # IIP3 = P_in + (P_fund − P_IM3)/2
    assert term.standard_db == pytest.approx(noise_scatter_db(3 * -30.0 + 20.0 + 0.1 + 100.0))


def test_the_figures_of_one_sweep_share_their_fit_not_their_lists():
    # The input and output intercepts of a product fit the same points: the same fit line
    # for both; a list of levels handed out is the caller's own to change.
    rows = []
    for i, x in enumerate(np.arange(-30.0, -18.0, 2.0)):
        rows.append((i, "if", x, x + 12.0 + 0.02 * (-1) ** i, -100.0))
        rows.append((i, "im3_low", x, 3 * x + 20.0 + 0.1 * (-1) ** i, -100.0))
    levels = PointLevels.from_captures(_captures(rows))
    points = tuple(range(6))
    iip3 = figure_budget(Figure("iip3_low", -4.0, "dBm", points=points), levels,
                         InstrumentSpecs())
    oip3 = figure_budget(Figure("oip3_low", 8.0, "dBm", points=points), levels,
                         InstrumentSpecs())
    assert iip3 is not None and oip3 is not None
    assert [c for c in iip3.own_lines if c.name == "fit"] == \
        [c for c in oip3.own_lines if c.name == "fit"]
    first = levels.levels_dbm(points, "if")
    first[0] = 99.0
    assert levels.levels_dbm(points, "if")[0] == pytest.approx(-30.0 + 12.02)
    inputs = levels.inputs_dbm(points)
    inputs.clear()
    assert levels.inputs_dbm(points) == pytest.approx(list(np.arange(-30.0, -18.0, 2.0)))


def test_each_spur_takes_its_own_readings_noise_and_averages():
    # Several m×n spurs share a point: each figure's noise is its own reading's.
    captures = _captures([(0, "if", -20.0, -8.0, -100.0), (0, "spur", -20.0, -60.0, -100.0),
                          (0, "spur", -20.0, -95.0, -100.0)])
    captures["m"] = [np.nan, 1.0, 2.0]
    captures["n"] = [np.nan, 0.0, -1.0]
    captures["averages"] = pd.array([1, 1, 16], dtype="Int64")
    levels = PointLevels.from_captures(captures)
    strong = figure_budget(Figure("spur_dbc", -52.0, "dBc", conditions={"m": 1, "n": 0},
                                  points=(0,)), levels, InstrumentSpecs())
    weak = figure_budget(Figure("spur_dbc", -87.0, "dBc", conditions={"m": 2, "n": -1},
                                points=(0,)), levels, InstrumentSpecs())
    assert strong is not None and weak is not None
    (s,) = [c for c in strong.contributions if c.name == "noise_scatter"]
    (w,) = [c for c in weak.contributions if c.name == "noise_scatter"]
    assert "SNR 40.0 dB" in s.what and s.standard_db == pytest.approx(noise_scatter_db(40.0))
    assert "SNR 5.0 dB, 16 sweeps" in w.what
    assert w.standard_db == pytest.approx(noise_scatter_db(5.0) / 4.0)


def test_the_im3_asymmetry_takes_the_noise_of_both_products():
    # IM3_high − IM3_low: each product's reading scatters on its own, sensitivities ±1.
    levels = PointLevels.from_captures(_captures([
        (0, "if", -35.0, -23.0, -100.0), (0, "im3_low", -35.0, -88.0, -100.0),
        (0, "im3_high", -35.0, -82.0, -100.0)]))
    budget = figure_budget(Figure("im3_asymmetry", 6.0, "dB", points=(0,)), levels,
                           InstrumentSpecs())
    assert budget is not None
    scatter = {c.what.split(" in the")[0]: c for c in budget.contributions
               if c.name == "noise_scatter"}
    assert scatter["scatter of one reading of the upper IM3 product"].sensitivity == 1.0
    assert scatter["scatter of one reading of the lower IM3 product"].sensitivity == -1.0
    assert scatter["scatter of one reading of the lower IM3 product"].standard_db == pytest.approx(
        noise_scatter_db(12.0))
    assert len([c for c in budget.contributions if c.name == "noise"]) == 2


# ---------------------------------------------------------------------------------------------
# fits


def test_intercept_fit_uncertainty_agrees_with_scipy_curve_fit():
    # The constrained lines' offsets are least-squares means; scipy's curve_fit (its pcov,
    # scaled by the residual variance) gives their standard errors another way.
    rng = np.random.default_rng(3)
    x = np.arange(-30.0, -14.0, 2.0)
    fund = x + 12.0 + rng.normal(0, 0.05, x.size)
    im3 = 3 * x + 20.0 + rng.normal(0, 0.2, x.size)
    _, cov_a = curve_fit(lambda xx, a: xx + a, x, fund, p0=[0.0])
    _, cov_b = curve_fit(lambda xx, b: 3 * xx + b, x, im3, p0=[0.0])
    expected = math.sqrt(cov_a[0, 0] + cov_b[0, 0]) / 2  # IIP3 = (a − b)/2
    assert intercept_fit_u_db(x, fund, im3, 3) == pytest.approx(expected, rel=1e-6)
    assert math.isnan(intercept_fit_u_db([1.0], [2.0], [3.0], 3))
    assert mean_u_db([1.0, 2.0, 3.0]) == pytest.approx(1.0 / math.sqrt(3))
    assert math.isnan(mean_u_db([1.0]))
    # only the known values count (NaN, ±inf left out), and the pair's points where both are
    assert mean_u_db([1.0, math.nan, 3.0, math.inf, 2.0]) == 1.0 / math.sqrt(3)
    assert math.isnan(mean_u_db([1.0, math.nan]))
    partial = intercept_fit_u_db([*x, -10.0], [*fund, math.nan], [*im3, -20.0], 3)
    assert partial == intercept_fit_u_db(x, fund, im3, 3)


# ---------------------------------------------------------------------------------------------
# budgets of figures


def _captures(rows: list[tuple[int, str, float, float, float]]) -> pd.DataFrame:
    """(point, reading, rf_power_dbm, level_dbm, noise_floor_dbm) rows."""
    return pd.DataFrame({
        "point": [r[0] for r in rows], "reading": [r[1] for r in rows],
        "rf_power_dbm": [r[2] for r in rows], "level_dbm": [r[3] for r in rows],
        "noise_floor_dbm": [r[4] for r in rows], "atten_check": [False] * len(rows),
    })


def test_conversion_gain_budget_uncalibrated_and_calibrated():
    captures = _captures([(0, "if", -20.0, -7.5, -97.5)])
    levels = PointLevels.from_captures(captures)
    gain = Figure("conversion_gain", 12.5, "dB", points=(0,))
    specs = InstrumentSpecs()
    budget = figure_budget(gain, levels, specs)
    assert budget is not None
    names = {c.name: c for c in budget.contributions}
    assert set(names) == {"input_level", "input_mismatch", "analyzer_absolute", "output_path",
                          "output_mismatch", "noise", "noise_scatter"}
    assert names["noise_scatter"].kind == "A" and names["noise_scatter"].sensitivity == 1.0
    assert names["input_level"].sensitivity == -1.0  # G = P_IF − P_RF
    assert names["analyzer_absolute"].sensitivity == 1.0
    assert names["input_level"].origin == ASSUMED
    assert "SNR 90.0 dB" in names["noise"].what
    u_mm = mismatch_half_width_db(0.05, 0.2) / math.sqrt(2)
    by_hand = math.sqrt((1.0 ** 2 + 0.5 ** 2 + 0.3 ** 2) / 3 + 2 * u_mm ** 2
                        + (noise_bias_db(90.0) / math.sqrt(3)) ** 2 + noise_scatter_db(90.0) ** 2)
    assert budget.expanded_db == pytest.approx(2 * by_hand)

    # Only the connections the gain went through count: rf in, if out.
    partial = figure_budget(gain, levels, specs, CalibrationState(frozenset({"rf", "lo_port"})))
    assert partial is not None
    partial_terms = {c.name for c in partial.contributions}
    assert "input_power_meter" in partial_terms and "analyzer_absolute" in partial_terms
    cal = CalibrationState(frozenset({"rf", "if"}), repeatability_db=0.01, origin="cal file")
    calibrated = figure_budget(gain, levels, specs, cal)
    assert calibrated is not None
    names = {c.name for c in calibrated.contributions}
    assert {"input_power_meter", "output_power_meter", "calibration_repeatability"} <= names
    assert "input_level" not in names and "analyzer_absolute" not in names
    # With the default specifications a calibrated gain is known to better than 0.5 dB (k = 2).
    assert calibrated.expanded_db < 0.5 < budget.expanded_db


def test_intercept_budget_has_the_regression_and_the_noise_of_the_product():
    rows = []
    for i, x in enumerate(np.arange(-30.0, -18.0, 2.0)):
        rows.append((i, "if", x, x + 12.0 + 0.02 * (-1) ** i, -100.0))
        rows.append((i, "im3_low", x, 3 * x + 20.0 + 0.1 * (-1) ** i, -100.0))
    levels = PointLevels.from_captures(_captures(rows))
    figure = Figure("iip3_low", -4.0, "dBm", points=tuple(range(6)))
    budget = figure_budget(figure, levels, InstrumentSpecs())
    assert budget is not None
    terms = {c.name: c for c in budget.contributions}
    assert terms["fit"].kind == "A" and terms["fit"].standard_db > 0
    assert terms["noise"].sensitivity == -0.5  # IIP3 = P_in + (P_fund − P_IM3)/2
    assert terms["analyzer_linearity"].sensitivity == 0.5
    assert "analyzer_absolute" not in terms  # an output level error moves both lines alike
    assert "SNR 30.1 dB" in terms["noise"].what  # lowest: 3·(−30) + 20 + 0.1 + 100


def test_an_im3_figure_in_dbc_carries_twice_the_drive_level_error():
    # P_IM3 − P_fund = −2·(IIP3 − P_in) per tone (two-tone relation: Razavi, RF
    # Microelectronics; Pozar): tones δ dB off at the DUT move the dBc figure by 2δ. The
    # uncalibrated default simulated bench drives its tones 0.85 dB low at −25 dBm, 25 °C:
    # its im3_high read 1.7 dB under the part's own, with a budget of 0.66 dB without this term.
    iip3_dbm = 3.0

    def im3_dbc(p_in_dbm: float) -> float:
        return -2.0 * (iip3_dbm - p_in_dbm)

    assert im3_dbc(-25.0) - im3_dbc(-25.85) == pytest.approx(1.7)
    levels = PointLevels.from_captures(_captures([
        (0, "if", -25.0, -13.0, -100.0), (0, "im3_high", -25.0, -69.0, -100.0)]))
    figure = Figure("im3_high", -56.0, "dBc", points=(0,))
    budget = figure_budget(figure, levels, InstrumentSpecs())
    assert budget is not None
    (level,) = [c for c in budget.contributions if c.name == "input_level"]
    assert level.sensitivity == 2.0
    assert budget.expanded_db >= 1.7
    calibrated = figure_budget(figure, levels, InstrumentSpecs(),
                               CalibrationState(frozenset({"rf", "rf2"})))
    assert calibrated is not None
    (meter,) = [c for c in calibrated.contributions if c.name == "input_power_meter"]
    assert meter.sensitivity == 2.0


def test_bounds_and_other_units_have_no_budget():
    levels = PointLevels.from_captures(_captures([(0, "if", -20.0, -8.0, -90.0)]))
    specs = InstrumentSpecs()
    assert figure_budget(Figure("iip3_low", 5.0, "dBm", ">", points=(0,)), levels, specs) is None
    assert figure_budget(Figure("supply_current", 0.03, "A", points=(0,)), levels, specs) is None
    assert figure_budget(Figure("conversion_gain", math.nan, "dB"), levels, specs) is None


def test_attach_sets_every_budget_and_the_headline_intercept_takes_its_sides():
    rows = [(0, "if", -20.0, -8.0, -90.0), (0, "im3_low", -20.0, -50.0, -90.0),
            (1, "if", -18.0, -6.0, -90.0), (1, "im3_low", -18.0, -44.0, -90.0)]
    conditions = {"study": "two-tone"}
    figures = [
        Figure("conversion_gain", 12.0, "dB", points=(0,)),
        Figure("iip3_low", 1.0, "dBm", conditions=conditions, points=(0, 1)),
        Figure("iip3_high", 2.0, "dBm", conditions=conditions, points=(0, 1)),
        Figure("iip3", 1.0, "dBm", conditions=conditions, points=(0, 1)),
        Figure("supply_current", 0.03, "A"),
    ]
    out = attach_uncertainty(figures, _captures(rows))
    assert [math.isfinite(f.uncertainty_db) for f in out] == [True, True, True, True, False]
    assert "fit" not in {c.name for c in out[2].budget.contributions}  # no im3_high read
    assert out[3].budget is out[1].budget
    assert out[0].uncertainty_db == pytest.approx(out[0].budget.expanded_db)
    assert out[0] == figures[0]  # the uncertainty does not change what a figure is


def test_a_runs_budgets_share_their_lines_and_equal_budgets_made_one_by_one():
    """attach_uncertainty gives every figure of a kind one shared part and its own noise
    lines (the per-drive IIP3 and OIP3 read the same product: the same lines); every budget
    is what figure_budget gives for the figure alone."""
    rows = [(0, "if", -20.0, -8.0, -90.0), (0, "im3_low", -20.0, -70.0, -90.0),
            (1, "if", -18.0, -6.0, -90.0), (1, "im3_low", -18.0, -64.0, -90.0)]
    figures = [Figure(name, 20.0 + k, "dBm", conditions={"study": "two-tone"}, points=(p,))
               for p in (0, 1) for k, name in enumerate(("iip3_point_low", "oip3_point_low",
                                                          "im3_low"))]
    captures = _captures(rows)
    out = attach_uncertainty(figures, captures)
    levels, specs = PointLevels.from_captures(captures), InstrumentSpecs()
    for made, figure in zip(out, figures, strict=True):
        alone = figure_budget(figure, levels, specs)
        assert made.budget.contributions == alone.contributions
        assert made.uncertainty_db == pytest.approx(alone.expanded_db, abs=1e-12)

    def noise(budget):
        return [c for c in budget.contributions if c.name.startswith("noise")]

    assert {c.name for c in noise(out[0].budget)} == {"noise", "noise_scatter"}
    assert noise(out[0].budget) == noise(out[1].budget)  # same product, same c
    assert noise(out[0].budget) != noise(out[3].budget)  # another point: its own
    assert out[0].budget.shared is out[3].budget.shared  # one kind: one shared part


def test_text_with_uncertainty():
    assert uncertainty_text(12.4913, "dB", 0.1804) == "12.49 ± 0.18 dB (k = 2)"


# ---------------------------------------------------------------------------------------------
# limits


def test_a_verdict_says_when_the_uncertainty_straddles_the_limit():
    figure = Figure("conversion_gain", 12.49, "dB", uncertainty_db=0.18)
    near = Limit("conversion_gain", min=12.4)
    far = Limit("conversion_gain", min=10.0)
    judged = judge(figure, near)
    assert judged.verdict == PASS and judged.straddles
    assert "straddles min 12.4" in judged.reason
    assert not judge(figure, far).straddles
    assert "straddles" not in judge(figure, far).reason
    # Guard-banded (off by default): only value ± U wholly inside passes, wholly outside fails.
    assert judge(figure, near, guard_band=True).verdict == INCONCLUSIVE
    assert judge(figure, far, guard_band=True).verdict == PASS
    assert judge(figure, Limit("conversion_gain", min=13.0), guard_band=True).verdict == FAIL
    assert assess([figure], [near], guard_band=True).verdict == INCONCLUSIVE
    assert assess([figure], [near]).verdict == PASS
    # A figure without an uncertainty never straddles.
    assert not judge(Figure("conversion_gain", 12.49, "dB"), near).straddles


def test_specs_carry_their_origin():
    spec = Spec(0.3, "normal-k2", "bench file [uncertainty].analyzer_absolute")
    specs = InstrumentSpecs(analyzer_absolute=spec)
    levels = PointLevels.from_captures(_captures([(0, "if", -20.0, -8.0, math.nan)]))
    budget = figure_budget(Figure("conversion_gain", 12.0, "dB", points=(0,)), levels, specs)
    assert budget is not None
    (term,) = [c for c in budget.contributions if c.name == "analyzer_absolute"]
    assert term.standard_db == pytest.approx(0.15) and term.origin == spec.origin
    assert "noise" not in {c.name for c in budget.contributions}  # floor not recorded
    assert set(DIVISORS) >= {"rectangular", "u-shaped", "normal-k2"}


# ---------------------------------------------------------------------------------------------
# coverage on the simulated bench


def _run_with_seed(tmp_path: Path, sequence: Path, description: Path, seed: int,
                   part: str = "kx-2417") -> RunFigures:
    """Run ``sequence`` on the simulated bench ``description`` with its ``seed`` and ``part``
    replaced and the part's leakage phases held (``[dut] leakage_phase = false``)."""
    folder = tmp_path / f"{sequence.stem}-{description.stem}-{seed}"
    folder.mkdir()
    text = re.sub(r"(?m)^seed = \d+$", f"seed = {seed}", description.read_text("utf-8"))
    text = re.sub(r"(?m)^part = .*$", f'part = "{part}"', text)
    assert f"seed = {seed}" in text and f'part = "{part}"' in text
    if "\n[dut]\n" in text:
        text = text.replace("\n[dut]\n", "\n[dut]\nleakage_phase = false\n")
    else:
        text += "\n[dut]\nleakage_phase = false\n"
    (folder / "sim-bench.toml").write_text(text, "utf-8")
    outcome = run_sequence(sequence, sim=True, sim_description=folder / "sim-bench.toml",
                           store_path=folder / "runs.sqlite", log_dir=folder)
    assert outcome.status == "complete", outcome.reason
    with SqliteRunStore(folder / "runs.sqlite", create=False) as store:
        return reduce_run(store, outcome.run_id)


def _disagreements(one: RunFigures, other: RunFigures, *, without: str = ""
                   ) -> tuple[int, list[tuple]]:
    """How many figures both runs state with an uncertainty, and those whose difference is
    more than the root sum of squares of the two expanded uncertainties (k = 2) (``without``:
    a budget term left out, to show what it adds)."""

    def expanded(figure: Figure) -> float:
        kept = [c.contribution_db for c in figure.budget.contributions if c.name != without]
        return figure.budget.coverage_factor * combine(kept)

    def key(figure: Figure) -> tuple:
        return figure.name, tuple(sorted(figure.conditions.items()))

    theirs = {key(f): f for f in other.figures}
    compared, wrong = 0, []
    for mine in one.figures:
        twin = theirs.get(key(mine))
        if twin is None or mine.budget is None or twin.budget is None:
            continue
        compared += 1
        if abs(mine.value - twin.value) > math.hypot(expanded(mine), expanded(twin)):
            wrong.append((key(mine), mine.value, twin.value))
    return compared, wrong


def test_two_seeds_of_the_simulated_bench_agree_within_their_uncertainties(tmp_path: Path):
    # GUM (JCGM 100:2008) 6.2: U (k = 2) is expected to hold the value; two measurements of
    # one quantity differ by less than the root sum of squares of their U about 95 % of the
    # time (both cover the truth). The seed of the simulated bench draws the analyzer's noise
    # and the phases of its own products (added to a line as voltages): a product at or under
    # the noise, at a random phase, scatters the reading like the noise itself
    # ((20/ln 10)·sqrt(I/(2S)) for an interferer of power I, the same expansion). The part's
    # leakage phases are held: the seed would redraw them, a different part, not a scatter.
    quick = shipped_sequences_dir() / "demo" / "quick.toml"
    default = BENCHES_DIR / "default.toml"
    runs = [_run_with_seed(tmp_path, quick, default, seed) for seed in (1, 2)]
    compared, wrong = _disagreements(*runs)
    assert compared >= 25 and not wrong, wrong
    # Without the reading's scatter the RF→IF isolation read about 10 dB above the noise
    # disagreed by some 4 dB: the term is what covers it.
    _, before = _disagreements(*runs, without="noise_scatter")
    assert any(k[0] == "rf_if_isolation" for k, *_ in before), before
    noisy = [f for f in runs[0].figures if f.name == "rf_if_isolation" and f.budget is not None
             and any(c.name == "noise_scatter" and c.contribution_db > 0.5
                     for c in f.budget.contributions)]
    assert noisy
    # The accuracy sequence's m×n spurs (several under 20 dB above the noise) on the exact
    # bench (sources without spurs, the analyzer's products added as powers): the seed draws
    # only the noise.
    accuracy = Path(__file__).parent / "data" / "accuracy-kx2417.toml"
    exact = Path(__file__).parent / "data" / "sim-exact.toml"
    runs = [_run_with_seed(tmp_path, accuracy, exact, seed) for seed in (11, 12)]
    compared, wrong = _disagreements(*runs)
    assert compared >= 90 and not wrong, wrong
    spurs = [f for f in runs[0].figures if f.name == "spur_dbm" and f.budget is not None]
    assert sum(any(c.name == "noise_scatter" and c.contribution_db > 0.05
                   for c in f.budget.contributions) for f in spurs) >= 3


@pytest.mark.parametrize("categorical", [False, True], ids=["text", "codes"])
def test_the_levels_leave_out_the_attenuation_repeats(categorical):
    # (read column by column: a large run's capture table is not copied to leave them out)
    captures = _captures([(0, "if", -30.0, -18.0, -100.0), (1, "if", -28.0, -16.0, -100.0)])
    captures["atten_check"] = [False, True]
    captures["wide"] = ["x" * 10, "y" * 10]
    if categorical:  # as the store's capture table holds it
        captures["reading"] = pd.Categorical(captures["reading"])
    levels = PointLevels.from_captures(captures)
    assert levels.levels_dbm([0, 1], "if")[0] == pytest.approx(-18.0)
    assert math.isnan(levels.levels_dbm([0, 1], "if")[1])


def _same_budget(a, b) -> bool:
    """Two FigureBudgets alike field by field, NaN equal to NaN, floats bit for bit."""
    def same(x, y) -> bool:
        if isinstance(x, float) and isinstance(y, float):
            return (math.isnan(x) and math.isnan(y)) or x == y
        if isinstance(x, tuple) and isinstance(y, tuple):
            return len(x) == len(y) and all(same(p, q) for p, q in zip(x, y, strict=True))
        return x == y
    return (a.shared is b.shared and same(a.snr_db, b.snr_db)
            and same(a.scatter_snr_db, b.scatter_snr_db) and a.averages == b.averages
            and a.own_lines == b.own_lines and same(a.combined_db, b.combined_db))


@pytest.mark.parametrize("name, width", [("iip3_low", 6), ("small_signal_gain", 5),
                                         ("input_p1db", 2), ("image_rejection", 2),
                                         ("iip3_low", 1)])
def test_figures_worked_out_together_have_the_budgets_each_has_alone(name: str, width: int):
    # Rows with every reading, rows with a reading or an input missing (NaN, or no row),
    # rows with too few known points, two points at one input (no slope), a point with a
    # floor above its level: each figure's budget is the one it has alone, bit for bit.
    from sweeprig.analysis.budget_groups import _noisy, alike_budgets
    from sweeprig.analysis.uncertainty import MODELS

    rng = np.random.default_rng(5)
    rows = []
    for p in range(60):
        x = -30.0 + (p % 12) * 2.0 if p % 17 else -30.0 + ((p - 1) % 12) * 2.0
        level = x + 12.0 + rng.normal(0.0, 0.05)
        floor = -100.0 if p % 11 else level + 3.0
        if p % 13:
            rows.append((p, "if", x, level if p % 7 else math.nan, floor))
        rows.append((p, "im3_low", x, 3 * x + 20.0 + rng.normal(0.0, 0.1), -100.0))
        rows.append((p, "image", x, level - 40.0 + rng.normal(0.0, 0.5), -110.0))
    levels = PointLevels.from_captures(_captures(rows))
    figures = [Figure(name, 1.0, "dB" if name in ("small_signal_gain", "image_rejection")
                      else "dBm", conditions={"temperature_c": float(k % 3)},
                      points=tuple(range(k, k + width)))
               for k in range(0, 60 - width)]
    specs = InstrumentSpecs()
    small = {(("temperature_c", 0.0),): 0.02, (("temperature_c", 1.0),): math.nan}
    model = MODELS[name]
    together = alike_budgets(model, _noisy(model, model.noise_reading), figures, levels,
                             specs, small_signal_u=small)
    alone = [figure_budget(f, levels, specs, small_signal_u=small) for f in figures]
    assert all(_same_budget(t, a) for t, a in zip(together, alone, strict=True))
    # (both kinds of rows were there: wholly known, and with a level missing)
    gaps = np.isnan(levels.levels_at("if", np.array([f.points for f in figures]))).any(axis=1)
    assert gaps.any() and not gaps.all()
