"""The synthetic capture generators used to develop the analysis."""

import math

import numpy as np
import pytest

from sweeprig.analysis.captures import READINGS, column_arrays
from sweeprig.analysis.synthetic import (
    amplitude_to_dbm,
    cubic_coefficients,
    cubic_single_tone_dbm,
    cubic_two_tone_dbm,
    dbm_to_amplitude,
    synthetic_run,
)


def test_power_and_amplitude():
    # 0 dBm into 50 ohm is 0.3162 V peak: V_peak = sqrt(2·R·P) (field notes, power)
    assert dbm_to_amplitude(0.0) == pytest.approx(0.3162, abs=1e-4)
    assert amplitude_to_dbm(math.sqrt(2 * 50 * 1e-3)) == pytest.approx(0.0)


def test_cubic_coefficients_reproduce_gain_and_intercept():
    a1, a3 = cubic_coefficients(6.0, 10.0)
    assert 20 * math.log10(a1) == pytest.approx(6.0)
    # Razavi: A_IIP3 = sqrt((4/3)·|a1/a3|)
    assert amplitude_to_dbm(math.sqrt(4 / 3 * abs(a1 / a3))) == pytest.approx(10.0)
    # far below compression the single tone sees the small-signal gain, and the two-tone
    # products extrapolate to meet at IIP3: P_IM3 = 3·P_in − 2·IIP3 + G
    assert cubic_single_tone_dbm(a1, a3, -60.0) == pytest.approx(-54.0, abs=1e-4)
    fund, im3 = cubic_two_tone_dbm(a1, a3, -60.0)
    assert fund == pytest.approx(-54.0, abs=1e-4)
    assert im3 == pytest.approx(3 * -60.0 - 2 * 10.0 + 6.0, abs=1e-6)


def test_synthetic_run_is_a_valid_capture_table():
    run = synthetic_run(20_000, seed=3)
    cols = column_arrays(run)
    assert set(np.unique(cols["reading"])) <= set(READINGS)
    assert set(run["study"]) == {"compression", "two_tone", "spurs", "isolation"}
    assert run.equals(synthetic_run(20_000, seed=3))
