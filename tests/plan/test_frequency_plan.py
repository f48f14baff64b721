"""Frequency-plan maths against published relations.

Relations checked: products at |m·f_LO ± n·f_RF| with order m + n; wanted IF |f_RF − f_LO|
(downconversion) or f_RF + f_LO (upconversion); image 2·f_LO − f_RF for downconversion — the
standard mixer frequency plan (Pozar, *Microwave Engineering*, mixer section; Razavi, *RF
Microelectronics*, mixer chapter; chapter attribution from memory). Worked example: RF
2.400 GHz with LO 2.330 GHz gives IF 70 MHz and a sum product at 4.730 GHz (recomputed below
from the formulas). Two-tone IM3 at 2f1 − f2 and 2f2 − f1 (Razavi; Pozar).
"""

import numpy as np
import pytest

from sweeprig.plan import frequencies as fp

F_RF = 2.400e9
F_LO = 2.330e9


def test_field_notes_example_if_and_sum() -> None:
    # |f_RF − f_LO| = 70 MHz (downconversion); f_RF + f_LO = 4.730 GHz (the sum product).
    assert fp.wanted_output_hz(F_RF, F_LO, "down", "low") == pytest.approx(70e6)
    assert fp.wanted_output_hz(F_RF, F_LO, "up", "low") == pytest.approx(4.730e9)
    products = {(p.m, p.n): p.freq_hz for p in fp.mxn_products(F_LO, F_RF, 2)}
    assert products[(1, -1)] == pytest.approx(70e6)
    assert products[(1, 1)] == pytest.approx(4.730e9)


def test_lo_follows_rf() -> None:
    # f_LO = f_RF − f_IF for low-side downconversion (field notes example reversed).
    assert fp.lo_for_if(F_RF, 70e6, "down", "low") == pytest.approx(F_LO)
    assert fp.lo_for_if(F_RF, 70e6, "down", "high") == pytest.approx(2.470e9)
    # Round trip for every conversion and side: the wanted output lands on the IF.
    for conversion, f_out in (("down", 300e6), ("up", 5.0e9)):
        for side in ("low", "high"):
            f_lo = fp.lo_for_if(1.0e9, f_out, conversion, side)
            assert f_lo > 0
            assert fp.wanted_output_hz(1.0e9, f_lo, conversion, side) == pytest.approx(f_out)


def test_image_frequency() -> None:
    # f_image = 2·f_LO − f_RF: 2·2.330 − 2.400 = 2.260 GHz, on the other side of the LO,
    # and it converts to the same IF.
    f_img = fp.image_hz(F_RF, F_LO)
    assert f_img == pytest.approx(2.260e9)
    assert fp.wanted_output_hz(f_img, F_LO, "down", "low") == pytest.approx(70e6)
    # High-side LO puts the image above the LO.
    assert fp.image_hz(F_RF, 2.470e9) == pytest.approx(2.540e9)


def test_leakage_and_feedthrough_frequencies() -> None:
    assert fp.lo_leakage_hz(F_LO) == F_LO
    assert fp.rf_feedthrough_hz(F_RF) == F_RF


def test_mxn_list_is_complete_and_unique() -> None:
    products = fp.mxn_products(F_LO, F_RF, 3)
    keys = [(p.m, p.n) for p in products]
    assert len(keys) == len(set(keys))
    assert all(1 <= p.order <= 3 for p in products)
    assert all(p.m >= 0 and (p.m > 0 or p.n > 0) for p in products)
    # Count: order k has (k, 0), (0, k) and, for 1 ≤ m ≤ k−1, (m, ±(k−m)) → 2k distinct.
    assert len(products) == 2 + 4 + 6
    for p in products:
        assert p.freq_hz == pytest.approx(abs(p.m * F_LO + p.n * F_RF))
    assert [p.order for p in products] == sorted(p.order for p in products)


def test_two_tone_products() -> None:
    f1, f2 = 2.400e9, 2.401e9
    p = fp.two_tone_products(f1, f2)
    assert p.im3_lower_hz == pytest.approx(2.399e9)  # 2f1 − f2
    assert p.im3_upper_hz == pytest.approx(2.402e9)  # 2f2 − f1
    assert p.im2_diff_hz == pytest.approx(1e6)  # f2 − f1
    assert p.im2_sum_hz == pytest.approx(4.801e9)  # f1 + f2
    out = fp.two_tone_output_hz(f1, f2, F_LO, "down", "low")
    assert out["tone1"] == pytest.approx(70e6)
    assert out["tone2"] == pytest.approx(71e6)
    assert out["im3_lower"] == pytest.approx(69e6)
    assert out["im3_upper"] == pytest.approx(72e6)


def test_translated_orders_reproduce_the_frequency() -> None:
    f1, f2 = 2.400e9, 2.401e9
    for conversion, side, f_lo in (("down", "low", F_LO), ("down", "high", 2.47e9),
                                   ("up", "low", 1.0e9), ("up", "high", 6.0e9)):
        for im, f_in in ((fp.TwoToneProducts.IM3_LOWER, 2 * f1 - f2),
                         (fp.TwoToneProducts.IM3_UPPER, 2 * f2 - f1)):
            orders = fp.translated_orders(im, conversion, side)
            freq = abs(orders[0] * f_lo + orders[1] * f1 + orders[2] * f2)
            assert freq == pytest.approx(fp.translate_hz(f_in, f_lo, conversion, side))


def test_vectorised() -> None:
    rf = np.array([2.3e9, 2.4e9, 2.5e9])
    lo = fp.lo_for_if(rf, 70e6, "down", "low")
    np.testing.assert_allclose(fp.wanted_output_hz(rf, lo, "down", "low"), 70e6)
    np.testing.assert_allclose(fp.image_hz(rf, lo), rf - 140e6)
