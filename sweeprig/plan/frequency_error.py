"""Where a mixer product really falls when the instruments' frequency references differ.

Each instrument runs from a 10 MHz reference: its own crystal, or one shared with others
(locked), or an external standard. A reference off by ε (fractional, ``ppm × 1e-6``) moves
every frequency the instrument makes or measures by the same fraction. A product
``f = Σ kᵢ·fᵢ`` (signed integer multipliers, ``m·f_LO ± n·f_RF``) made by sources on
references ``g`` is then off by ``Σ_g ε_g·Σ_{i∈g} kᵢ·fᵢ``, and the analyzer, measuring on its
own reference ``a``, sees it off by that minus ``ε_a·f`` (it reads frequencies in its own
reference's units). Sources locked to the analyzer's reference thus cancel exactly; unlocked
ones add their own error times their multiplier (issue example: ±1 ppm at 2.4 GHz is
±2.4 kHz).

The bound returned is the worst case over every reference within ±its tolerance: the sum,
over references, of ``tolerance × |what that reference's error multiplies|`` (the error is
linear in each ε, so its extreme is at a corner of the box; the test checks this against an
enumeration of the corners with numpy). Pure functions, Hz and ppm. Not yet wired: the
bench file's reference section and the windowed peak search that will use this bound are
still to come.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass


@dataclass(frozen=True)
class Term:
    """One source's part of a product: ``multiplier × freq_hz``, made on ``reference``."""

    reference: str
    multiplier: int
    freq_hz: float


def reference_coefficients(terms: tuple[Term, ...], analyzer_reference: str) -> dict[str, float]:
    """Per reference, the frequency, Hz, its fractional error multiplies in the product's
    apparent offset (the analyzer's reference takes ``−f_product``)."""
    product_hz = sum(t.multiplier * t.freq_hz for t in terms)
    sign = -1.0 if product_hz < 0 else 1.0  # the line sits at |f|: LO − RF is RF − LO's mirror
    coefficients: dict[str, float] = {}
    for term in terms:
        coefficients[term.reference] = coefficients.get(term.reference, 0.0) \
            + sign * term.multiplier * term.freq_hz
    coefficients[analyzer_reference] = coefficients.get(analyzer_reference, 0.0) \
        - abs(product_hz)
    return coefficients


def offset_hz(terms: tuple[Term, ...], analyzer_reference: str,
              error_ppm: Mapping[str, float]) -> float:
    """The product's apparent offset on the analyzer, Hz, for given reference errors, ppm
    (a reference not named has none)."""
    coefficients = reference_coefficients(terms, analyzer_reference)
    return sum(c * error_ppm.get(ref, 0.0) * 1e-6 for ref, c in coefficients.items())


def worst_offset_hz(terms: tuple[Term, ...], analyzer_reference: str,
                    tolerance_ppm: Mapping[str, float]) -> float:
    """The largest apparent offset, Hz, with every reference anywhere within ± its
    tolerance, ppm (see the module docstring)."""
    coefficients = reference_coefficients(terms, analyzer_reference)
    return sum(abs(c) * abs(tolerance_ppm.get(ref, 0.0)) * 1e-6
               for ref, c in coefficients.items())
