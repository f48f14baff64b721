"""The mixer's frequency plan: pure functions of the input frequencies (Hz).

Conventions: a product's frequency is |Σ orders[k]·f[k]| over the inputs (LO, RF1[, RF2]),
with the multipliers in that order, so the wanted downconverted output is ``(1, -1)``:
|f_LO − f_RF|. For the m×n products the LO multiplier m is ≥ 0 and the RF multiplier n is
signed (n > 0 when m = 0), so each product is listed once.

``conversion``: "down" — output |f_RF − f_LO|; "up" — output f_RF + f_LO (``lo_side`` "low")
or f_LO − f_RF (``lo_side`` "high"). Works on floats and on numpy arrays alike.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TypeVar

import numpy as np

F = TypeVar("F", float, np.ndarray)


def wanted_orders(conversion: str, lo_side: str) -> tuple[int, int]:
    """(LO, RF) multipliers of the wanted output product."""
    if conversion == "up" and lo_side == "low":
        return (1, 1)
    return (1, -1)


def wanted_output_hz(rf_freq_hz: F, lo_freq_hz: F, conversion: str, lo_side: str) -> F:
    """Frequency of the wanted output (the IF of a downconverter)."""
    m, n = wanted_orders(conversion, lo_side)
    return abs(m * lo_freq_hz + n * rf_freq_hz)


def lo_for_if(rf_freq_hz: F, if_freq_hz: float, conversion: str, lo_side: str) -> F:
    """LO frequency that puts the wanted output at ``if_freq_hz`` (may be ≤ 0: infeasible).

    down/low: f_LO = f_RF − f_IF; down/high: f_RF + f_IF; up/low: f_IF − f_RF; up/high:
    f_IF + f_RF.
    """
    if conversion == "down":
        return rf_freq_hz - if_freq_hz if lo_side == "low" else rf_freq_hz + if_freq_hz
    return if_freq_hz - rf_freq_hz if lo_side == "low" else if_freq_hz + rf_freq_hz


def other_sideband(input_freq_hz: F, lo_freq_hz: F, conversion: str, lo_side: str
                   ) -> tuple[F, tuple[int, int]]:
    """The unwanted sideband at the output: its frequency (Hz) and (LO, input) multipliers.

    A mixer makes both f_LO + f_in and |f_LO − f_in|; an upconverter wants one of them and
    the other is its unwanted sideband (the field notes' frequency plan). For a downconverter
    this is the sum product at the IF port.
    """
    m, n = wanted_orders(conversion, lo_side)
    orders = (m, -n)
    return abs(orders[0] * lo_freq_hz + orders[1] * input_freq_hz), orders


def image_hz(rf_freq_hz: F, lo_freq_hz: F) -> F:
    """Image frequency of a downconverter: 2·f_LO − f_RF (≤ 0 means there is none)."""
    return 2.0 * lo_freq_hz - rf_freq_hz


def lo_leakage_hz(lo_freq_hz: F) -> F:
    """LO leakage appears at the LO frequency itself (at any port)."""
    return lo_freq_hz


def rf_feedthrough_hz(rf_freq_hz: F) -> F:
    """RF feedthrough appears at the RF frequency itself (at the output port)."""
    return rf_freq_hz


@dataclass(frozen=True)
class MxNProduct:
    """One m×n product: |m·f_LO + n·f_RF|, order m + |n|."""

    m: int
    n: int
    freq_hz: float

    @property
    def order(self) -> int:
        return self.m + abs(self.n)

    @property
    def label(self) -> str:
        """Short name such as ``2x-1`` (m = 2, n = −1)."""
        return f"{self.m}x{self.n}"


def mxn_products(lo_freq_hz: float, rf_freq_hz: float, max_order: int) -> list[MxNProduct]:
    """Every product with 1 ≤ m + |n| ≤ ``max_order``, ordered by order, then m, then n.

    Includes the wanted output, LO leakage (1, 0) and RF feedthrough (0, 1); a product may
    land at 0 Hz (callers skip those they cannot read).
    """
    out: list[MxNProduct] = []
    for order in range(1, max_order + 1):
        for m in range(0, order + 1):
            k = order - m
            for n in ((k, -k) if k and m else (k,)):
                if m == 0 and n <= 0:
                    continue
                out.append(MxNProduct(m, n, abs(m * lo_freq_hz + n * rf_freq_hz)))
    return out


@dataclass(frozen=True)
class TwoToneProducts:
    """Intermodulation products of tones f1 < f2, at the input (RF side).

    IM3: 2f1 − f2 (lower) and 2f2 − f1 (upper); IM2: f2 − f1 (difference) and f1 + f2 (sum).
    The orders are the (RF1, RF2) multipliers.
    """

    im3_lower_hz: float
    im3_upper_hz: float
    im2_diff_hz: float
    im2_sum_hz: float

    IM3_LOWER = (2, -1)
    IM3_UPPER = (-1, 2)
    IM2_DIFF = (-1, 1)
    IM2_SUM = (1, 1)


def two_tone_products(f1_hz: float, f2_hz: float) -> TwoToneProducts:
    """IM3 and IM2 frequencies of two input tones."""
    return TwoToneProducts(
        im3_lower_hz=2.0 * f1_hz - f2_hz,
        im3_upper_hz=2.0 * f2_hz - f1_hz,
        im2_diff_hz=abs(f2_hz - f1_hz),
        im2_sum_hz=f1_hz + f2_hz,
    )


def translate_hz(input_freq_hz: F, lo_freq_hz: F, conversion: str, lo_side: str) -> F:
    """Where an input-side frequency lands at the output through the wanted conversion."""
    return wanted_output_hz(input_freq_hz, lo_freq_hz, conversion, lo_side)


def translated_orders(input_orders: tuple[int, ...], conversion: str, lo_side: str
                      ) -> tuple[int, ...]:
    """(LO, RF1, RF2, ...) multipliers of an input product carried to the output.

    E.g. IM3 lower (2, −1) through a downconverter (1, −1) → (1, −2, 1): |f_LO − 2f1 + f2|.
    """
    m, n = wanted_orders(conversion, lo_side)
    return (m, *(n * k for k in input_orders))


def two_tone_output_hz(f1_hz: float, f2_hz: float, lo_freq_hz: float, conversion: str,
                       lo_side: str) -> dict[str, float]:
    """The two-tone products translated to the output (IM3) and seen there directly (IM2).

    Keys: ``tone1``, ``tone2`` (wanted outputs), ``im3_lower``, ``im3_upper`` (translated),
    ``im2_diff`` (f2 − f1) and ``im2_sum`` (f1 + f2), which reach the output port untranslated
    as even-order products of the RF stage.
    """
    p = two_tone_products(f1_hz, f2_hz)
    return {
        "tone1": translate_hz(f1_hz, lo_freq_hz, conversion, lo_side),
        "tone2": translate_hz(f2_hz, lo_freq_hz, conversion, lo_side),
        "im3_lower": translate_hz(p.im3_lower_hz, lo_freq_hz, conversion, lo_side),
        "im3_upper": translate_hz(p.im3_upper_hz, lo_freq_hz, conversion, lo_side),
        "im2_diff": p.im2_diff_hz,
        "im2_sum": p.im2_sum_hz,
    }
