"""Lot statistics against references outside the project: numpy/scipy for the moments, the
normal distribution for what Cpk means, Tukey's fences by hand."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from sweeprig.analysis.lot_stats import MIN_UNITS_FOR_CPK, cpk, lot_statistic


def test_moments_match_numpy_and_scipy():
    values = [12.1, 12.4, 11.9, 12.0, 12.6, 12.2]
    s = lot_statistic([f"U{k}" for k in range(6)], values, lsl=9.0, usl=14.0)
    assert s.mean == pytest.approx(np.mean(values))
    assert s.std == pytest.approx(stats.tstd(values))  # sample standard deviation (n − 1)
    assert (s.minimum, s.maximum, s.typ) == (11.9, 12.6, pytest.approx(np.median(values)))
    assert sum(s.histogram) == 6 and s.outliers == ()


def test_cpk_is_the_distance_to_the_nearer_limit_in_three_sigmas():
    # ISO 22514-2 / Montgomery: Cpk = min(USL − μ, μ − LSL) / 3σ
    assert cpk(12.0, 0.5, 9.0, 14.0) == pytest.approx((14.0 - 12.0) / 1.5)
    assert cpk(12.0, 0.5, 9.0, None) == pytest.approx(2.0)
    assert cpk(12.0, 0.0, 9.0, 14.0) is None and cpk(12.0, 0.5, None, None) is None
    # What Cpk = 1 means for a normal process: the nearer limit is 3σ away, so that side's
    # fraction out of spec is the normal tail beyond 3σ, 0.135 % (scipy's normal law)
    mu, sigma = 10.0, 0.2
    c = cpk(mu, sigma, None, mu + 3 * sigma)
    assert c == pytest.approx(1.0)
    assert stats.norm.sf(3 * c) == pytest.approx(0.00135, rel=0.01)


def test_tukey_fences_mark_the_odd_unit_and_too_few_units_get_no_cpk():
    values = [12.0, 12.1, 11.9, 12.05, 11.95, 12.02, 15.0]
    s = lot_statistic([f"U{k}" for k in range(7)], values, lsl=9.0, usl=14.0)
    q1, q3 = np.percentile(values, [25, 75])
    assert q3 + 1.5 * (q3 - q1) < 15.0 and s.outliers == ("U6",)
    few = lot_statistic(["A", "B"], [1.0, 2.0], lsl=0.0, usl=3.0)
    assert few.cpk is None and MIN_UNITS_FOR_CPK > 2
    one = lot_statistic(["A", "B"], [1.0, math.nan])
    assert one.n == 1 and math.isnan(one.std)
