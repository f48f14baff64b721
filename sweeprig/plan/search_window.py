"""The window an analyzer reading searches for its product in, from the bench's references.

A product ``|Σ kᵢ·fᵢ|`` lands off its computed frequency by what the references of its sources
and of the analyzer explain (:func:`sweeprig.plan.frequency_error.worst_offset_hz`, the worst
case over every reference within its tolerance). The reading searches ± that bound plus one
RBW times :data:`SEARCH_SLACK_RBW` (the filter's centring and the trace's point spacing,
common practice, no source) for the highest point of the trace, and judges what it found:

* found farther off than the references explain plus the frequency resolution of the trace
  (``explained_hz``): ``frequency_offset`` — the line found is probably not the product, or a
  reference is outside its stated tolerance;
* found on the window's edge: ``window_edge`` — the highest point of the window is its
  border, so the product most likely lies outside it (or is not there at all).

A flagged peak is likely not the product: the reading then keeps the level at the computed
frequency (as without a search) with the flag. A peak that does not stand
:data:`FOUND_ABOVE_FLOOR_DB` above the trace's noise floor is not a product: the reading
keeps the level at the computed frequency and raises neither flag. Pure functions; Hz.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from sweeprig.formats.timebase import ResolvedTimebase
from sweeprig.plan.frequency_error import Term, worst_offset_hz

#: The search window reaches this many RBWs beyond what the references explain: a line's
#: peak through the RBW filter sits on the line, so half an RBW covers the filter's centring
#: and the trace's point spacing without reaching a neighbour a whole RBW away.
SEARCH_SLACK_RBW = 0.5
#: Span of a searched reading: the window plus this many RBWs for the noise floor around it.
FLOOR_ROOM_RBW = 10.0
#: A peak counts as the product when it stands this far above the median noise floor, dB:
#: the highest of ~20 independent log-detected noise samples exceeds the median by about
#: 7 dB (the exponential distribution of noise power: ln 20 + 0.58 times the mean, the mean
#: 1.6 dB above the median), so 12 dB leaves a false find below 1e-3 per reading (from the
#: exponential law; common practice, no source for the margin).
FOUND_ABOVE_FLOOR_DB = 12.0
#: Share of an RBW a peak's frequency may differ from the line's (the filter's centre and
#: the sampled peak; common practice, no source).
CENTRE_SLACK_RBW = 0.25

FREQUENCY_OFFSET = "frequency_offset"
WINDOW_EDGE = "window_edge"


def product_terms(orders: tuple[int, ...], lo_hz: float, rf_hz: float, rf2_hz: float | None,
                  references: ResolvedTimebase) -> tuple[Term, ...]:
    """The product of ``orders`` (multipliers of LO, RF1[, RF2]) as terms on each source's
    reference."""
    freqs = (("lo", lo_hz), ("rf", rf_hz), ("rf2", rf2_hz))
    return tuple(Term(references.reference.get(role, f"{role}:crystal"), k, f)
                 for (role, f), k in zip(freqs, orders, strict=False)
                 if k != 0 and f is not None)


def offset_bound_hz(orders: tuple[int, ...], lo_hz: float, rf_hz: float,
                    rf2_hz: float | None, references: ResolvedTimebase) -> float:
    """The largest offset, Hz, the references explain for the product of ``orders``
    (multipliers of LO, RF1[, RF2]) at these source frequencies, read on the analyzer."""
    terms = product_terms(orders, lo_hz, rf_hz, rf2_hz, references)
    tolerance = dict(references.tolerance_ppm)
    for role in ("lo", "rf", "rf2", "sa"):  # a role not on the bench: a default crystal
        tolerance.setdefault(f"{role}:crystal", references.tolerance_ppm.get(
            references.reference.get(role, ""), 0.0))
    analyzer = references.reference.get("sa", "sa:crystal")
    return worst_offset_hz(terms, analyzer, tolerance)


def search_half_width_hz(bound_hz: float, rbw_hz: float, nearest_hz: float = math.inf) -> float:
    """Half-width of the search window, Hz: the bound plus :data:`SEARCH_SLACK_RBW` RBWs,
    but never reaching half-way to the nearest other known line."""
    half = bound_hz + SEARCH_SLACK_RBW * rbw_hz
    if math.isfinite(nearest_hz):
        half = min(half, max(nearest_hz / 2.0, rbw_hz))
    return half


def searched_span_hz(half_width_hz: float, rbw_hz: float) -> float:
    """Span that holds the window and room for the noise floor beside it, Hz."""
    return 2.0 * half_width_hz + FLOOR_ROOM_RBW * rbw_hz


@dataclass(frozen=True)
class Found:
    """What a windowed search found. ``freq_hz``: the highest point of the window (None when
    nothing stood out of the noise); ``offset_hz``: its distance from the computed frequency;
    ``flags``: :data:`FREQUENCY_OFFSET`, :data:`WINDOW_EDGE`."""

    freq_hz: float | None
    offset_hz: float | None
    level_dbm: float | None
    flags: tuple[str, ...] = ()
    resolution_hz: float | None = None
    """How closely the offset is known: the trace's point spacing plus
    :data:`CENTRE_SLACK_RBW` of the RBW, Hz."""


def search(freq_hz: np.ndarray, level_dbm: np.ndarray, centre_hz: float, half_width_hz: float,
           bound_hz: float, rbw_hz: float, floor_dbm: float | None) -> Found:
    """The highest trace point within ``centre_hz ± half_width_hz`` and what it means.

    ``floor_dbm``: the trace's noise floor (None: unknown, then any peak counts as found).
    """
    f = np.asarray(freq_hz, dtype=float)
    y = np.asarray(level_dbm, dtype=float)
    inside = np.flatnonzero((np.abs(f - centre_hz) <= half_width_hz) & np.isfinite(y))
    if inside.size == 0:
        return Found(None, None, None)
    best = int(inside[np.argmax(y[inside])])
    peak_hz, peak_dbm = float(f[best]), float(y[best])
    if floor_dbm is not None and peak_dbm < floor_dbm + FOUND_ABOVE_FLOOR_DB:
        return Found(None, None, None)
    step = float(np.median(np.diff(f))) if f.size > 1 else 0.0
    offset = peak_hz - centre_hz
    flags = []
    resolution = CENTRE_SLACK_RBW * rbw_hz + step
    if abs(offset) > bound_hz + resolution:
        flags.append(FREQUENCY_OFFSET)
    # the window's border points (or the trace's, when the window reaches past the trace)
    if best in (int(inside[0]), int(inside[-1])):
        flags.append(WINDOW_EDGE)
    return Found(peak_hz, offset, peak_dbm, tuple(flags), resolution)
