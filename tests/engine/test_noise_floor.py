"""The noise floor of a reading: known lines and their RBW skirts masked out, a median of
the rest, and "unknown" rather than a wrong number when too little of the trace is left."""

from __future__ import annotations

import math

import numpy as np
import pytest

from sweeprig.engine.noise_floor import (
    MASK_HALF_WIDTH_RBW,
    estimate_noise_floor,
    median_above_power_db,
)

RBW_HZ = 10e3
FLOOR_DBM = -85.0
TONE_DBM = -20.0
PRODUCT_DBM = -70.0
# Log-detected noise with the log-averaging bias removed (mean in dB = noise power):
# 10·log10(E) + 10·γ/ln10, E ~ Exp(1) (standard result for a Rayleigh envelope's power).
LOG_BIAS_DB = 10.0 * 0.5772156649015329 / math.log(10.0)


def _gaussian_mw(freqs_hz: np.ndarray, line_hz: float, level_dbm: float) -> np.ndarray:
    """A line seen through a Gaussian RBW filter, −3 dB at ±RBW/2: H = 2^-(2·df/RBW)²."""
    x = (freqs_hz - line_hz) * (2.0 / RBW_HZ)
    return 10.0 ** (level_dbm / 10.0) * np.exp2(-(x * x))


def _trace(seed: int, averages: int = 1, points: int = 1001, span_hz: float = 400e3,
           tone_offset_hz: float = 100e3) -> tuple[np.ndarray, np.ndarray, float]:
    centre = 70e6
    freqs = centre + np.linspace(-span_hz / 2, span_hz / 2, points)
    rng = np.random.default_rng(seed)
    offsets = np.mean(10.0 * np.log10(rng.standard_exponential((averages, points))), axis=0)
    noise_mw = 10.0 ** ((FLOOR_DBM + offsets + LOG_BIAS_DB) / 10.0)
    signal_mw = (_gaussian_mw(freqs, centre, PRODUCT_DBM)
                 + _gaussian_mw(freqs, centre + tone_offset_hz, TONE_DBM))
    return freqs, 10.0 * np.log10(noise_mw + signal_mw), centre


def _old_estimate_dbm(trace: np.ndarray, freqs: np.ndarray, centre: float) -> float:
    """The estimate this module replaces: mean power of the points > 4 RBW from the product."""
    away = np.abs(freqs - centre) > 4.0 * RBW_HZ
    return float(10.0 * np.log10(np.mean(10.0 ** (trace[away] / 10.0))))


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_a_strong_neighbour_in_the_span_no_longer_lifts_the_floor(seed):
    freqs, trace, centre = _trace(seed)
    tone = centre + 100e3
    old = _old_estimate_dbm(trace, freqs, centre)
    assert old > FLOOR_DBM + 20.0  # the old estimate reads the neighbour and its skirt
    new = estimate_noise_floor(trace, freqs, RBW_HZ, (centre, tone))
    assert new.dbm is not None
    assert new.dbm == pytest.approx(FLOOR_DBM, abs=1.0)
    # the weak product is 15 dB above the true floor: clear of a 10 dB noise margin
    assert PRODUCT_DBM - new.dbm > 10.0


@pytest.mark.parametrize("averages", [1, 4, 30])
def test_the_floor_is_the_noise_power_for_any_number_of_log_averages(averages):
    freqs, trace, centre = _trace(7, averages=averages)
    new = estimate_noise_floor(trace, freqs, RBW_HZ, (centre, centre + 100e3),
                               averages=averages)
    assert new.dbm == pytest.approx(FLOOR_DBM, abs=0.6)


@pytest.mark.parametrize("averages", [1, 2, 4, 16])
def test_median_correction_matches_a_numpy_monte_carlo(averages):
    # Check against numpy's exponential generator: the median of N log-averaged samples of
    # 10·log10(E) + 2.507 dB, E ~ Exp(1), against the derived correction.
    rng = np.random.default_rng(11)
    samples = np.mean(10.0 * np.log10(rng.standard_exponential((averages, 400_000))), axis=0)
    measured = float(np.median(samples + LOG_BIAS_DB))
    assert median_above_power_db(averages) == pytest.approx(measured, abs=0.06)


def test_too_few_points_clear_of_known_lines_leave_the_floor_unknown():
    # a span of 10.4 RBW around the product with a neighbour 5 RBW away: only a sliver of
    # 0.2 RBW at the lower edge is clear of both masks
    freqs, trace, centre = _trace(3, span_hz=10.4 * RBW_HZ, tone_offset_hz=5 * RBW_HZ)
    new = estimate_noise_floor(trace, freqs, RBW_HZ, (centre, centre + 5 * RBW_HZ))
    assert new.dbm is None
    assert new.points_used < 50
    assert "widen the span" in new.reason


def test_only_lines_inside_the_mask_are_left_out():
    freqs = np.linspace(0.0, 100 * RBW_HZ, 1001)
    trace = np.full(freqs.size, -90.0)
    trace[500] = 0.0  # a line nobody told the estimator about: the median shrugs it off
    far = estimate_noise_floor(trace, freqs, RBW_HZ, (1e12,))
    assert far.points_used == freqs.size
    assert far.dbm == pytest.approx(-90.0 - median_above_power_db(1))
    masked = estimate_noise_floor(trace, freqs, RBW_HZ, (freqs[500],))
    assert masked.points_used == freqs.size - 2 * int(MASK_HALF_WIDTH_RBW * 10) - 1
