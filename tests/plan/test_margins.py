"""The planner's predictions against the classic dynamic-range relations of a swept spectrum
analyzer.

Source of every relation checked here (cited from memory): Keysight (formerly Agilent / HP)
Application Note 150, "Spectrum Analysis Basics", the chapter on dynamic range: displayed
noise rises 10 dB per decade of resolution bandwidth and 1 dB per dB of input attenuation;
a second-order product at the first mixer falls 1 dB, a third-order product 2 dB, per dB of
input attenuation (input-referred); the best third-order dynamic range is 2/3·(TOI − DANL),
reached where the distortion equals the noise; the second-order one is 1/2·(SOI − DANL).
"""

from __future__ import annotations

import functools
import math

import numpy as np
import pytest

from sweeprig.plan import margins as mg

SPECS = mg.AnalyzerSpecs(noise_figure_db=24.0, toi_dbm=15.0, soi_dbm=39.0, p1db_dbm=3.0,
                         overload_dbm=0.0, phase_noise=((1e3, -85.0), (1e4, -95.0),
                                                        (1e5, -105.0), (1e6, -125.0)))


def test_noise_rises_ten_db_per_decade_of_rbw_and_one_db_per_db_of_attenuation() -> None:
    # AN 150, dynamic range: displayed noise versus RBW and input attenuation.
    base = mg.danl_dbm(24.0, 10.0, 1e3)
    assert mg.danl_dbm(24.0, 10.0, 1e4) - base == pytest.approx(10.0)
    assert mg.danl_dbm(24.0, 20.0, 1e3) - base == pytest.approx(10.0)
    # kT0 = -173.98 dBm/Hz (Pozar, noise chapter)
    assert mg.danl_dbm(0.0, 0.0, 1.0) == pytest.approx(-173.975, abs=0.01)


F1, F2 = 100e6, 101e6


@functools.lru_cache
def _table(tone_dbm: float) -> mg.DistortionTable:
    return mg.distortion_table([mg.Line(F1, tone_dbm, "a"), mg.Line(F2, tone_dbm, "b")], SPECS)


def _third_order_at(att_db: float, tone_dbm: float) -> float:
    return _table(tone_dbm).at(2 * F1 - F2, att_db, 1.0)


def _second_order_at(att_db: float, tone_dbm: float) -> float:
    return _table(tone_dbm).at(F2 - F1, att_db, 1.0)


def test_distortion_falls_one_and_two_db_per_db_of_attenuation() -> None:
    # AN 150: 2nd order falls 1 dB per dB of attenuation, 3rd order 2 dB (input-referred).
    assert _third_order_at(0.0, -20.0) - _third_order_at(10.0, -20.0) == pytest.approx(20.0)
    assert _second_order_at(0.0, -20.0) - _second_order_at(10.0, -20.0) == pytest.approx(10.0)
    # and rises 3:1 and 2:1 with the tones (Razavi, nonlinearity chapter: intercept laws)
    assert _third_order_at(0.0, -10.0) - _third_order_at(0.0, -20.0) == pytest.approx(30.0)
    assert _second_order_at(0.0, -10.0) - _second_order_at(0.0, -20.0) == pytest.approx(20.0)


def test_intercepts_set_the_product_levels() -> None:
    # IM3 = 2·P1 + P2 − 2·TOI; IM2 = P1 + P2 − SOI; at P = TOI the IM3 equals the tones.
    assert _third_order_at(0.0, SPECS.toi_dbm) == pytest.approx(SPECS.toi_dbm)
    assert _second_order_at(0.0, SPECS.soi_dbm) == pytest.approx(SPECS.soi_dbm)
    # the second-harmonic intercept is 6.02 dB above the two-tone SOI (derived from a2·x²)
    table = mg.distortion_table([mg.Line(100e6, -20.0, "a")], SPECS)
    assert table.at(200e6, 0.0, 1.0) == pytest.approx(2 * -20.0 - (SPECS.soi_dbm + 6.0206),
                                                     abs=1e-3)


@pytest.mark.parametrize("rbw_hz", [1e3, 1e5])
def test_best_third_order_dynamic_range_is_two_thirds_of_toi_minus_danl(rbw_hz: float) -> None:
    # AN 150: with the mixer level where the 3rd-order product equals the noise, the
    # distortion-free range is 2/3·(TOI − DANL), DANL at the mixer (0 dB attenuation).
    danl_mixer = mg.danl_dbm(SPECS.noise_figure_db, 0.0, rbw_hz)
    tone_input = 0.0
    atts = np.arange(0.0, 70.0, 0.02)
    dist = np.array([_third_order_at(a, tone_input) for a in atts])
    noise = np.array([mg.danl_dbm(SPECS.noise_figure_db, a, rbw_hz) for a in atts])
    best = int(np.argmin(np.abs(dist - noise)))
    dynamic_range = tone_input - noise[best]
    assert dynamic_range == pytest.approx(2.0 / 3.0 * (SPECS.toi_dbm - danl_mixer), abs=0.05)


def test_best_second_order_dynamic_range_is_half_of_soi_minus_danl() -> None:
    # AN 150: 1/2·(SOI − DANL) where the 2nd-order product equals the noise.
    rbw_hz = 1e4
    danl_mixer = mg.danl_dbm(SPECS.noise_figure_db, 0.0, rbw_hz)
    atts = np.arange(0.0, 90.0, 0.02)
    dist = np.array([_second_order_at(a, 0.0) for a in atts])
    noise = np.array([mg.danl_dbm(SPECS.noise_figure_db, a, rbw_hz) for a in atts])
    best = int(np.argmin(np.abs(dist - noise)))
    assert 0.0 - noise[best] == pytest.approx(0.5 * (SPECS.soi_dbm - danl_mixer), abs=0.05)


def test_reciprocal_mixing_is_line_plus_phase_noise_plus_noise_bandwidth() -> None:
    # AN 150 (phase noise section): a neighbour's LO phase noise in the RBW:
    # P + L(offset) + 10·log10(ENBW), ENBW = 1.0645·RBW for a Gaussian filter (derived).
    got = mg.reciprocal_dbm([mg.Line(100e6, -10.0, "n")], 100e6 + 1e4, 1e3, SPECS.phase_noise)
    assert got == pytest.approx(-10.0 - 95.0 + 10 * math.log10(1.0645 * 1e3), abs=0.01)
    # between stated offsets: straight on a log-offset axis (-100 dBc/Hz halfway at 31.6 kHz)
    assert mg.phase_noise_dbc_hz(SPECS.phase_noise, 10**4.5) == pytest.approx(-100.0)
    assert mg.phase_noise_dbc_hz(SPECS.phase_noise, 10.0) == -85.0  # held flat: safe side


def test_compression_is_one_db_at_p1db_and_negligible_far_below() -> None:
    assert mg.compression_db(3.0, 3.0) == pytest.approx(1.0)
    assert mg.compression_db(-20.0, 3.0) < 0.05
    assert mg.compression_db(-math.inf, 3.0) == 0.0


def test_part_noise_follows_friis() -> None:
    # Output excess noise kT0·(F·G − 1): NF 10 dB, gain 10 dB → 10·log10(99) above kT0
    got = mg.part_noise_dbm(10.0, 10.0, 0.0, 1.0 / mg.ENBW_PER_RBW)
    assert got == pytest.approx(mg.KT0_DBM_PER_HZ + 10 * math.log10(99.0))


def test_lines_within_three_rbw_merge() -> None:
    lines = [mg.Line(100e6 + 2e3, -40.0, "n")]
    assert mg.merged(lines, 100e6, -40.0, 1e3, 20e3, 10.0)
    assert not mg.merged(lines, 100e6, -40.0, 100.0, 1e3, 10.0)


def test_prediction_lists_the_seam_keys() -> None:
    p = mg.Prediction(product_dbm=-10.0, noise_dbm=-90.0, analyzer_distortion_dbm=None,
                      source_harmonic_dbm=None, reciprocal_dbm=-math.inf, mixer_level_dbm=-20.0,
                      compression_db=0.01)
    assert set(p.as_dict()) == {"product_dbm", "noise_dbm", "analyzer_distortion_dbm",
                                "source_harmonic_dbm", "reciprocal_dbm", "mixer_level_dbm",
                                "compression_db"}
    assert p.as_dict()["reciprocal_dbm"] is None
