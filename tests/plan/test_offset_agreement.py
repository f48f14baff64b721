"""Offsets of one point's products must tell one story of reference errors."""

from __future__ import annotations

import numpy as np

from sweeprig.plan.frequency_error import Term, offset_hz, reference_coefficients
from sweeprig.plan.offset_agreement import disagreeing, fitted_errors_ppm

RF1, RF2, LO = 2.4e9, 2.401e9, 2.33e9
TOL = {"rf": 2.0, "rf2": 2.0, "lo": 2.0, "sa": 0.1}
#: wanted (RF1 − LO), tone 2 (RF2 − LO), IM3 lower (2·RF1 − RF2 − LO), upper
#: (2·RF2 − RF1 − LO), the LO leaking to the IF port
PRODUCTS = [
    (Term("rf", 1, RF1), Term("lo", -1, LO)),
    (Term("rf2", 1, RF2), Term("lo", -1, LO)),
    (Term("rf", 2, RF1), Term("rf2", -1, RF2), Term("lo", -1, LO)),
    (Term("rf2", 2, RF2), Term("rf", -1, RF1), Term("lo", -1, LO)),
    (Term("lo", 1, LO),),
]
ERRORS = {"rf": 1.7, "rf2": -1.2, "lo": -2.0, "sa": 0.05}


def coefficients() -> list[dict[str, float]]:
    return [reference_coefficients(p, "sa") for p in PRODUCTS]


def test_offsets_made_by_one_set_of_errors_agree() -> None:
    offsets = [offset_hz(p, "sa", ERRORS) for p in PRODUCTS]
    assert disagreeing(coefficients(), offsets, [50.0] * 5, TOL) == [False] * 5
    fitted = fitted_errors_ppm(coefficients(), offsets, [1.0] * 5, TOL)
    # five products pin the LO and both RF errors (the analyzer's is tied to them): the
    # least-squares answer reproduces every offset (numpy.linalg.lstsq as the solver)
    rebuilt = [sum(c.get(r, 0.0) * 1e-6 * e for r, e in fitted.items()) for c in coefficients()]
    assert np.allclose(rebuilt, offsets, atol=5.0)


def test_a_neighbour_taken_for_the_product_disagrees() -> None:
    offsets = [offset_hz(p, "sa", ERRORS) for p in PRODUCTS]
    offsets[2] += 8e3  # the lower IM3's search caught a line 8 kHz away, inside its window
    flags = disagreeing(coefficients(), offsets, [50.0] * 5, TOL)
    assert flags == [False, False, True, False, False]


def test_one_product_has_nothing_to_disagree_with() -> None:
    assert disagreeing(coefficients()[:1], [9e3], [50.0], TOL) == [False]


def test_when_the_offsets_cannot_say_which_product_is_wrong_all_off_ones_are_marked() -> None:
    # the wanted output and its +10 dB attenuation repeat: the same line, so 8 kHz between
    # them is no reference error, and nothing says which of the two caught another line
    pair = [PRODUCTS[0], PRODUCTS[0]]
    offsets = [offset_hz(p, "sa", ERRORS) for p in pair]
    offsets[0] += 8e3
    flags = disagreeing([reference_coefficients(p, "sa") for p in pair], offsets,
                        [50.0] * 2, {"rf": 2.0, "lo": 2.0, "sa": 0.1})
    assert flags == [True, True]


def test_found_offsets_pin_where_the_next_product_lies() -> None:
    from sweeprig.plan.offset_agreement import predicted_offset_hz

    coeff = coefficients()
    offsets = [offset_hz(p, "sa", ERRORS) for p in PRODUCTS]
    # nothing found yet: the prior alone, centred on the computed frequency
    mean0, sigma0 = predicted_offset_hz([], [], [], TOL, coeff[2])
    assert mean0 == 0.0 and sigma0 > 5e3
    # the wanted output, its tone 2 and the LO leak found: the lower IM3 is pinned to within
    # a few resolutions of where these errors put it
    seen = [0, 1, 4]
    mean, sigma = predicted_offset_hz([coeff[i] for i in seen], [offsets[i] for i in seen],
                                      [20.0] * 3, TOL, coeff[2])
    assert abs(mean - offsets[2]) < 3 * sigma + 20.0
    assert sigma < 100.0
