"""Y-factor noise figure maths against its published relations."""

from __future__ import annotations

import math

import numpy as np
import pytest

from sweeprig.analysis.noise_figure import (
    T0_K,
    HotCold,
    noise_factor_from_y,
    reduce_noise_figure,
    second_stage_corrected,
    ssb_from_dsb_db,
    y_factor_gain,
)
from sweeprig.analysis.uncertainty import InstrumentSpecs
from sweeprig.engine.noise_floor import LOG_AVERAGE_BIAS_DB
from sweeprig.sim.analyzer_display import LOG_DETECTOR_BIAS_DB


def test_y_factor_relation_from_the_equivalent_noise_temperature() -> None:
    # Field notes (Pozar, noise chapter): Te = (T_hot − Y·Tc)/(Y − 1), F = 1 + Te/T0,
    # ENR = (T_hot − T0)/T0 → F = (ENR − Y·(Tc/T0 − 1))/(Y − 1); ENR/(Y − 1) at Tc = T0.
    for enr_db, y_db, tc in ((15.0, 8.0, 296.15), (5.0, 2.0, 280.0), (15.0, 8.0, T0_K)):
        enr, y = 10 ** (enr_db / 10), 10 ** (y_db / 10)
        t_hot = T0_K * (1 + enr)
        te = (t_hot - y * tc) / (y - 1)
        assert noise_factor_from_y(y, enr, tc) == pytest.approx(1 + te / T0_K, rel=1e-12)
    assert noise_factor_from_y(10 ** 0.8, 10 ** 1.5, T0_K) == pytest.approx(
        10 ** 1.5 / (10 ** 0.8 - 1))
    assert math.isnan(noise_factor_from_y(1.0, 10.0, T0_K))


def test_friis_second_stage_correction_undoes_the_cascade() -> None:
    # Friis (Proc. IRE, 1944): F12 = F1 + (F2 − 1)/G1.
    f1, f2, g1 = 10 ** 0.65, 10 ** 2.4, 10 ** 1.1
    f12 = f1 + (f2 - 1) / g1
    assert second_stage_corrected(f12, f2, g1) == pytest.approx(f1)


def test_a_simulated_cascade_is_recovered_exactly() -> None:
    # Build hot/cold powers of a stage (F1, G1) ahead of a receiver (F2, gain·B = 1) from
    # the noise temperatures, then reduce them: the stage's own figure comes back.
    f1, g1, f2, tc, enr_db = 10 ** 0.7, 10 ** 1.25, 10 ** 2.2, 296.15, 15.0
    enr = 10 ** (enr_db / 10)
    t_hot = T0_K * (1 + enr)
    te1, te2 = (f1 - 1) * T0_K, (f2 - 1) * T0_K

    def receiver(t_in: float) -> float:
        return t_in + te2

    cal = HotCold(receiver(t_hot), receiver(tc), 0.0, enr_db, 0.1)
    part = HotCold(receiver(g1 * (t_hot + te1)), receiver(g1 * (tc + te1)), 0.0, enr_db, 0.1)
    out = reduce_noise_figure(part, cal, cold_k=tc, specs=InstrumentSpecs())
    assert out.nf_dsb_db == pytest.approx(10 * math.log10(f1), abs=1e-9)
    assert out.gain_db == pytest.approx(10 * math.log10(g1), abs=1e-9)
    assert out.receiver_nf_db == pytest.approx(10 * math.log10(f2), abs=1e-9)
    ssb = reduce_noise_figure(part, cal, cold_k=tc, specs=InstrumentSpecs(), sideband="ssb",
                              image_to_signal_db=0.0)
    # field notes: SSB = DSB + 3.01 dB with equal gains from the signal and image bands
    assert ssb.nf_db - out.nf_db == pytest.approx(3.0103, abs=1e-4)
    assert ssb_from_dsb_db(7.0, -3.0) == pytest.approx(7.0 + 10 * math.log10(1.5012), abs=1e-3)
    assert y_factor_gain(20.0, 2.0, 10.0, 10.0) == pytest.approx(10.0)


def test_log_averaging_of_gaussian_noise_under_reads_by_2_51_db() -> None:
    # Field notes: Gaussian noise I + jQ has a Rayleigh envelope; its power is exponentially
    # distributed, and the mean of its dB readings sits 10·γ/ln 10 = 2.51 dB under the dB of
    # its mean power (γ: Euler's constant). Derived here from samples with numpy.
    rng = np.random.default_rng(7)
    i, q = rng.standard_normal((2, 2_000_000))
    envelope = np.hypot(i, q)  # Rayleigh
    power = envelope**2
    bias = 10 * np.log10(np.mean(power)) - np.mean(10 * np.log10(power))
    assert bias == pytest.approx(2.507, abs=0.01)
    assert 10 * np.euler_gamma / math.log(10) == pytest.approx(2.5068, abs=1e-4)
    assert pytest.approx(bias, abs=0.01) == LOG_AVERAGE_BIAS_DB
    assert pytest.approx(LOG_AVERAGE_BIAS_DB) == LOG_DETECTOR_BIAS_DB


def test_budget_terms_and_flags() -> None:
    cal = HotCold(10 ** -7.7, 10 ** -8.7, 0.004, 15.2, 0.12)
    part = HotCold(10 ** -7.2, 10 ** -8.0, 0.004, 14.9, 0.12)
    out = reduce_noise_figure(part, cal, cold_k=296.0, specs=InstrumentSpecs())
    names = {c.name for c in out.budget.contributions}
    assert {"enr", "mismatch_source", "linearity", "hot", "cold_cal"} <= names
    enr = next(c for c in out.budget.contributions if c.name == "enr")
    assert 0.5 < abs(enr.sensitivity) < 2.0
    assert 0.1 < out.expanded_db < 0.6
    assert out.flags == ()
    weak = HotCold(10 ** -7.95, 10 ** -8.0, 0.004, 14.9, 0.12)
    flags = reduce_noise_figure(weak, cal, cold_k=296.0, specs=InstrumentSpecs(),
                                compression_step_db=0.4, compression_jitter_db=0.02,
                                interferer_excess_db=9.0, interferer_sigma_db=0.5).flags
    assert set(flags) == {"y_too_small", "hot_compression", "interferer"}
    low = HotCold(10 ** -8.2, 10 ** -8.65, 0.004, 14.9, 0.12)
    assert "analyzer_noise_dominates" in reduce_noise_figure(
        low, cal, cold_k=296.0, specs=InstrumentSpecs()).flags


# -------------------------------------------------------------------------------------------
# the SSB conversion's image ratio: a wanted reading in the noise, or an image response far
# above the wanted one, must not turn into an unflagged SSB figure

_CAL = HotCold(10 ** -7.7, 10 ** -8.7, 0.004, 15.2, 0.12)
_PART = HotCold(10 ** -7.2, 10 ** -8.0, 0.004, 14.9, 0.12)


def _ssb(image_db: float, over_floor_db: float | None):
    return reduce_noise_figure(_PART, _CAL, cold_k=296.0, specs=InstrumentSpecs(),
                               sideband="ssb", image_to_signal_db=image_db,
                               image_wanted_over_floor_db=over_floor_db)


def test_an_image_ratio_from_a_wanted_reading_in_the_noise_flags_the_ssb_figure() -> None:
    from sweeprig.analysis.figures import SUSPECT_FLAGS, Figure
    from sweeprig.analysis.limits import INCONCLUSIVE, Limit, judge

    # the wanted reading 65 dB low, 3 dB over its floor: image − wanted = +65.6 dB, and the
    # conversion adds 10·log10(1 + 10^6.56) ≈ 65.6 dB to the DSB figure
    out = _ssb(65.6, 3.0)
    assert out.nf_db - out.nf_dsb_db == pytest.approx(
        10 * math.log10(1 + 10 ** 6.56), abs=1e-9)  # field notes: F_SSB = F_DSB·(1 + Gi/Gs)
    assert "image_ratio_doubtful" in out.flags
    # a plausible ratio from a reading in the noise is doubtful too (threshold: 6 dB over the
    # floor, common practice, no source)
    assert "image_ratio_doubtful" in _ssb(-0.2, 5.9).flags
    assert "image_ratio_doubtful" not in _ssb(-0.2, 6.1).flags
    # the figure is not presented as a trustworthy number: a limit check is inconclusive
    assert "image_ratio_doubtful" in SUSPECT_FLAGS
    figure = Figure("noise_figure", out.nf_db, "dB", flags=out.flags)
    assert judge(figure, Limit("noise_figure", max=15.0)).verdict == INCONCLUSIVE


def test_an_image_response_10_db_above_the_wanted_one_is_doubtful_on_its_own() -> None:
    # +10 dB: common practice, no source (a mixer's image response above its wanted response
    # by that much says the measurement is wrong, not the part); the floor unknown (None)
    assert "image_ratio_doubtful" in _ssb(10.5, None).flags
    assert "image_ratio_doubtful" in _ssb(10.5, 80.0).flags
    assert "image_ratio_doubtful" not in _ssb(9.5, 80.0).flags
    assert "image_ratio_doubtful" not in _ssb(9.5, math.nan).flags  # floor not recorded


def test_demo_like_image_readings_raise_no_flag_and_dsb_is_not_flagged() -> None:
    # the demo part's noise-figure points: image ≈ wanted (−0.2 dB), wanted ≈ 78 dB over floor
    assert _ssb(-0.2, 78.0).flags == ()
    dsb = reduce_noise_figure(_PART, _CAL, cold_k=296.0, specs=InstrumentSpecs(),
                              sideband="dsb", image_to_signal_db=65.6,
                              image_wanted_over_floor_db=3.0)
    assert "image_ratio_doubtful" not in dsb.flags  # the DSB figure is not converted with it
    # SSB with the image gain not measured (equal gains assumed): nothing to doubt
    assert reduce_noise_figure(_PART, _CAL, cold_k=296.0, specs=InstrumentSpecs(),
                               sideband="ssb").flags == ()
