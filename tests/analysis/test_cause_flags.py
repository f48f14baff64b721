"""The right flag for the right cause: the planner's predicted risks (``extra["risks"]`` of a
reading) and the analysis' own checks (RBW against line spacing, the two-tone tones' own gain
drop, compression steps, supply current) each raise their own flag, and a clean sweep raises
none of them (no false alarms).

Outside checks, named where they are used:
* two-tone intercept from slopes: Razavi, RF Microelectronics (2nd ed.), ch. 2, the
  third-order two-tone relations (fundamental a1·A + (9/4)·a3·A³, IM3 (3/4)·|a3|·A³, and
  IIP3 where the slope-1 and slope-3 lines cross) — recalled from memory, not checked
  against the text;
* linear interpolation error on a smooth curve, h²·|f''|/8 (standard numerical-analysis
  result), used for the coarse-step bound.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from sweeprig.analysis import (
    compression_figures,
    intercept_figures,
    isolation_figures,
    spur_figures,
)
from sweeprig.analysis.captures import MERGE_SPACING_RBW, line_spacing_hz, risk_mask
from sweeprig.analysis.compression import P_ACCURACY_DB, interpolation_error_db
from sweeprig.analysis.figures import (
    ANALYZER_COMPRESSION,
    ANALYZER_DISTORTION,
    COARSE_STEPS,
    FLAG_MEANINGS,
    FLAGS,
    IN_COMPRESSION,
    IN_NOISE,
    NOISE_LIMITED,
    RBW_MERGED,
    SLOPE_OFF,
    SOURCE_HARMONIC,
    SUPPLY_CURRENT_OFF,
    SUSPECT_FLAGS,
    Figure,
    flag_points,
)
from sweeprig.analysis.intercept import GAIN_DROP_DB, gain_dropped
from sweeprig.analysis.isolation import supply_current_off_points
from sweeprig.analysis.limits import INCONCLUSIVE, Limit, judge
from sweeprig.analysis.synthetic import (
    cubic_coefficients,
    cubic_compression_captures,
    cubic_two_tone_captures,
    cubic_two_tone_dbm,
    points_frame,
    reading_rows,
)
from sweeprig.analysis.validity import SUPPLY_CURRENT_TOLERANCE, supply_current_off

GAIN_DB, IIP3_DBM = 8.0, 12.0
A1, A3 = cubic_coefficients(GAIN_DB, IIP3_DBM)
#: The flags this module adds (appended to FLAGS in this order).
NEW_FLAGS = (ANALYZER_COMPRESSION, SOURCE_HARMONIC, RBW_MERGED, NOISE_LIMITED, COARSE_STEPS,
             SUPPLY_CURRENT_OFF)
CAUSE_FLAGS = {*NEW_FLAGS, ANALYZER_DISTORTION, IN_COMPRESSION}


def _two_tone(drives, *, rbw_hz: float = 1e3, risks: object = "", spacing_hz: float = 1e6,
              **kw) -> pd.DataFrame:
    frame = cubic_two_tone_captures(A1, A3, np.asarray(drives, float),
                                    tone_spacing_hz=spacing_hz, **kw)
    frame["rbw_hz"] = rbw_hz
    frame["risks"] = pd.Series([risks] * len(frame), dtype=object)
    return frame


def _with_risk(frame: pd.DataFrame, reading: str, risks: str) -> pd.DataFrame:
    out = frame.copy()
    out.loc[out["reading"] == reading, "risks"] = risks
    return out


def _named(figures: list[Figure], name: str) -> list[Figure]:
    return [f for f in figures if f.name == name]


def _flags(figures: list[Figure]) -> set[str]:
    return {flag for f in figures for flag in f.flags}


# -------------------------------------------------------------------------------------------
# vocabulary


def test_new_flags_are_appended_so_every_old_bit_keeps_its_place():
    old = ("in_noise", "overload", "analyzer_distortion", "atten_carrier_moved", "slope_off",
           "fund_slope_off", "not_compressed", "not_saturated", "compressed_at_start",
           "few_points", "no_valid_range", "in_compression", "points_excluded",
           "edge_of_sweep", "missing_reading", "unpowered")
    assert FLAGS[:len(old)] == old
    assert FLAGS[len(old):len(old) + len(NEW_FLAGS)] == NEW_FLAGS
    # then the noise-figure causes (sweeprig.analysis.noise_figure), then the peak search's,
    # then the SSB conversion's doubtful image ratio, then the part below its stated supply,
    # then a source short of its level, a reference lost, an analyzer's uncalibrated reading,
    # a DUT probe away from its set point
    assert FLAGS[len(old) + len(NEW_FLAGS):] == (
        "y_too_small", "analyzer_noise_dominates", "hot_compression", "interferer",
        "frequency_offset", "window_edge", "image_ratio_doubtful", "supply_limited",
        "source_unleveled", "reference_unlocked", "analyzer_uncalibrated", "temperature_off")


def test_every_flag_has_a_one_line_meaning_and_the_new_ones_are_suspect():
    assert set(FLAG_MEANINGS) == set(FLAGS)
    for name, meaning in FLAG_MEANINGS.items():
        assert meaning and "\n" not in meaning and len(meaning) < 200, name
    assert set(NEW_FLAGS) <= SUSPECT_FLAGS
    figure = Figure("iip3", 12.0, "dBm", flags=(RBW_MERGED,))
    assert judge(figure, Limit("iip3", min=0.0)).verdict == INCONCLUSIVE


# -------------------------------------------------------------------------------------------
# no false alarms


def test_a_clean_backed_off_sweep_raises_no_cause_flag():
    # 10 dB steps would be coarse for a compression sweep, not for an intercept fit
    two_tone = _two_tone(np.arange(-40.0, -17.0, 2.0))
    figures = intercept_figures(two_tone, orders=(3,))
    assert figures and not (_flags(figures) & CAUSE_FLAGS)
    iip3 = _named(figures, "iip3")[0]
    assert iip3.value == pytest.approx(IIP3_DBM, abs=0.05) and iip3.flags == ()
    comp = cubic_compression_captures(A1, A3, np.arange(-30.0, 10.0, 1.0))
    comp["rbw_hz"], comp["risks"] = 1e3, ""
    assert not (_flags(compression_figures(comp)) & CAUSE_FLAGS)


def test_a_store_without_predictions_raises_no_flag_from_their_absence():
    # risks None = no prediction: an unknown floor alone is never called noise-limited
    frame = _two_tone(np.arange(-40.0, -17.0, 2.0), risks=None, noise_floor_dbm=np.nan)
    assert not (_flags(intercept_figures(frame, orders=(3,))) & CAUSE_FLAGS)


# -------------------------------------------------------------------------------------------
# the planner's risks


@pytest.mark.parametrize(("risk", "flag"), [
    ("analyzer_compression", ANALYZER_COMPRESSION),
    ("analyzer_distortion", ANALYZER_DISTORTION),
    ("source_harmonic", SOURCE_HARMONIC),
    ("rbw_merged", RBW_MERGED),
])
def test_a_predicted_risk_flags_every_figure_the_reading_feeds(risk, flag):
    frame = _with_risk(_two_tone(np.arange(-40.0, -17.0, 2.0)), "im3_low",
                       f"noise,{risk}")
    figures = intercept_figures(frame, orders=(3,))
    for name in ("iip3_point_low", "im3_low", "iip3_low", "oip3_low", "iip3", "oip3"):
        assert all(flag in f.flags for f in _named(figures, name)), name
    # the upper product had no such risk
    assert not any(flag in f.flags for f in _named(figures, "iip3_high"))
    assert not any(NOISE_LIMITED in f.flags for f in figures)  # its floor was measured


def test_the_attenuation_repeat_overrules_a_predicted_analyzer_distortion():
    frame = _with_risk(_two_tone(np.arange(-40.0, -17.0, 2.0)), "im3_low",
                       "analyzer_distortion")
    repeat = frame[frame["reading"].isin(["if", "im3_low"])].copy()
    repeat["atten_check"] = True  # the part's product: the same level with +10 dB
    figures = intercept_figures(pd.concat([frame, repeat], ignore_index=True), orders=(3,))
    assert ANALYZER_DISTORTION not in _flags(figures)
    # ...and a repeat that moves the product still flags it, by measurement
    moved = repeat.copy()
    moved.loc[moved["reading"] == "im3_low", "level_dbm"] -= 20.0
    figures = intercept_figures(pd.concat([frame, moved], ignore_index=True), orders=(3,))
    assert all(ANALYZER_DISTORTION in f.flags for f in _named(figures, "iip3_point_low"))


def test_source_harmonic_risk_flags_spurs_and_isolation():
    pts = points_frame(1, study="spurs")
    rows = [
        reading_rows(pts, "if", -12.0, freq_hz=70e6),
        reading_rows(pts, "spur", -50.0, freq_hz=140e6, m=2, n=-2),
        reading_rows(pts, "spur", -60.0, freq_hz=3 * 2.33e9 - 2.4e9, m=3, n=-1),
        reading_rows(pts, "rf_at_if", -45.0, freq_hz=2.4e9),
    ]
    frame = pd.concat(rows, ignore_index=True)
    frame["rbw_hz"] = 1e3
    frame["risks"] = pd.Series(["", "source_harmonic", "", "source_harmonic"], dtype=object)
    spurs = _named(spur_figures(frame), "spur_dbc")
    by_m = {int(f.conditions["m"]): f for f in spurs}
    assert SOURCE_HARMONIC in by_m[2].flags and SOURCE_HARMONIC not in by_m[3].flags
    isolation = _named(isolation_figures(frame), "rf_if_isolation")
    assert isolation and all(SOURCE_HARMONIC in f.flags for f in isolation)


def test_noise_limited_only_where_the_floor_could_not_show_it():
    drives = np.arange(-40.0, -17.0, 2.0)
    unknown = _two_tone(drives, risks="noise", noise_floor_dbm=np.nan)
    assert all(NOISE_LIMITED in f.flags for f in _named(
        intercept_figures(unknown, orders=(3,)), "iip3_point_low"))
    recip = _two_tone(drives, risks="reciprocal_mixing", noise_floor_dbm=np.nan)
    assert NOISE_LIMITED in _flags(intercept_figures(recip, orders=(3,)))
    # a measured floor decides: far below the product, no flag; close, in_noise (a bound)
    measured = _two_tone(drives, risks="noise", noise_floor_dbm=-150.0)
    assert NOISE_LIMITED not in _flags(intercept_figures(measured, orders=(3,)))
    close = _two_tone(drives, risks="noise", noise_floor_dbm=-40.0)
    figures = intercept_figures(close, orders=(3,))
    assert NOISE_LIMITED not in _flags(figures) and IN_NOISE in _flags(figures)
    # an unknown floor without the risk: taken at face value, as before
    plain = _two_tone(drives, risks="", noise_floor_dbm=np.nan)
    assert NOISE_LIMITED not in _flags(intercept_figures(plain, orders=(3,)))


def test_risk_strings_are_matched_as_whole_names():
    risks = np.array(["noise", "rbw_merged,noise", "", None, "noisey"], dtype=object)
    assert risk_mask(risks, "noise").tolist() == [True, True, False, False, False]


# -------------------------------------------------------------------------------------------
# products merged by a too-wide RBW: the analysis' own check


def test_products_closer_than_3_rbw_are_rbw_merged_not_only_slope_off():
    # A wide RBW lets each IM3 reading pick up the neighbouring tone: the IM3 then follows
    # the fundamental (slope 1). Before, that showed only as slope_off (the symptom); the
    # cause is the RBW, found from the stored RBW and the spacing of the stored lines.
    drives = np.arange(-40.0, -17.0, 2.0)
    frame = _two_tone(drives, rbw_hz=1e6, risks=None)
    fund, _ = cubic_two_tone_dbm(A1, A3, drives)
    for side in ("im3_low", "im3_high"):
        frame.loc[frame["reading"] == side, "level_dbm"] = fund - 12.0  # the tone's skirt
    figures = intercept_figures(frame, orders=(3,))
    iip3 = _named(figures, "iip3")[0]
    assert RBW_MERGED in iip3.flags and SLOPE_OFF in iip3.flags
    assert all(RBW_MERGED in f.flags for f in _named(figures, "iip3_point_low"))
    # 3 RBW and more apart: separable, no flag
    spacing = 1e6
    wide_enough = _two_tone(drives, rbw_hz=spacing / MERGE_SPACING_RBW, risks=None)
    assert RBW_MERGED not in _flags(intercept_figures(wide_enough, orders=(3,)))


def test_line_spacing_ignores_coincident_lines_and_other_ports():
    pts = points_frame(1)
    frame = pd.concat([
        reading_rows(pts, "if", -10.0, freq_hz=70e6),
        reading_rows(pts, "spur", -60.0, freq_hz=70e6, m=2, n=-2),  # coincident: same line
        reading_rows(pts, "spur", -70.0, freq_hz=70.002e6, m=3, n=-3),
        reading_rows(pts, "lo_at_rf", -40.0, freq_hz=70.0005e6),
    ], ignore_index=True)
    frame["port"] = ["if", "if", "if", "rf"]
    cols = {c: frame[c].to_numpy() for c in frame.columns}
    spacing = line_spacing_hz(cols)
    assert spacing.tolist() == pytest.approx([2e3, 2e3, 2e3, math.inf])


# -------------------------------------------------------------------------------------------
# two-tone points in compression: the tones' own gain drop


def test_per_drive_iip3_error_is_half_the_tones_gain_drop():
    # Razavi, RF Microelectronics, ch. 2 (from memory): each tone a1·A·(1 − 3ρ), each IM3
    # a1·A·ρ with ρ = A²/A_IIP3², so the single-point IIP3 reads 10·log10(1 − 3ρ) low: half
    # the gain drop 20·log10(1 − 3ρ). This is the basis of GAIN_DROP_DB (0.2 dB → 0.1 dB).
    drives = np.arange(-30.0, 4.0, 1.0)
    fund, im3 = cubic_two_tone_dbm(A1, A3, drives)
    single = drives + (fund - im3) / 2.0
    drop = GAIN_DB - (fund - drives)
    np.testing.assert_allclose(IIP3_DBM - single, drop / 2.0, atol=1e-9)
    assert GAIN_DROP_DB == 0.2


def test_two_tone_points_past_compression_are_flagged_and_left_out_without_p1db():
    drives = np.arange(-30.0, 5.0, 1.0)  # up to 7 dB beyond IIP3 - 14 dB: deep compression
    frame = _two_tone(drives)
    figures = intercept_figures(frame, orders=(3,))  # no compression study: no P1dB
    fund, _ = cubic_two_tone_dbm(A1, A3, drives)
    dropped = GAIN_DB - (fund - drives) > GAIN_DROP_DB
    points = _named(figures, "iip3_point_low")
    assert [IN_COMPRESSION in f.flags for f in points] == dropped.tolist()
    # every unflagged per-drive IIP3 is within 0.1 dB (half of 0.2 dB)
    for f, bad in zip(points, dropped, strict=True):
        assert bad or abs(f.value - IIP3_DBM) <= 0.1 + 1e-9, f
    assert max(abs(f.value - IIP3_DBM) for f in points) > 1.0  # the sweep did go bad
    iip3 = _named(figures, "iip3")[0]
    assert iip3.value == pytest.approx(IIP3_DBM, abs=0.1)
    assert not ({IN_COMPRESSION, SLOPE_OFF} & set(iip3.flags))


def test_tone_two_alone_can_show_the_drop():
    drives = np.arange(-40.0, -17.0, 2.0)
    frame = _two_tone(drives)
    tone2 = frame[frame["reading"] == "if"].copy()
    tone2["reading"] = "if_tone2"
    tone2["freq_hz"] += 1e6
    tone2.loc[tone2["rf_power_dbm"] >= -20.0, "level_dbm"] -= 0.5  # tone 2 compresses
    figures = intercept_figures(pd.concat([frame, tone2], ignore_index=True), orders=(3,))
    flagged = [f.conditions["rf_power_dbm"] for f in _named(figures, "iip3_point_low")
               if IN_COMPRESSION in f.flags]
    assert flagged == [-20.0, -18.0]


def test_gain_dropped_uses_the_low_drive_gain_as_reference():
    x = np.array([-30.0, -28.0, -26.0, -24.0, -22.0])
    gain = np.array([8.0, 8.02, 7.98, 7.85, 7.7])
    assert gain_dropped(x, gain).tolist() == [False, False, False, False, True]
    # one low reading lower in the sweep is scatter, not compression
    dip = np.array([8.0, 8.02, 7.7, 8.0, 7.7])
    assert gain_dropped(x, dip).tolist() == [False, False, False, False, True]
    usable = np.array([False, True, True, True, True])
    assert gain_dropped(x, gain - np.r_[5.0, 0, 0, 0, 0], usable).tolist()[0] is False


# -------------------------------------------------------------------------------------------
# coarse compression steps


def test_interpolation_error_matches_the_second_derivative_bound():
    # linear interpolation error ≤ h²·|c''|/8 (standard result) in compression, divided by
    # the slope c' to give input dB. For the cubic, c = -20·log10(1 - r), r = 10^(x/10)/P0:
    # c' = 2r/(1-r)·... in dB/dB, giving (ln 10/80)·h²·(1 + r)/(1 - r) (derived).
    for level in (0.1, 1.0, 3.0):
        r = 1.0 - 10.0 ** (-level / 20.0)
        for h in (1.0, 2.0, 3.0, 5.0):
            bound = math.log(10.0) / 80.0 * h * h * (1.0 + r) / (1.0 - r)
            err = interpolation_error_db(h, level)
            assert 0.6 * bound <= err <= bound * 1.001, (level, h, err, bound)
    assert interpolation_error_db(0.0) == 0.0 and math.isnan(interpolation_error_db(math.nan))


@pytest.mark.parametrize("offset", [0.0, 0.7, 1.9, 3.3])
def test_five_db_steps_are_flagged_coarse_one_db_steps_are_not(offset):
    coarse = cubic_compression_captures(A1, A3, np.arange(-30.0 + offset, 12.0, 5.0))
    p1db = _named(compression_figures(coarse), "input_p1db")[0]
    # the true input P1dB of the cubic: 1 - r = 10^(-1/20) (derived)
    true = IIP3_DBM + 10.0 * math.log10(1.0 - 10.0 ** (-1.0 / 20.0))
    assert abs(p1db.value - true) <= interpolation_error_db(5.0) + 1e-6
    assert COARSE_STEPS in p1db.flags
    fine = cubic_compression_captures(A1, A3, np.arange(-30.0 + offset, 12.0, 1.0))
    figures = compression_figures(fine)
    assert not any(COARSE_STEPS in f.flags for f in figures)
    assert _named(figures, "input_p1db")[0].value == pytest.approx(true, abs=P_ACCURACY_DB)


def test_the_p1db_step_threshold_sits_near_2_5_db():
    assert interpolation_error_db(2.0, 1.0) < P_ACCURACY_DB < interpolation_error_db(2.6, 1.0)


# -------------------------------------------------------------------------------------------
# supply current


def test_supply_current_off_beyond_30_percent():
    assert SUPPLY_CURRENT_TOLERANCE == 0.3
    current = np.array([0.045, 0.033, 0.030, 0.060, 0.0005, np.nan])
    assert supply_current_off(current, 0.045).tolist() == [False, False, True, True, True,
                                                           False]


def test_figures_from_points_with_the_current_off_are_flagged():
    pts = points_frame(3, rf_power_dbm=-20.0)
    frame = pd.concat([
        reading_rows(pts, "if", -12.0, freq_hz=70e6),
        reading_rows(pts, "supply_current", value=[0.045, 0.002, 0.047]),
    ], ignore_index=True)
    points = supply_current_off_points(frame, 0.045)
    assert points.tolist() == [1]
    figures = [Figure("conversion_gain", 8.0, "dB", points=(p,)) for p in range(3)]
    flagged = flag_points(figures, points.tolist(), SUPPLY_CURRENT_OFF)
    assert [SUPPLY_CURRENT_OFF in f.flags for f in flagged] == [False, True, False]
    assert supply_current_off_points(frame, 0.045 * 0.2).tolist() == [0, 1, 2]
    no_supply = frame[frame["reading"] == "if"]
    assert supply_current_off_points(no_supply, 0.045).size == 0


def _line_spacing_by_frames(cols) -> np.ndarray:
    """The line spacing as pandas frames worked it out (distinct lines, sorted, merged
    back): the reference line_spacing_hz is held to."""
    point = np.asarray(cols["point"], dtype=np.int64)
    freq = np.asarray(cols["freq_hz"], dtype=float)
    codes = pd.factorize(pd.Series(cols["port"], dtype=object))[0]
    frame = pd.DataFrame({"p": point, "q": codes, "f": np.round(freq, 0)})
    frame = frame[np.isfinite(freq)]
    out = np.full(point.size, np.inf)
    if not frame.empty:
        lines = frame.drop_duplicates().sort_values(["p", "q", "f"], kind="stable")
        f = lines["f"].to_numpy()
        group = lines["p"].to_numpy() * (int(codes.max(initial=0)) + 2) + lines["q"].to_numpy()
        same_prev = np.r_[False, group[1:] == group[:-1]]
        same_next = np.r_[group[:-1] == group[1:], False]
        gap_prev = np.where(same_prev, f - np.r_[np.nan, f[:-1]], np.inf)
        gap_next = np.where(same_next, np.r_[f[1:], np.nan] - f, np.inf)
        lines = lines.assign(gap=np.minimum(gap_prev, gap_next))
        merged = frame.reset_index().merge(lines, on=["p", "q", "f"], how="left")
        out[merged["index"].to_numpy()] = merged["gap"].to_numpy(dtype=float)
    rf1 = np.asarray(cols["rf_freq_hz"], dtype=float)
    rf2 = np.asarray(cols["rf2_freq_hz"], dtype=float)
    with np.errstate(invalid="ignore"):
        tones = np.abs(rf2 - rf1)
        tones = np.where(np.isfinite(tones) & (tones >= 1.0), tones, np.inf)
    return np.fmin(out, tones)


def test_line_spacing_is_the_distinct_lines_nearest_neighbour_per_point_and_port():
    # shuffled rows of many points: repeated and coincident lines, a missing port, NaN and
    # infinite frequencies, a point with one line, two-tone points
    rng = np.random.default_rng(8)
    n = 4000
    cols = {
        "point": rng.integers(0, 300, n),
        "freq_hz": np.where(rng.random(n) < 0.05, rng.choice([np.nan, np.inf], n),
                            70e6 + rng.integers(0, 40, n) * 250e3 + rng.choice([0.0, 0.3], n)),
        "port": rng.choice(np.array(["if", "rf", None], dtype=object), n),
        "rf_freq_hz": np.full(n, 2.4e9),
        "rf2_freq_hz": np.where(rng.random(n) < 0.2, 2.401e9, np.nan),
    }
    got = line_spacing_hz(cols)
    want = _line_spacing_by_frames(cols)
    assert np.array_equal(got, want)
    assert np.isinf(got).any() and (got == 250e3).any() and (got == 1e6).any()
