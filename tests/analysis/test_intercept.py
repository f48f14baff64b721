"""Two-tone intercepts: single-point formula, constrained fits, validity flags."""

import math

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from sweeprig.analysis import compression_figures, intercept_figures, p1db_matcher
from sweeprig.analysis.captures import point_table
from sweeprig.analysis.figures import (
    ANALYZER_DISTORTION,
    ATTEN_CARRIER_MOVED,
    IN_COMPRESSION,
    IN_NOISE,
    NO_VALID_RANGE,
    OVERLOAD,
    POINTS_EXCLUDED,
    SLOPE_OFF,
)
from sweeprig.analysis.intercept import TONE2, fit_intercept, fit_range, intercept_point_dbm
from sweeprig.analysis.synthetic import (
    amplitude_to_dbm,
    cubic_coefficients,
    cubic_compression_captures,
    cubic_two_tone_captures,
    points_frame,
    reading_rows,
)
from sweeprig.errors import InputError

A1, A3 = (float(v) for v in cubic_coefficients(6.0, 10.0))


def _named(figures, name):
    return [f for f in figures if f.name == name]


def _one(figures, name):
    (figure,) = _named(figures, name)
    return figure


def test_single_point_formula_worked_example():
    # Razavi, RF Microelectronics; Pozar, Microwave Engineering:
    # IIP3 = P_in + (P_fund,out − P_IM3,out)/2, OIP3 = IIP3 + G.
    # Worked by hand: −30 dBm per tone in, −20 dBm fundamental out (G = 10 dB), IM3 at
    # −80 dBm: ΔP = 60 dB → IIP3 = −30 + 30 = 0 dBm, OIP3 = 10 dBm.
    assert intercept_point_dbm(-30.0, -20.0, -80.0, 3) == pytest.approx(0.0)
    # IIP2 = P_in + (P_fund,out − P_IM2,out): −30 + (−20 − (−70)) = +20 dBm
    assert intercept_point_dbm(-30.0, -20.0, -70.0, 2) == pytest.approx(20.0)
    pts = points_frame(1, rf_power_dbm=-30.0, rf2_power_dbm=-30.0, rf2_freq_hz=2.401e9)
    df = pd.concat([
        reading_rows(pts, "if", -20.0),
        reading_rows(pts, "im3_low", -80.0),
        reading_rows(pts, "im3_high", -80.0),
    ])
    figs = intercept_figures(df)
    assert _one(figs, "iip3_point_low").value == pytest.approx(0.0)
    assert _one(figs, "oip3_point_low").value == pytest.approx(10.0)
    assert _one(figs, "im3_low").value == pytest.approx(-60.0)


def test_cubic_iip3_and_p1db_recovered_and_9p6_db_apart():
    # Razavi (nonlinearity chapter), pure cubic y = a1·x + a3·x³ with a1·a3 < 0:
    # A_1dB = sqrt(0.145·|a1/a3|), A_IIP3 = sqrt((4/3)·|a1/a3|), IIP3 − P1dB ≈ 9.6 dB.
    p1db_expected = float(amplitude_to_dbm(math.sqrt(0.145 * abs(A1 / A3))))
    iip3_expected = float(amplitude_to_dbm(math.sqrt(4.0 / 3.0 * abs(A1 / A3))))
    assert iip3_expected - p1db_expected == pytest.approx(9.6, abs=0.05)
    comp = compression_figures(cubic_compression_captures(A1, A3, np.arange(-40, 8, 0.5)))
    two_tone = cubic_two_tone_captures(A1, A3, np.arange(-40, 2, 1.0), first_point=1000)
    figs = intercept_figures(two_tone, orders=(3,), input_p1db_dbm=p1db_matcher(comp))
    p1db = _one(comp, "input_p1db").value
    iip3 = _one(figs, "iip3")
    assert p1db == pytest.approx(p1db_expected, abs=0.1)
    assert iip3.value == pytest.approx(iip3_expected, abs=0.1) and iip3.flags == ()
    assert iip3.value - p1db == pytest.approx(9.6, abs=0.15)
    assert _one(figs, "oip3").value == pytest.approx(iip3_expected + 6.0, abs=0.1)
    # the fit range stopped 10 dB below P1dB; drives above are flagged
    assert max(two_tone.loc[two_tone["point"].isin(iip3.points), "rf_power_dbm"]) <= p1db - 10
    top = [f for f in _named(figs, "iip3_point_low") if f.conditions["rf_power_dbm"] == 0.0]
    assert IN_COMPRESSION in top[0].flags


def test_cubic_iip3_without_p1db_uses_the_fundamental_slope():
    iip3_expected = float(amplitude_to_dbm(math.sqrt(4.0 / 3.0 * abs(A1 / A3))))
    figs = intercept_figures(cubic_two_tone_captures(A1, A3, np.arange(-40, 5, 1.0)), orders=(3,))
    assert _one(figs, "iip3").value == pytest.approx(iip3_expected, abs=0.1)
    assert abs(_one(figs, "fund_slope").value - 1.0) <= 0.1


def _linear_two_tone(iip3_dbm, gain_db, x, noise_db, seed):
    # Razavi; Pozar: below compression the fundamental moves 1 dB/dB and IM3 3 dB/dB; with
    # OIP3 = IIP3 + G the IM3 output line is 3·P_in − 2·IIP3 + G.
    rng = np.random.default_rng(seed)
    fund = x + gain_db + rng.uniform(-noise_db, noise_db, x.size)
    im3 = 3 * x - 2 * iip3_dbm + gain_db + rng.uniform(-noise_db, noise_db, x.size)
    return fund, im3


def test_constrained_fit_recovers_a_known_intercept_with_noise():
    x = np.arange(-40.0, -10.0, 1.0)
    for seed in range(20):
        fund, im3 = _linear_two_tone(7.5, 4.0, x, 0.2, seed)
        fit = fit_intercept(x, fund, im3, order=3)
        assert fit.input_dbm == pytest.approx(7.5, abs=0.2)
        assert fit.output_dbm == pytest.approx(11.5, abs=0.2)
        assert fit.fund_slope == pytest.approx(1.0, abs=0.05)
        assert fit.product_slope == pytest.approx(3.0, abs=0.05)
        valid, _ = fit_range(x, fund, im3, np.full(x.size, -200.0))
        assert valid.all()  # linear data: the slope rule keeps every point


def test_fit_range_respects_noise_and_p1db():
    x = np.arange(-40.0, 0.0, 1.0)
    fund, im3 = _linear_two_tone(10.0, 0.0, x, 0.0, 0)
    floor = np.full(x.size, -100.0)
    valid, compressed = fit_range(x, fund, im3, floor, input_p1db_dbm=0.0)
    # IM3 = 3x − 20 must be ≥ 10 dB above −100 dBm → x ≥ −23.3; x ≤ P1dB − 10 = −10
    assert x[valid].min() == -23.0 and x[valid].max() == -10.0
    assert compressed[x > -10.0].all() and not compressed[x <= -10.0].any()


def test_im3_in_the_noise_gives_bounds():
    df = cubic_two_tone_captures(A1, A3, np.arange(-40, -20, 1.0), noise_floor_dbm=-60.0)
    figs = intercept_figures(df, orders=(3,))
    im3 = _named(figs, "im3_low")
    assert all(f.bound == "<" and IN_NOISE in f.flags for f in im3)
    single = _named(figs, "iip3_point_low")
    assert all(f.bound == ">" for f in single)
    iip3 = _one(figs, "iip3")
    assert iip3.bound == ">" and IN_NOISE in iip3.flags and NO_VALID_RANGE not in iip3.flags
    # the bound is honest: the true intercept (+10 dBm) lies above it
    assert iip3.value < 10.0


def test_overloaded_drive_is_flagged_and_left_out_of_the_fit():
    df = cubic_two_tone_captures(A1, A3, np.arange(-40, -10, 1.0))
    df.loc[df["rf_power_dbm"] == -15.0, "overload"] = True
    figs = intercept_figures(df, orders=(3,), input_p1db_dbm=0.36)
    flagged = [f for f in _named(figs, "iip3_point_low") if f.conditions["rf_power_dbm"] == -15.0]
    assert OVERLOAD in flagged[0].flags
    iip3 = _one(figs, "iip3_low")
    assert POINTS_EXCLUDED in iip3.flags and OVERLOAD not in iip3.flags
    assert all(df.loc[df["point"] == p, "rf_power_dbm"].iloc[0] != -15.0 for p in iip3.points)


def _with_atten_repeats(df, im3_drop_db, carrier_step_db=0.0):
    repeats = df[df["reading"].isin(["if", "im3_low", "im3_high"])].copy()
    repeats["atten_check"] = True
    repeats["noise_floor_dbm"] += 10.0
    is_im3 = repeats["reading"] != "if"
    repeats.loc[is_im3, "level_dbm"] -= im3_drop_db
    repeats.loc[~is_im3, "level_dbm"] += carrier_step_db
    return pd.concat([df, repeats], ignore_index=True)


def test_attenuation_test_catches_analyzer_made_im3():
    df = cubic_two_tone_captures(A1, A3, np.arange(-40, -10, 1.0))
    # common practice, no source: analyzer-made 3rd-order products drop ~20 dB with +10 dB
    # of input attenuation; the part's own products keep their level
    figs = intercept_figures(_with_atten_repeats(df, 20.0), orders=(3,), input_p1db_dbm=0.36)
    assert all(ANALYZER_DISTORTION in f.flags for f in _named(figs, "iip3_point_low"))
    iip3 = _one(figs, "iip3")
    assert NO_VALID_RANGE in iip3.flags and POINTS_EXCLUDED in iip3.flags
    assert math.isnan(iip3.value)
    clean = intercept_figures(_with_atten_repeats(df, 0.2), orders=(3,), input_p1db_dbm=0.36)
    assert _one(clean, "iip3").flags == ()
    moved = intercept_figures(_with_atten_repeats(df, 20.0, carrier_step_db=-1.0), orders=(3,))
    assert all(ATTEN_CARRIER_MOVED in f.flags for f in _named(moved, "iip3_point_low"))


def test_wrong_product_slope_is_flagged():
    x = np.arange(-40.0, -10.0, 1.0)
    pts = points_frame(x.size, rf_power_dbm=x, rf2_power_dbm=x, rf2_freq_hz=2.401e9)
    df = pd.concat([
        reading_rows(pts, "if", x + 6.0),
        reading_rows(pts, "im3_low", 2.0 * x - 30.0),  # a 2 dB/dB "IM3": not third order
        reading_rows(pts, "im3_high", 3.0 * x - 14.0),
    ])
    figs = intercept_figures(df, orders=(3,))
    assert SLOPE_OFF in _one(figs, "iip3_low").flags
    assert _one(figs, "im3_slope_low").value == pytest.approx(2.0)
    assert SLOPE_OFF not in _one(figs, "iip3_high").flags
    assert SLOPE_OFF in _one(figs, "iip3").flags


def test_lower_and_upper_products_and_their_asymmetry():
    x = np.arange(-40.0, -10.0, 1.0)
    pts = points_frame(x.size, rf_power_dbm=x, rf2_power_dbm=x, rf2_freq_hz=2.401e9)
    df = pd.concat([
        reading_rows(pts, "if", x + 6.0),
        reading_rows(pts, "im3_low", 3 * x - 2 * 10.0 + 6.0),  # IIP3 +10 dBm
        reading_rows(pts, "im3_high", 3 * x - 2 * 12.0 + 6.0),  # IIP3 +12 dBm
        reading_rows(pts, "im2_low", 2 * x - 30.0 + 6.0),  # IIP2 +30 dBm
        reading_rows(pts, "im2_high", 2 * x - 34.0 + 6.0),  # IIP2 +34 dBm
    ])
    figs = intercept_figures(df)
    assert _one(figs, "iip3_low").value == pytest.approx(10.0)
    assert _one(figs, "iip3_high").value == pytest.approx(12.0)
    assert _one(figs, "iip3").value == pytest.approx(10.0)  # the worse side
    assert _one(figs, "iip3_asymmetry").value == pytest.approx(2.0)
    assert all(f.value == pytest.approx(-4.0) for f in _named(figs, "im3_asymmetry"))
    assert _one(figs, "iip2_low").value == pytest.approx(30.0)
    assert _one(figs, "iip2").value == pytest.approx(30.0)
    assert _one(figs, "im2_slope_high").value == pytest.approx(2.0)


def test_bad_intercept_arguments():
    with pytest.raises(InputError, match="order"):
        intercept_point_dbm(0.0, 0.0, 0.0, order=1)
    df = cubic_two_tone_captures(A1, A3, np.arange(-40, -10, 1.0))
    with pytest.raises(InputError, match="input_p1db_dbm"):
        intercept_figures(df, input_p1db_dbm="10 dBm")  # type: ignore[arg-type]


def test_too_few_points_in_the_fit_range():
    # IM3 clears the 10 dB fit margin above a −100 dBm floor only at the two top drives
    x = np.arange(-40.0, -26.0, 1.0)
    pts = points_frame(x.size, rf_power_dbm=x, rf2_power_dbm=x, rf2_freq_hz=2.401e9)
    im3 = 3 * x - 2 * 10.0 + 6.0  # IIP3 +10 dBm, G 6 dB: −108 … −69 dBm
    floor = -100.0 + (im3[-3] + 100.0) - 9.0  # third-highest IM3 just under the margin
    df = pd.concat([
        reading_rows(pts, "if", x + 6.0, noise_floor_dbm=floor),
        reading_rows(pts, "im3_low", im3, noise_floor_dbm=floor),
    ])
    fit = _one(intercept_figures(df, orders=(3,)), "iip3_low")
    assert len(fit.points) == 2 and "few_points" in fit.flags
    assert fit.value == pytest.approx(10.0)


@given(
    iip3=st.floats(-20.0, 40.0),
    gain=st.floats(-15.0, 25.0),
    start=st.floats(-80.0, -40.0),
    count=st.integers(2, 40),
)
@settings(max_examples=60, deadline=None)
def test_exact_lines_give_the_same_intercept_every_way(iip3, gain, start, count):
    # Razavi; Pozar: with exact slope-1 and slope-3 lines every single-point estimate equals
    # the crossing, and so does the constrained fit.
    x = start + np.arange(count, dtype=float)
    fund = x + gain
    im3 = 3 * x - 2 * iip3 + gain
    assert intercept_point_dbm(x, fund, im3) == pytest.approx(np.full(count, iip3), abs=1e-9)
    fit = fit_intercept(x, fund, im3)
    assert float(fit.input_dbm) == pytest.approx(iip3, abs=1e-9)
    assert float(fit.output_dbm) == pytest.approx(iip3 + gain, abs=1e-9)


def test_orders_read_at_the_same_points_share_their_conditions_and_give_the_same_figures():
    """IM3 and IM2 read at the same points: the IM2 figures take the IM3 figures' conditions
    mappings (made once), and every figure is the one each order made alone gives; an
    order read at fewer points makes its own."""
    from sweeprig.analysis.intercept import _order_figures

    x = np.arange(-40.0, -10.0, 1.0)
    pts = pd.concat([
        points_frame(x.size, rf_power_dbm=x, rf2_power_dbm=x, rf2_freq_hz=2.401e9,
                     temperature_c=t) for t in (-40.0, 25.0)], ignore_index=True)
    pts["point"] = np.arange(len(pts))
    xs = pts["rf_power_dbm"].to_numpy()
    both = pd.concat([
        reading_rows(pts, "if", xs + 6.0),
        reading_rows(pts, "im3_low", 3 * xs - 20.0 + 6.0),
        reading_rows(pts, "im3_high", 3 * xs - 24.0 + 6.0),
        reading_rows(pts, "im2_low", 2 * xs - 30.0 + 6.0),
        reading_rows(pts, "im2_high", 2 * xs - 34.0 + 6.0),
    ], ignore_index=True)
    fewer = both[~(both["reading"].str.startswith("im2") & (both["point"] % 3 == 0))]
    for captures, shared in ((both, True), (fewer, False)):
        figures = intercept_figures(captures)
        table = point_table(captures, ["im3_low", "im3_high", "im2_low", "im2_high", TONE2],
                            where="intercept")
        alone = []
        for order, sides in ((3, ["im3_low", "im3_high"]), (2, ["im2_low", "im2_high"])):
            rows = table["if_present"].to_numpy() & np.logical_or.reduce(
                [table[f"{p}_present"].to_numpy() for p in sides])
            alone += _order_figures(table[rows].reset_index(drop=True), order, sides, None)
        assert figures == alone
        assert [dict(f.conditions) for f in figures] == [dict(f.conditions) for f in alone]
        im3 = {f.points: f.conditions for f in figures if f.name == "iip3_point_low"}
        im2 = {f.points: f.conditions for f in figures if f.name == "iip2_point_low"}
        assert len(im2) > 10
        assert all((im3[p] is c) == shared for p, c in im2.items())
