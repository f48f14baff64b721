"""Power sums of incoherent components, in the log domain: exact for ordinary levels, no
overflow (nor numpy warning) for absurd ones."""

import math

import numpy as np

from sweeprig.plan.preflight import _power_sum
from sweeprig.plan.readings import power_sum_dbm


def test_two_equal_powers_sum_to_3_dB_more() -> None:
    # two incoherent equal powers add to twice the power: +10*log10(2) dB (definition of dB)
    assert math.isclose(power_sum_dbm([0.0, 0.0]), 10.0 * math.log10(2.0))
    np.testing.assert_allclose(_power_sum(np.array([0.0, -10.0]), np.array([0.0, -10.0])),
                               [10.0 * math.log10(2.0), -10.0 + 10.0 * math.log10(2.0)])


def test_no_power_is_minus_infinity() -> None:
    assert power_sum_dbm([]) == -math.inf
    assert _power_sum(np.array([-np.inf]), np.array([-np.inf]))[0] == -np.inf


def test_absurd_levels_do_not_overflow() -> None:
    assert math.isclose(power_sum_dbm([3025.0, 0.0]), 3025.0)
    total = _power_sum(np.array([3088.0]), np.array([-3088.0]))  # filterwarnings = error
    np.testing.assert_allclose(total, [3088.0])
