"""A product's frequency error from its sources' references (ppm × multiplier)."""

from __future__ import annotations

import itertools

import numpy as np
import pytest

from sweeprig.plan.frequency_error import Term, offset_hz, worst_offset_hz

RF, LO = 2.4e9, 2.33e9


def test_issue_example_one_ppm_at_2_4_ghz() -> None:
    # IF = RF − LO; LO locked to the analyzer's reference, RF on its own crystal at ±1 ppm:
    # 1e-6 × 2.4 GHz = 2.4 kHz (arithmetic of the definition of ppm)
    terms = (Term("rf-own", 1, RF), Term("house", -1, LO))
    assert worst_offset_hz(terms, "house", {"rf-own": 1.0}) == pytest.approx(2400.0)


def test_everything_locked_to_one_reference_cancels() -> None:
    terms = (Term("house", 1, RF), Term("house", -1, LO))
    assert offset_hz(terms, "house", {"house": 5.0}) == pytest.approx(0.0, abs=1e-9)
    assert worst_offset_hz(terms, "house", {"house": 5.0}) == pytest.approx(0.0, abs=1e-9)


def test_worst_case_is_the_largest_corner() -> None:
    # 2·f_LO − f_RF on three separate references at ±2 ppm: the bound must equal the
    # largest |offset| over every corner of the ±2 ppm box (enumerated with numpy)
    terms = (Term("lo", 2, LO), Term("rf", -1, RF))
    tolerance = {"lo": 2.0, "rf": 2.0, "sa": 2.0}
    corners = [offset_hz(terms, "sa", dict(zip(tolerance, signs, strict=True)))
               for signs in itertools.product((-2.0, 2.0), repeat=3)]
    assert worst_offset_hz(terms, "sa", tolerance) == pytest.approx(np.max(np.abs(corners)))


def test_a_product_written_negative_is_the_same_line() -> None:
    forward = (Term("rf", 1, RF), Term("lo", -1, LO))
    mirrored = (Term("rf", -1, RF), Term("lo", 1, LO))
    errors = {"rf": 1.5, "lo": -0.5, "sa": 0.3}
    assert offset_hz(mirrored, "sa", errors) == pytest.approx(offset_hz(forward, "sa", errors))
