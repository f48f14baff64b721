"""Gain compression from an RF power sweep: small-signal gain, P0.1dB, P1dB, P3dB, Psat.

Conventions: ``input_dbm`` is the RF power at the DUT input port, ``output_dbm`` the IF power
at its output port, gain = output − input (dB). Compression c = G_ss − G (dB, positive when
compressed). Array functions take sweeps along the last axis, ascending in input power, NaN
padding ignored.

* Small-signal gain: the linear region is the run of lowest-drive points whose gain agrees
  within a tolerance (0.2 dB, or three times the readings' own scatter when that is larger)
  with the median of the three lowest; it ends where the gain drops below that and stays
  below. G_ss is the median over the lower half of the region
  (at least three points), which keeps noisy single points and the onset of compression out.
  A second pass repeats this around the first estimate.
* P_x: the compression curve is interpolated linearly in dB between the two points that
  bracket the last upward crossing of x dB (from there on every point is compressed by at
  least x). Output-referred P_x = input P_x + G_ss − x.
  Not reached: "> highest input tested" (output: "> highest output"), flag ``not_compressed``.
  Past x already at the lowest drive: "< lowest input", flag ``compressed_at_start``.
* Coarse steps: linear interpolation in dB on a compression curve that bends upward reads
  P_x low; the wider the bracketing step, the more. :func:`interpolation_error_db` gives the
  worst case over where the steps fall, found with this module's own interpolation on the
  compression curve of a memoryless third-order part (gain factor 1 − P/P0, the gentlest
  usual curve; derived, and about (ln 10/80)·h²·(1 + r)/(1 − r) for a step h with
  r = 1 − 10^(−x/20), which bounds it). A P_x whose bracketing step's worst case exceeds
  :data:`P_ACCURACY_DB` (0.2 dB; P1dB: steps of 2.5 dB or more) carries
  ``coarse_steps``.
* Psat: the highest output, when the output has flattened (slope of the top segment at most
  0.1 dB/dB) or fallen after its peak; otherwise "> highest output", flag ``not_saturated``.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from functools import lru_cache

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

from sweeprig.analysis import sweeps as sw
from sweeprig.analysis.captures import point_table
from sweeprig.analysis.figures import (
    ANALYZER_DISTORTION,
    ATTEN_CARRIER_MOVED,
    BOUND_ABOVE,
    BOUND_BELOW,
    BOUND_NONE,
    COARSE_STEPS,
    COMPRESSED_AT_START,
    FEW_POINTS,
    IN_NOISE,
    MISSING_READING,
    NOT_COMPRESSED,
    NOT_SATURATED,
    OVERLOAD,
    Figure,
    flag_bit,
    make_figures,
    mask_where,
)
from sweeprig.analysis.validity import MIN_LINEAR_POINTS

LINEAR_TOLERANCE_DB = 0.2
#: The linear-region tolerance widens to this many times the gain readings' own scatter.
NOISE_TOLERANCE_FACTOR = 3.0
REFERENCE_POINTS = 3
SATURATION_SLOPE_DB_PER_DB = 0.1
COMPRESSION_LEVELS_DB: tuple[float, ...] = (0.1, 1.0, 3.0)
#: Stated accuracy of an interpolated compression point: a bracketing step whose worst-case
#: interpolation error exceeds it raises ``coarse_steps`` (dB; common practice, no source).
P_ACCURACY_DB = 0.2

#: Flags that keep a point out of the small-signal estimate.
_UNUSABLE = (
    flag_bit(IN_NOISE)
    | flag_bit(OVERLOAD)
    | flag_bit(ANALYZER_DISTORTION)
    | flag_bit(ATTEN_CARRIER_MOVED)
    | flag_bit(MISSING_READING)
)


@dataclass(frozen=True)
class LinearRegion:
    """Small-signal gain per sweep (dB), the points in the linear region, and their count."""

    gain_db: np.ndarray
    mask: np.ndarray
    count: np.ndarray


@dataclass(frozen=True)
class CompressionPoint:
    """Input and output power at a compression level (dBm), bound codes, and the indices of
    the two bracketing points (equal when the result is a bound)."""

    input_dbm: np.ndarray
    output_dbm: np.ndarray
    bound: np.ndarray
    lower_index: np.ndarray
    upper_index: np.ndarray


@dataclass(frozen=True)
class Saturation:
    """Saturated output (dBm), bound code, and the index of the point it was read at."""

    output_dbm: np.ndarray
    bound: np.ndarray
    index: np.ndarray


def level_tag(level_db: float) -> str:
    """Name fragment of a compression level: 1 → ``p1db``, 0.1 → ``p0p1db``."""
    return "p" + f"{level_db:g}".replace(".", "p") + "db"


def small_signal_gain(
    input_dbm: ArrayLike,
    gain_db: ArrayLike,
    usable: ArrayLike | None = None,
    *,
    tolerance_db: float = LINEAR_TOLERANCE_DB,
    reference_points: int = REFERENCE_POINTS,
) -> LinearRegion:
    """Small-signal gain of each sweep (see the module docstring). ``usable`` (bool, same
    shape) leaves points out (in the noise, overloaded, ...)."""
    x = np.asarray(input_dbm, dtype=float)
    gain = np.asarray(gain_db, dtype=float)
    sw.require_ascending(x, "small_signal_gain")
    ok = np.isfinite(x) & np.isfinite(gain)
    if usable is not None:
        ok &= np.asarray(usable, dtype=bool)
    rank = np.cumsum(ok, axis=-1)
    reference, _ = sw.row_median(gain, ok & (rank <= reference_points))
    tolerance = np.maximum(tolerance_db, NOISE_TOLERANCE_FACTOR * _gain_scatter_db(gain, ok))
    tolerance = tolerance[..., None]
    mask = np.zeros_like(ok)
    count = np.zeros(ok.shape[:-1], dtype=np.int64)
    for _ in range(2):
        ref = reference[..., None]
        with np.errstate(invalid="ignore"):
            near = ok & (np.abs(gain - ref) <= tolerance)
            below = gain < ref - tolerance
        compressed = sw.tail_all(below, ok) & ok
        start, any_compressed = sw.first_true(compressed)
        limit = np.where(any_compressed, start, gain.shape[-1])
        index = np.arange(gain.shape[-1])
        mask = near & (index < limit[..., None])
        count = mask.sum(axis=-1)
        region_rank = np.cumsum(mask, axis=-1)
        keep = np.maximum((count + 1) // 2, reference_points)
        estimate, used = sw.row_median(gain, mask & (region_rank <= keep[..., None]))
        reference = np.where(used > 0, estimate, reference)
    return LinearRegion(reference, mask, count)


def _gain_scatter_db(gain: np.ndarray, ok: np.ndarray) -> np.ndarray:
    """Robust scatter (σ, dB) of the gain readings over the lower half of each sweep, from
    second differences (blind to a smooth trend): σ ≈ median|Δ²g| / (0.6745·√6) for normal
    noise. 0 when clean or when fewer than four second differences are available."""
    order = np.argsort(~ok, axis=-1, kind="stable")  # usable points first, in drive order
    compact = np.take_along_axis(np.where(ok, gain, np.nan), order, axis=-1)
    count = ok.sum(axis=-1)
    if compact.shape[-1] < 3:
        return np.zeros(compact.shape[:-1])
    curvature = np.abs(np.diff(compact, n=2, axis=-1))
    index = np.arange(curvature.shape[-1])
    lower = index < (count // 2 - 2)[..., None]
    scatter, used = sw.row_median(curvature, lower)
    return np.where(used >= 4, scatter / (0.6745 * np.sqrt(6.0)), 0.0)


def compression_point(
    input_dbm: ArrayLike,
    gain_db: ArrayLike,
    small_signal_gain_db: ArrayLike,
    level_db: float = 1.0,
) -> CompressionPoint:
    """Input/output power at ``level_db`` of gain compression (see the module docstring)."""
    x = np.asarray(input_dbm, dtype=float)
    gain = np.asarray(gain_db, dtype=float)
    sw.require_ascending(x, "compression_point")
    gss = np.asarray(small_signal_gain_db, dtype=float)
    ok = np.isfinite(x) & np.isfinite(gain)
    with np.errstate(invalid="ignore"):
        comp = gss[..., None] - gain
        past = ok & (comp >= level_db)
    tail = sw.tail_all(past, ok) & ok
    upper, reached = sw.first_true(tail)
    first, any_ok = sw.first_true(ok)
    last, _ = sw.last_true(ok)
    index = np.arange(x.shape[-1])
    before = ok & (index < upper[..., None])
    lower, has_lower = sw.last_true(before)
    x_lo, x_hi = sw.pick(x, lower), sw.pick(x, upper)
    c_lo, c_hi = sw.pick(comp, lower), sw.pick(comp, upper)
    bracketed = reached & has_lower
    with np.errstate(invalid="ignore", divide="ignore"):
        frac = (level_db - c_lo) / (c_hi - c_lo)
    crossing = x_lo + np.clip(frac, 0.0, 1.0) * (x_hi - x_lo)
    at_start = reached & ~has_lower
    out_top = sw.pick(x + gain, last)
    out_first = sw.pick(x + gain, first)
    input_value = np.where(
        bracketed, crossing, np.where(at_start, sw.pick(x, first), sw.pick(x, last))
    )
    output_value = np.where(
        bracketed, crossing + gss - level_db, np.where(at_start, out_first, out_top)
    )
    bound = np.where(bracketed, BOUND_NONE, np.where(at_start, BOUND_BELOW, BOUND_ABOVE))
    none = ~any_ok | ~np.isfinite(gss)
    input_value = np.where(none, np.nan, input_value)
    output_value = np.where(none, np.nan, output_value)
    bound = np.where(none, BOUND_NONE, bound)
    lower_index = np.where(bracketed, lower, np.where(at_start, first, last))
    upper_index = np.where(bracketed, upper, lower_index)
    return CompressionPoint(input_value, output_value, bound, lower_index, upper_index)


def saturated_output(
    input_dbm: ArrayLike,
    output_dbm: ArrayLike,
    *,
    flat_slope_db_per_db: float = SATURATION_SLOPE_DB_PER_DB,
) -> Saturation:
    """Highest output power and whether saturation was reached (see the module docstring)."""
    x = np.asarray(input_dbm, dtype=float)
    out = np.asarray(output_dbm, dtype=float)
    sw.require_ascending(x, "saturated_output")
    ok = np.isfinite(x) & np.isfinite(out)
    peak = np.argmax(np.where(ok, out, -np.inf), axis=-1)
    last, any_ok = sw.last_true(ok)
    index = np.arange(x.shape[-1])
    previous, has_previous = sw.last_true(ok & (index < last[..., None]))
    with np.errstate(invalid="ignore", divide="ignore"):
        slope = (sw.pick(out, last) - sw.pick(out, previous)) / (
            sw.pick(x, last) - sw.pick(x, previous)
        )
    flat = has_previous & (slope <= flat_slope_db_per_db)
    reached = any_ok & ((peak < last) | flat)
    value = np.where(any_ok, sw.pick(out, peak), np.nan)
    bound = np.where(reached | ~any_ok, BOUND_NONE, BOUND_ABOVE)
    return Saturation(value, bound, peak)


@lru_cache(maxsize=1024)
def _interpolation_error_cached(step_db: float, level_db: float) -> float:
    r = 1.0 - 10.0 ** (-level_db / 20.0)
    true_x = 10.0 * math.log10(r)  # input P_x, dB relative to the curve's P0
    offsets = np.linspace(0.0, step_db, 33)[:-1]
    # five steps below the crossing and one above, shifted through one step by ``offsets``
    grid = true_x + step_db * (np.arange(7) - 5) - offsets[:, None]
    ratio = 10.0 ** (grid / 10.0)
    with np.errstate(divide="ignore"):
        gain = 20.0 * np.log10(np.clip(1.0 - ratio, 1e-12, None))
    gain = np.where(ratio < 1.0, gain, np.nan)
    cp = compression_point(grid, gain, np.zeros(offsets.size), level_db)
    errors = np.abs(cp.input_dbm - true_x)
    return float(np.nanmax(np.where(cp.bound == BOUND_NONE, errors, np.nan)))


def interpolation_error_db(step_db: float, level_db: float = 1.0) -> float:
    """Worst-case error of an interpolated P_x (dB of input power) from a bracketing step of
    ``step_db``, on the compression curve of a third-order part (see the module docstring).
    0 for a step of 0 or less; NaN for a NaN step."""
    if not math.isfinite(step_db):
        return math.nan
    if step_db <= 0.0:
        return 0.0
    return _interpolation_error_cached(round(float(step_db), 3), float(level_db))


# ---------------------------------------------------------------------------------------------
# capture-table adapters


def _sweep_arrays(captures: pd.DataFrame, study: str | Sequence[str] | None):
    table = point_table(captures, ("if",), study=study, where="compression")
    table = table[table["if_present"].to_numpy()].reset_index(drop=True)
    keys = sw.default_keys(table, ("rf_power_dbm", "rf2_power_dbm"))
    sweeps = sw.group_sweeps(table, keys, "rf_power_dbm", where="compression")
    x = sweeps.take(table["rf_power_dbm"])
    out = sweeps.take(table["if_level_dbm"])
    flags = sweeps.take(table["if_flags"].to_numpy(), 0)
    return table, sweeps, x, out, flags


def compression_table(
    captures: pd.DataFrame, *, study: str | Sequence[str] | None = None
) -> pd.DataFrame:
    """Per point of the power sweeps: ``input_dbm``, ``output_dbm``, ``gain_db``,
    ``compression_db`` (G_ss − G), ``linear`` (in the small-signal region), ``if_flags``,
    and a ``sweep`` number shared by the points of one sweep. For plots."""
    table, sweeps, x, out, flags = _sweep_arrays(captures, study)
    region = small_signal_gain(x, out - x, (flags & _UNUSABLE) == 0)
    rows = sweeps.rows[sweeps.present]
    result = table.loc[rows, ["point", "study", "temperature_c", "supply_v", "lo_freq_hz",
                              "lo_power_dbm", "rf_freq_hz", "if_flags"]].reset_index(drop=True)
    result.insert(1, "sweep", np.nonzero(sweeps.present)[0])
    result["input_dbm"] = x[sweeps.present]
    result["output_dbm"] = out[sweeps.present]
    result["gain_db"] = (out - x)[sweeps.present]
    result["compression_db"] = (region.gain_db[:, None] - (out - x))[sweeps.present]
    result["linear"] = region.mask[sweeps.present]
    return result


def compression_figures(
    captures: pd.DataFrame,
    *,
    levels_db: Sequence[float] = COMPRESSION_LEVELS_DB,
    study: str | Sequence[str] | None = None,
) -> list[Figure]:
    """Per power sweep (points grouped by every other condition): ``small_signal_gain``,
    ``input_pXdb``/``output_pXdb`` for each level (``p0p1db``, ``p1db``, ``p3db``) and
    ``output_psat``. Flags: ``few_points`` (< 3 linear points), ``not_compressed``,
    ``compressed_at_start``, ``not_saturated``, plus the reading flags of the bracketing
    points (``overload``, ``in_noise``, ...)."""
    table, sweeps, x, out, flags = _sweep_arrays(captures, study)
    gain = out - x
    region = small_signal_gain(x, gain, (flags & _UNUSABLE) == 0)
    conditions = sweeps.conditions(table)
    few = mask_where(region.count < MIN_LINEAR_POINTS, FEW_POINTS)
    linear_flags = np.bitwise_or.reduce(np.where(region.mask, flags, 0), axis=-1)
    figures = make_figures(
        "small_signal_gain",
        "dB",
        region.gain_db,
        BOUND_NONE,
        few | linear_flags | mask_where(region.count == 0, MISSING_READING),
        conditions,
        sweeps.points(table, region.mask),
    )
    point_ids = sweeps.take(table["point"].to_numpy(), -1)
    for level in levels_db:
        cp = compression_point(x, gain, region.gain_db, level)
        bracket_flags = sw.pick(flags, cp.lower_index) | sw.pick(flags, cp.upper_index)
        step = sw.pick(x, cp.upper_index) - sw.pick(x, cp.lower_index)
        coarse = np.array([interpolation_error_db(h, level) > P_ACCURACY_DB
                           for h in step.tolist()], dtype=bool).reshape(step.shape)
        fig_flags = (
            few
            | bracket_flags
            | mask_where(coarse & (cp.bound == BOUND_NONE), COARSE_STEPS)
            | mask_where(cp.bound == BOUND_ABOVE, NOT_COMPRESSED)
            | mask_where(cp.bound == BOUND_BELOW, COMPRESSED_AT_START)
        )
        points = _bracket_points(point_ids, cp.lower_index, cp.upper_index)
        tag = level_tag(level)
        figures += make_figures(
            f"input_{tag}", "dBm", cp.input_dbm, cp.bound, fig_flags, conditions, points
        )
        figures += make_figures(
            f"output_{tag}", "dBm", cp.output_dbm, cp.bound, fig_flags, conditions, points
        )
    sat = saturated_output(x, out)
    sat_flags = sw.pick(flags, sat.index) | mask_where(sat.bound == BOUND_ABOVE, NOT_SATURATED)
    figures += make_figures(
        "output_psat",
        "dBm",
        sat.output_dbm,
        sat.bound,
        sat_flags,
        conditions,
        [(int(p),) for p in sw.pick(point_ids, sat.index).tolist()],
    )
    return figures


def _bracket_points(
    point_ids: np.ndarray, lower: np.ndarray, upper: np.ndarray
) -> list[tuple[int, ...]]:
    lo = sw.pick(point_ids, lower).tolist()
    hi = sw.pick(point_ids, upper).tolist()
    return [(a,) if a == b else (a, b) for a, b in zip(lo, hi, strict=True)]
