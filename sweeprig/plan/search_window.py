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
frequency (as without a search) with the flag. When no point of the window stands
:func:`found_above_floor_db` above the trace's noise floor the product is not found: the
reading takes the window's highest point, an upper bound of the product wherever it lies in
the window, and the analysis reports it as in the noise (a bound). Pure functions; Hz.
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
#: Chance, per reading, that noise alone passes for the product.
FALSE_FIND = 1e-3


def found_above_floor_db(half_width_hz: float, rbw_hz: float) -> float:
    """How far above the noise floor (its mean power) a peak must stand to count as the
    product, dB: a window of ``n = 2·half/RBW`` independent noise samples (at least 1) holds
    one above ``x`` times the mean power with probability ``≈ n·e^(−x)`` (noise power in a
    detected sample is exponentially distributed: the Rayleigh envelope of Gaussian noise,
    any communications text), so ``x = ln(n/FALSE_FIND)``: 8.4 dB for one sample, 10 dB
    for twenty."""
    n = max(1.0, 2.0 * half_width_hz / rbw_hz)
    return 10.0 * math.log10(math.log(n / FALSE_FIND))
#: Share of an RBW a peak's frequency may differ from the line's (the filter's centre and
#: the sampled peak; common practice, no source).
CENTRE_SLACK_RBW = 0.25

#: A peak this far above the floor, dB, is a clear line: its centre is known to
#: :data:`CLEAR_CENTRE_SLACK_RBW` of an RBW.
CLEAR_ABOVE_FLOOR_DB = 20.0
CLEAR_CENTRE_SLACK_RBW = 0.02

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
    ``flags``: :data:`FREQUENCY_OFFSET`, :data:`WINDOW_EDGE`. ``highest_hz``: the window's
    highest point, found or not (where a not-found product's upper bound is read)."""

    freq_hz: float | None
    offset_hz: float | None
    level_dbm: float | None
    flags: tuple[str, ...] = ()
    resolution_hz: float | None = None
    """How closely the offset is known: the trace's point spacing plus
    :data:`CENTRE_SLACK_RBW` of the RBW, Hz."""
    highest_hz: float | None = None

    def clear_offset_hz(self, floor_dbm: float | None) -> float | None:
        """The offset of a clear find (unflagged, :data:`CLEAR_ABOVE_FLOOR_DB` over the
        floor): only such a line may aim later searches (a weak find, noise-bent, could steer
        them off); None otherwise."""
        if self.flags or self.offset_hz is None or self.level_dbm is None or \
                floor_dbm is None or self.level_dbm < floor_dbm + CLEAR_ABOVE_FLOOR_DB:
            return None
        return self.offset_hz


#: A line's centre is fitted over the filter's top when it holds at least this many trace
#: points (fewer: the parabola through the highest point and its two neighbours).
CENTRE_FIT_MIN_POINTS = 7
#: The offset is known to this many standard errors of the fitted centre (a two-sided 99.7 %
#: interval of a normal estimate).
CENTRE_FIT_K = 3.0
#: dB per (2·Δf/RBW)² of a Gaussian RBW filter: its power response 2^−(2Δf/RBW)² is −3.01 dB
#: at ±RBW/2 (the simulated analyzer's filter, sweeprig.sim.analyzer_display; a swept
#: analyzer's synchronously tuned filter is close to Gaussian, common practice, no source).
GAUSSIAN_DB_PER_UNIT = 10.0 * math.log10(2.0)


def filter_top_fit(freq_hz: np.ndarray, level_dbm: np.ndarray, best: int,
                   rbw_hz: float) -> tuple[float, float] | None:
    """The centre of the line whose highest trace point is ``best``, Hz, and its standard
    error, Hz, from every point within ±RBW/2 of it (the filter's top, 3 dB down at its
    edges); None when fewer than :data:`CENTRE_FIT_MIN_POINTS` points lie there.

    Through a Gaussian filter a line is a parabola in dB of known curvature
    ``c = GAUSSIAN_DB_PER_UNIT·(2/RBW)²``: ``y = a − c·(f − f0)²``, so ``y + c·x²`` is a
    straight line in ``x = f − f_best`` of slope ``2·c·(f0 − f_best)``: an ordinary least-squares
    line (``numpy.polyfit``, degree 1) with its slope's standard error ``s/√Σ(x − x̄)²``
    (any regression text). Three points (the parabola through the highest point and its
    neighbours) place a line whose top is flat to within the trace's noise anywhere along that
    top; the whole top averages that noise down."""
    f = np.asarray(freq_hz, dtype=float)
    y = np.asarray(level_dbm, dtype=float)
    x = f - f[best]
    near = (np.abs(x) <= 0.5 * rbw_hz) & np.isfinite(y)
    if int(near.sum()) < CENTRE_FIT_MIN_POINTS:
        return None
    x, y = x[near], y[near]
    c = GAUSSIAN_DB_PER_UNIT * (2.0 / rbw_hz) ** 2
    z = y + c * x * x
    slope, intercept = np.polyfit(x, z, 1)
    residual = z - (slope * x + intercept)
    spread = float(np.sum((x - x.mean()) ** 2))
    s = math.sqrt(float(np.sum(residual ** 2)) / max(x.size - 2, 1))
    centre = float(f[best]) + float(slope) / (2.0 * c)
    se = s / math.sqrt(spread) / (2.0 * c) if spread > 0 else math.inf
    return centre, se


def search(freq_hz: np.ndarray, level_dbm: np.ndarray, centre_hz: float, half_width_hz: float,
           bound_hz: float, rbw_hz: float, floor_dbm: float | None,
           window_centre_hz: float | None = None) -> Found:
    """The highest trace point within ``window_centre_hz ± half_width_hz`` (default: the
    computed frequency ``centre_hz``) and what it means; the offset is from ``centre_hz``.

    ``floor_dbm``: the trace's noise floor (None: unknown, then any peak counts as found).
    """
    f = np.asarray(freq_hz, dtype=float)
    y = np.asarray(level_dbm, dtype=float)
    middle = centre_hz if window_centre_hz is None else window_centre_hz
    inside = np.flatnonzero((np.abs(f - middle) <= half_width_hz) & np.isfinite(y))
    if inside.size == 0:
        return Found(None, None, None)
    best = int(inside[np.argmax(y[inside])])
    peak_hz, peak_dbm = float(f[best]), float(y[best])
    if floor_dbm is not None and \
            peak_dbm < floor_dbm + found_above_floor_db(half_width_hz, rbw_hz):
        return Found(None, None, None, highest_hz=peak_hz)
    step = float(np.median(np.diff(f))) if f.size > 1 else 0.0
    fitted = filter_top_fit(f, y, best, rbw_hz)
    if fitted is not None:
        peak_hz, centre_se_hz = fitted
    elif 0 < best < f.size - 1 and np.isfinite(y[best - 1:best + 2]).all():
        # a parabola through the peak and its neighbours in dB: exact for a line through a
        # Gaussian RBW filter, whose dB shape is a parabola (common practice, no source)
        a, b, c = (float(v) for v in y[best - 1:best + 2])
        curve = a - 2.0 * b + c
        if curve < 0:
            peak_hz += step * 0.5 * (a - c) / curve
    offset = peak_hz - centre_hz
    flags = []
    resolution = CENTRE_SLACK_RBW * rbw_hz + step
    if floor_dbm is not None and peak_dbm >= floor_dbm + CLEAR_ABOVE_FLOOR_DB:
        # a line far out of the noise: its interpolated peak is known to a small share of an
        # RBW (noise 20 dB down bends the parabola little; common practice, no source)
        resolution = CLEAR_CENTRE_SLACK_RBW * rbw_hz + 0.1 * step
    if fitted is not None:  # never finer than what the trace's own noise allows
        resolution = max(resolution, CENTRE_FIT_K * centre_se_hz)
    if abs(offset) > bound_hz + resolution:
        flags.append(FREQUENCY_OFFSET)
    # the window's border points (or the trace's, when the window reaches past the trace)
    if best in (int(inside[0]), int(inside[-1])):
        flags.append(WINDOW_EDGE)
    return Found(peak_hz, offset, peak_dbm, tuple(flags), resolution, peak_hz)
