"""Two-tone intercepts: IIP3/OIP3 and IIP2, single-point and from constrained line fits.

Per tone, with P_in the input power of one tone, P_fund the output of that tone and P_IMn an
n-th order product at the output (all dBm at the DUT ports):

* single point: IIPn = P_in + (P_fund − P_IMn)/(n − 1), i.e. IIP3 = P_in + (P_fund −
  P_IM3)/2 and IIP2 = P_in + (P_fund − P_IM2); OIPn = IIPn + G with G = P_fund − P_in at
  that drive;
* line fit: over the valid range the fundamental is fitted with slope 1 (offset a = mean of
  P_fund − P_in, the gain) and the product with slope n (offset b = mean of P_IMn − n·P_in);
  the lines cross at IIPn = (a − b)/(n − 1), OIPn = IIPn + a. The unconstrained slopes of
  both lines over the same range are kept as a diagnostic.

The valid range is chosen automatically: clean readings (no overload, no analyzer
distortion, fundamental clear of the noise) with the product at least 10 dB above its noise
floor, and the drive at least 10 dB below the input P1dB when that is known; without P1dB,
the longest run from the lowest such drive over which the unconstrained fundamental slope is
within 1 ± 0.1 dB/dB, both over the whole run and over its top 5 dB of drive (at least three
points).

In compression, with or without a compression study: the wanted tones' own conversion gain
is followed through the sweep (tone 1 from ``if``, tone 2 from ``if_tone2`` when read); a
drive where either tone's gain is more than :data:`GAIN_DROP_DB` below the sweep's low-drive
gain (the median of its three lowest clean drives), and stays so at every higher drive, is
in compression: it is left out of the
fits (like drives above P1dB − 10 dB, outside the range rather than ``points_excluded``) and
its single-point figures carry ``in_compression``. Why
0.2 dB (derived): for a memoryless third-order part y = a1·x + a3·x³ driven by two equal
tones of amplitude A, each output tone is a1·A·(1 − 3ρ) and each IM3 product a1·A·ρ with
ρ = A²/A_IIP3², so the single-point IIP3 reads 10·log10(1 − 3ρ) low, exactly half the tones'
gain drop in dB, and the single-point OIP3 (which adds the dropped gain) one and a half
times it: a 0.2 dB drop bounds the per-drive IIP3 error to 0.1 dB and OIP3 to 0.3 dB (Razavi,
RF Microelectronics, ch. 2, the third-order two-tone relations, recalled from memory).

Flags on a fitted intercept: ``few_points`` (fewer than 3 points), ``slope_off`` (product
slope outside n ± 10 %), ``fund_slope_off`` (fundamental slope outside 1 ± 0.1),
``points_excluded`` (some drives left out for overload or analyzer distortion),
``no_valid_range`` (nothing to fit: NaN) with ``in_compression`` when every clean drive was
above P1dB − 10 dB. When every clean drive has its product in the noise, the intercept is the
best single-point lower bound "> X" with ``in_noise``. Single-point figures carry their
readings' flags, and ``in_compression`` above P1dB − 10 dB.

Array functions take sweeps along the last axis, ascending in input power, NaN padding
ignored. The lower and upper products are reported separately (``_low``/``_high``), with
their asymmetry (upper − lower) and the worse of the two as the headline figure.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

from sweeprig.analysis import sweeps as sw
from sweeprig.analysis import validity
from sweeprig.analysis.captures import has_bit, point_table
from sweeprig.analysis.figures import (
    ANALYZER_DISTORTION,
    ATTEN_CARRIER_MOVED,
    BOUND_ABOVE,
    BOUND_BELOW,
    BOUND_NONE,
    FEW_POINTS,
    FUND_SLOPE_OFF,
    IN_COMPRESSION,
    IN_NOISE,
    MISSING_READING,
    NO_VALID_RANGE,
    OVERLOAD,
    POINTS_EXCLUDED,
    SLOPE_OFF,
    Figure,
    Maker,
    bound_difference,
    flag_bit,
    make_figures,
    mask_where,
    worst_of,
)
from sweeprig.errors import InputError

FUND_SLOPE_TOLERANCE = 0.1
#: Without P1dB, the local fundamental slope at the top of the range uses this many points.
SLOPE_WINDOW_POINTS = 3
#: ...or over the top this many dB of drive, when that holds more points (steadier with noise).
SLOPE_WINDOW_DB = 5.0
#: Relative tolerance of a product's fitted slope: 3 ± 0.3 for IM3, 2 ± 0.2 for IM2.
PRODUCT_SLOPE_TOLERANCE = 0.1
#: A two-tone drive whose wanted tones' gain fell more than this below the sweep's low-drive
#: gain is in compression (dB; see the module docstring for the derivation).
GAIN_DROP_DB = 0.2
#: The low-drive gain is the median over this many lowest clean drives.
GAIN_REFERENCE_POINTS = 3

_UNUSABLE = (
    flag_bit(OVERLOAD)
    | flag_bit(ANALYZER_DISTORTION)
    | flag_bit(ATTEN_CARRIER_MOVED)
    | flag_bit(MISSING_READING)
)
_EXCLUDED = flag_bit(OVERLOAD) | flag_bit(ANALYZER_DISTORTION) | flag_bit(ATTEN_CARRIER_MOVED)
_DISTORTION = flag_bit(ANALYZER_DISTORTION)

P1dbSource = float | Callable[[Mapping[str, float | str]], float | None] | None


@dataclass(frozen=True)
class InterceptFit:
    """Result of the constrained line fits (arrays, one value per sweep).

    ``input_dbm``/``output_dbm``: the intercept; ``gain_db``: offset of the slope-1 line;
    ``fund_slope``/``product_slope``: unconstrained slopes (NaN with < 2 points);
    ``count``: points in the fit.
    """

    input_dbm: np.ndarray
    output_dbm: np.ndarray
    gain_db: np.ndarray
    fund_slope: np.ndarray
    product_slope: np.ndarray
    count: np.ndarray


def intercept_point_dbm(
    input_dbm: ArrayLike, fund_out_dbm: ArrayLike, product_out_dbm: ArrayLike, order: int = 3
) -> np.ndarray:
    """Single-point input intercept: P_in + (P_fund − P_IMn)/(n − 1) (dBm)."""
    _check_order(order)
    x = np.asarray(input_dbm, dtype=float)
    return x + (np.asarray(fund_out_dbm, float) - np.asarray(product_out_dbm, float)) / (order - 1)


def fit_intercept(
    input_dbm: ArrayLike,
    fund_out_dbm: ArrayLike,
    product_out_dbm: ArrayLike,
    valid: ArrayLike | None = None,
    order: int = 3,
) -> InterceptFit:
    """Fit slope-1 and slope-``order`` lines over the ``valid`` points and intersect them."""
    _check_order(order)
    x = np.asarray(input_dbm, dtype=float)
    fund = np.asarray(fund_out_dbm, dtype=float)
    prod = np.asarray(product_out_dbm, dtype=float)
    keep = np.isfinite(x) & np.isfinite(fund) & np.isfinite(prod)
    if valid is not None:
        keep &= np.asarray(valid, dtype=bool)
    count = keep.sum(axis=-1)
    safe = np.maximum(count, 1)
    a = np.where(keep, fund - x, 0.0).sum(axis=-1) / safe
    b = np.where(keep, prod - order * x, 0.0).sum(axis=-1) / safe
    iip = np.where(count > 0, (a - b) / (order - 1), np.nan)
    gain = np.where(count > 0, a, np.nan)
    fund_slope, _, _ = sw.line_fit(x, fund, keep)
    prod_slope, _, _ = sw.line_fit(x, prod, keep)
    return InterceptFit(iip, iip + gain, gain, fund_slope, prod_slope, count)


def fit_range(
    input_dbm: ArrayLike,
    fund_out_dbm: ArrayLike,
    product_out_dbm: ArrayLike,
    product_floor_dbm: ArrayLike = np.nan,
    usable: ArrayLike | None = None,
    *,
    input_p1db_dbm: ArrayLike = np.nan,
    noise_margin_db: float = validity.FIT_NOISE_MARGIN_DB,
    backoff_db: float = validity.COMPRESSION_BACKOFF_DB,
    fund_slope_tolerance: float = FUND_SLOPE_TOLERANCE,
) -> tuple[np.ndarray, np.ndarray]:
    """Choose the points of each sweep to fit (see the module docstring).

    ``input_p1db_dbm``: per sweep (shape without the last axis) or scalar, NaN when unknown.
    Returns ``(valid, compressed)`` boolean arrays: ``compressed`` marks drives above
    P1dB − ``backoff_db`` (all False where P1dB is unknown).
    """
    x = np.asarray(input_dbm, dtype=float)
    fund = np.asarray(fund_out_dbm, dtype=float)
    prod = np.asarray(product_out_dbm, dtype=float)
    sw.require_ascending(x, "fit_range")
    ok = np.isfinite(x) & np.isfinite(fund) & np.isfinite(prod)
    if usable is not None:
        ok &= np.asarray(usable, dtype=bool)
    cand = ok & validity.clear_of_noise(prod, product_floor_dbm, noise_margin_db)
    p1db = np.broadcast_to(np.asarray(input_p1db_dbm, dtype=float), x.shape[:-1])
    known = np.isfinite(p1db)
    with np.errstate(invalid="ignore"):
        compressed = known[..., None] & np.isfinite(x) & (x > (p1db - backoff_db)[..., None])
    # Unknown P1dB: the longest prefix of candidates whose fundamental slope is 1 ± tol both
    # over the whole prefix and over its top SLOPE_WINDOW_DB of drive (at least
    # SLOPE_WINDOW_POINTS candidates): the local slope at the top end, because the
    # whole-prefix slope alone averages compressed points in.
    x0 = np.where(cand.any(axis=-1), sw.pick(x, sw.first_true(cand)[0]), 0.0)[..., None]
    xs = np.where(cand, x - x0, 0.0)  # centred for accuracy
    ys = np.where(cand, fund, 0.0)
    sums = np.stack(
        [np.cumsum(cand, axis=-1), *(np.cumsum(v, axis=-1) for v in (xs, ys, xs * xs, xs * ys))]
    )
    whole = _slope_from_sums(sums)
    rank = sums[0].astype(np.int64)
    cand_first = np.argsort(~cand, axis=-1, kind="stable")  # candidate positions, in order
    # candidates below the window = rank of the last one under x − SLOPE_WINDOW_DB
    below = _count_below(np.take_along_axis(np.where(cand, x, np.inf), cand_first, axis=-1),
                         x - SLOPE_WINDOW_DB)
    start_rank = np.minimum(below, rank - SLOPE_WINDOW_POINTS)  # sums before the window
    before = np.where(
        (start_rank >= 1)[None],
        np.take_along_axis(
            sums, np.broadcast_to(sw.pick_many(cand_first, start_rank - 1), sums.shape), axis=-1
        ),
        0.0,
    )
    local = _slope_from_sums(sums - before)
    tolerance = fund_slope_tolerance
    with np.errstate(invalid="ignore"):
        passes = cand & (rank >= 2) & (np.abs(whole - 1.0) <= tolerance)
        passes &= (rank < SLOPE_WINDOW_POINTS) | (np.abs(local - 1.0) <= tolerance)
    end, found = sw.last_true(passes)
    index = np.arange(x.shape[-1])
    by_slope = cand & found[..., None] & (index <= end[..., None])
    by_slope |= cand & (cand.sum(axis=-1) == 1)[..., None]
    valid = np.where(known[..., None], cand & ~compressed, by_slope)
    return valid, compressed


def _count_below(sorted_rows: np.ndarray, limits: np.ndarray) -> np.ndarray:
    """Per row, how many entries of ``sorted_rows`` (ascending, +inf padded) are below each
    entry of ``limits`` (same leading shape): one searchsorted over offset rows."""
    rows = sorted_rows.reshape(-1, sorted_rows.shape[-1])
    lim = limits.reshape(-1, limits.shape[-1])
    finite = np.isfinite(rows)
    span = float(np.abs(np.where(finite, rows, 0.0)).max(initial=0.0)) + 1.0
    with np.errstate(invalid="ignore"):
        limit_span = np.abs(np.where(np.isfinite(lim), lim, 0.0)).max(initial=0.0)
    span = 4.0 * max(span, float(limit_span) + 1.0)
    offset = (np.arange(rows.shape[0]) * span)[:, None]
    flat = np.where(finite, np.clip(rows, -span / 4, span / 4), span / 4) + offset
    targets = np.where(np.isfinite(lim), lim, -span / 4) + offset
    found = np.searchsorted(flat.ravel(), targets.ravel(), side="left").reshape(lim.shape)
    count = found - np.arange(rows.shape[0])[:, None] * rows.shape[-1]
    return np.clip(count, 0, rows.shape[-1]).reshape(limits.shape)


def _slope_from_sums(sums: np.ndarray) -> np.ndarray:
    """Least-squares slope from stacked sums (n, Σx, Σy, Σx², Σxy); NaN when undefined."""
    n, sx, sy, sxx, sxy = sums
    denom = n * sxx - sx * sx
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where((n >= 2) & (denom > 1e-12), (n * sxy - sx * sy) / denom, np.nan)


def gain_dropped(
    input_dbm: ArrayLike,
    gain_db: ArrayLike,
    usable: ArrayLike | None = None,
    *,
    drop_db: float = GAIN_DROP_DB,
    reference_points: int = GAIN_REFERENCE_POINTS,
) -> np.ndarray:
    """True at the drives of each sweep (last axis, ascending) whose gain is more than
    ``drop_db`` below the median gain of the sweep's ``reference_points`` lowest usable
    drives, from the first drive on which every higher usable drive is also that far down
    (compression does not come and go: a single low reading lower in the sweep is scatter,
    not compression). Unusable or NaN drives are never marked; a sweep with no usable drive
    has none.
    """
    x = np.asarray(input_dbm, dtype=float)
    gain = np.asarray(gain_db, dtype=float)
    ok = np.isfinite(x) & np.isfinite(gain)
    if usable is not None:
        ok &= np.asarray(usable, dtype=bool)
    rank = np.cumsum(ok, axis=-1)
    reference, used = sw.row_median(gain, ok & (rank <= reference_points))
    with np.errstate(invalid="ignore"):
        dropped = ok & (gain < (reference - drop_db)[..., None])
    return sw.tail_all(dropped, ok) & ok & (used > 0)[..., None]


def _check_order(order: int) -> None:
    if order < 2:
        raise InputError(
            f"intercept order {order} is not at least 2",
            where="intercept",
            fix="use 3 for IM3 (IIP3) or 2 for IM2 (IIP2)",
        )


# ---------------------------------------------------------------------------------------------
# capture-table adapter

_PRODUCTS = {3: ("im3_low", "im3_high"), 2: ("im2_low", "im2_high")}
TONE2 = "if_tone2"


def p1db_matcher(
    figures: Sequence[Figure],
    keys: Sequence[str] = ("temperature_c", "supply_v", "lo_freq_hz", "lo_power_dbm"),
    nearest: str = "rf_freq_hz",
) -> Callable[[Mapping[str, float | str]], float | None]:
    """A P1dB source for :func:`intercept_figures` from ``input_p1db`` figures.

    For a two-tone sweep it returns the input P1dB (a number, not a bound, without flags)
    measured with the same ``keys`` (to 9 significant digits) and the closest value of
    ``nearest``; None when there is none.
    """
    index: dict[tuple[object, ...], list[tuple[float, float]]] = {}
    for f in figures:
        if f.name == "input_p1db" and f.is_number and not f.flags:
            at = f.conditions.get(nearest)
            position = float(at) if isinstance(at, int | float) else 0.0
            index.setdefault(_key(f.conditions, keys), []).append((position, f.value))

    def lookup(conditions: Mapping[str, float | str]) -> float | None:
        candidates = index.get(_key(conditions, keys))
        if not candidates:
            return None
        at = conditions.get(nearest)
        position = float(at) if isinstance(at, int | float) else 0.0
        return min(candidates, key=lambda c: abs(c[0] - position))[1]

    return lookup


def _key(conditions: Mapping[str, float | str], keys: Sequence[str]) -> tuple[object, ...]:
    out: list[object] = []
    for k in keys:
        v = conditions.get(k)
        out.append(float(f"{v:.9g}") if isinstance(v, int | float) else v)
    return tuple(out)


def intercept_figures(
    captures: pd.DataFrame,
    *,
    orders: Sequence[int] = (3, 2),
    input_p1db_dbm: P1dbSource = None,
    study: str | Sequence[str] | None = None,
    make: Maker = make_figures,
) -> list[Figure]:
    """Intercept figures of every two-tone sweep (points grouped by every condition except
    the tone powers, swept in ``rf_power_dbm``).

    ``input_p1db_dbm``: the input P1dB, as one number for all sweeps, a function of a sweep's
    conditions (see :func:`p1db_matcher`) or None (then the fundamental-slope rule picks the
    range). Orders whose products are not in the capture are skipped. Figures, per order n
    (3 and/or 2) and side (``low``/``high``): ``iipN_point_side`` (and ``oip3_point_side``)
    and ``imN_side`` (dBc) at each drive; ``iipN_side`` (and ``oip3_side``) from the fits,
    ``imN_slope_side``; ``iipN`` (and ``oip3``) the worse side; ``iipN_asymmetry``; for
    n = 3 also ``fund_slope`` and ``im3_asymmetry`` at each drive.
    """
    names = [p for o in orders for p in _PRODUCTS.get(o, ())]
    for o in orders:
        _check_order(o)
    table = point_table(captures, [*names, TONE2], study=study, where="intercept")
    figures: list[Figure] = []
    # orders read at the same points (IM3 and IM2 of one sweep) share their conditions
    # mappings: made once, by the first
    made: dict[bytes, tuple[list[Mapping[str, float | str]], list[Mapping[str, float | str]]]] = {}
    for order in orders:
        sides = [p for p in _PRODUCTS.get(order, ()) if table[f"{p}_present"].any()]
        if not sides:
            continue
        rows = table["if_present"].to_numpy() & np.logical_or.reduce(
            [table[f"{p}_present"].to_numpy() for p in sides]
        )
        sub = table[rows].reset_index(drop=True)
        figures += _order_figures(sub, order, sides, input_p1db_dbm, made, rows.tobytes(),
                                  make=make)
    return figures


def _order_figures(
    table: pd.DataFrame, order: int, sides: list[str], p1db_source: P1dbSource,
    made: dict[bytes, tuple[list[Mapping[str, float | str]], list[Mapping[str, float | str]]]]
    | None = None, rows: bytes = b"", *, make: Maker = make_figures,
) -> list[Figure]:
    """The figures of one order. ``made``: the (per sweep, per point) conditions mappings
    of the rows of the table of intercept_figures given as ``rows`` (the table being those
    rows), for an order read at the same points to share them; None: made here."""
    keys = sw.default_keys(table, ("rf_power_dbm", "rf2_power_dbm"))
    sweeps = sw.group_sweeps(table, keys, "rf_power_dbm", where="intercept")
    if made is not None and rows in made:
        conditions, point_conditions = made[rows]
    else:
        conditions = sweeps.conditions(table)
        point_conditions = _point_conditions(table, sweeps)
        if made is not None:
            made[rows] = conditions, point_conditions
    p1db = _p1db_per_sweep(p1db_source, conditions)
    present = sweeps.present
    x = sweeps.take(table["rf_power_dbm"])
    fund = sweeps.take(table["if_level_dbm"])
    fund_flags = sweeps.take(table["if_flags"].to_numpy(), 0)
    point_ids = sweeps.take(table["point"].to_numpy(), -1)
    point_tuples = [(int(p),) for p in point_ids[present].tolist()]
    fund_noise = has_bit(fund_flags, IN_NOISE)
    in_compression = _tones_compressed(table, sweeps, x, fund, fund_flags, present)
    figures: list[Figure] = []
    per_side: dict[str, dict] = {}
    valid_union = np.zeros_like(present)
    for product in sides:
        side = product.rsplit("_", 1)[1]
        prod = sweeps.take(table[f"{product}_level_dbm"])
        floor = sweeps.take(table[f"{product}_noise_floor_dbm"])
        prod_flags = sweeps.take(table[f"{product}_flags"].to_numpy(), 0)
        flags = fund_flags | prod_flags
        prod_noise = has_bit(prod_flags, IN_NOISE)
        # analyzer_distortion without an attenuation repeat is the planner's prediction, not a
        # measurement: the drive stays in the fit, which carries the flag (and is suspect)
        tested = np.isfinite(sweeps.take(table[f"{product}_atten_level_dbm"]))
        predicted = has_bit(prod_flags, ANALYZER_DISTORTION) & ~tested
        measured = np.where(predicted, flags & ~_DISTORTION, flags)
        usable = present & ((measured & _UNUSABLE) == 0) & ~fund_noise
        valid, compressed = fit_range(x, fund, prod, floor, usable & ~in_compression,
                                      input_p1db_dbm=p1db)
        compressed |= in_compression
        valid_union |= valid
        fit = fit_intercept(x, fund, prod, valid, order)

        # single point at each drive
        prod_ub = np.where(prod_noise, validity.upper_bound_dbm(prod, floor), prod)
        single = intercept_point_dbm(x, fund, prod_ub, order)
        single = np.where(fund_noise, np.nan, single)
        single_bound = np.where(prod_noise & ~fund_noise, BOUND_ABOVE, BOUND_NONE)
        single_flags = flags | mask_where(compressed, IN_COMPRESSION)
        gain_here = fund - x
        tag = f"ip{order}"
        figures += make(
            f"i{tag}_point_{side}", "dBm", single[present], single_bound[present],
            single_flags[present], point_conditions, point_tuples,
        )
        if order == 3:
            figures += make(
                f"o{tag}_point_{side}", "dBm", (single + gain_here)[present],
                single_bound[present], single_flags[present], point_conditions, point_tuples,
            )
        dbc = prod_ub - fund
        dbc_bound = np.where(prod_noise, BOUND_BELOW, BOUND_NONE)
        figures += make(
            f"im{order}_{side}", "dBc", dbc[present], dbc_bound[present],
            single_flags[present], point_conditions, point_tuples,
        )

        # the fit
        count = fit.count
        fit_flags = np.bitwise_or.reduce(np.where(valid, flags, 0), axis=-1)
        fit_flags |= mask_where((count > 0) & (count < validity.MIN_LINEAR_POINTS), FEW_POINTS)
        tolerance = PRODUCT_SLOPE_TOLERANCE * order
        with np.errstate(invalid="ignore"):
            fit_flags |= mask_where(np.abs(fit.product_slope - order) > tolerance, SLOPE_OFF)
            fit_flags |= mask_where(
                np.abs(fit.fund_slope - 1.0) > FUND_SLOPE_TOLERANCE, FUND_SLOPE_OFF
            )
        excluded = present & ((measured & _EXCLUDED) != 0)
        fit_flags |= mask_where(excluded.any(axis=-1), POINTS_EXCLUDED)
        empty = count == 0
        # No fit: when every clean, uncompressed drive has the product in the noise, the
        # best single-point lower bound still says something ("> X").
        clean = usable & ~compressed
        noise_only = empty & clean.any(axis=-1) & ~(clean & ~prod_noise).any(axis=-1)
        best = np.argmax(np.where(clean & prod_noise, single, -np.inf), axis=-1)
        value = np.where(noise_only, sw.pick(single, best), fit.input_dbm)
        out_value = np.where(noise_only, sw.pick(single + gain_here, best), fit.output_dbm)
        bound = np.where(noise_only, BOUND_ABOVE, BOUND_NONE)
        fit_flags |= mask_where(noise_only, IN_NOISE)
        fit_flags |= mask_where(empty & ~noise_only, NO_VALID_RANGE)
        fit_flags |= mask_where(
            empty & ~noise_only & (usable & compressed).any(axis=-1), IN_COMPRESSION
        )
        fit_flags |= mask_where(empty & ~present.any(axis=-1), MISSING_READING)
        fit_points_mask = np.where(
            noise_only[:, None], np.arange(x.shape[-1]) == best[:, None], valid
        )
        fit_points = sweeps.points(table, fit_points_mask)
        figures += make(
            f"i{tag}_{side}", "dBm", value, bound, fit_flags, conditions, fit_points
        )
        if order == 3:
            figures += make(
                f"o{tag}_{side}", "dBm", out_value, bound, fit_flags, conditions, fit_points
            )
        slope_flags = mask_where(count < validity.MIN_LINEAR_POINTS, FEW_POINTS)
        figures += make(
            f"im{order}_slope_{side}", "dB/dB", fit.product_slope, BOUND_NONE,
            slope_flags | (fit_flags & flag_bit(SLOPE_OFF)), conditions, fit_points,
        )
        per_side[side] = {
            "iip": value, "oip": out_value, "bound": bound, "flags": fit_flags,
            "points": fit_points, "prod": prod_ub,
            "prod_bound": dbc_bound, "point_flags": single_flags,
        }

    # both sides together
    if len(per_side) == 2:
        low, high = per_side["low"], per_side["high"]
        flags = low["flags"] | high["flags"]
        points = [
            tuple(sorted(set(a) | set(b)))
            for a, b in zip(low["points"], high["points"], strict=True)
        ]
        bounds = np.stack([low["bound"], high["bound"]], axis=-1)
        value, bound = worst_of(np.stack([low["iip"], high["iip"]], axis=-1), bounds)
        figures += make(f"iip{order}", "dBm", value, bound, flags, conditions, points)
        if order == 3:
            value, bound = worst_of(np.stack([low["oip"], high["oip"]], axis=-1), bounds)
            figures += make("oip3", "dBm", value, bound, flags, conditions, points)
        value, bound = bound_difference(high["iip"], high["bound"], low["iip"], low["bound"])
        figures += make(
            f"iip{order}_asymmetry", "dB", value, bound, flags, conditions, points
        )
        if order == 3:
            level, level_bound = bound_difference(
                high["prod"], high["prod_bound"], low["prod"], low["prod_bound"]
            )
            both = low["point_flags"] | high["point_flags"]
            figures += make(
                "im3_asymmetry", "dB", level[present], level_bound[present], both[present],
                point_conditions, point_tuples,
            )
    elif per_side:
        (only,) = per_side.values()
        figures += make(
            f"iip{order}", "dBm", only["iip"], only["bound"], only["flags"], conditions,
            only["points"],
        )
        if order == 3:
            figures += make(
                "oip3", "dBm", only["oip"], only["bound"], only["flags"], conditions,
                only["points"],
            )
    if order == 3:
        slope, _, count = sw.line_fit(x, fund, valid_union)
        with np.errstate(invalid="ignore"):
            slope_flags = mask_where(count < validity.MIN_LINEAR_POINTS, FEW_POINTS) | mask_where(
                np.abs(slope - 1.0) > FUND_SLOPE_TOLERANCE, FUND_SLOPE_OFF
            )
        figures += make(
            "fund_slope", "dB/dB", slope, BOUND_NONE, slope_flags, conditions,
            sweeps.points(table, valid_union),
        )
    return figures


def _tones_compressed(
    table: pd.DataFrame, sweeps: sw.Sweeps, x: np.ndarray, fund: np.ndarray,
    fund_flags: np.ndarray, present: np.ndarray,
) -> np.ndarray:
    """Drives where either wanted tone's own gain dropped (see :func:`gain_dropped`)."""
    clean = present & ((fund_flags & (_UNUSABLE | flag_bit(IN_NOISE))) == 0)
    dropped = gain_dropped(x, fund - x, clean)
    if f"{TONE2}_present" in table and table[f"{TONE2}_present"].any():
        x2 = sweeps.take(table["rf2_power_dbm"])
        fund2 = sweeps.take(table[f"{TONE2}_level_dbm"])
        flags2 = sweeps.take(table[f"{TONE2}_flags"].to_numpy(), 0)
        clean2 = present & ((flags2 & (_UNUSABLE | flag_bit(IN_NOISE))) == 0)
        dropped |= gain_dropped(x, fund2 - x2, clean2)
    return dropped


def _p1db_per_sweep(
    source: P1dbSource, conditions: list[Mapping[str, float | str]]
) -> np.ndarray:
    if source is None:
        return np.full(len(conditions), np.nan)
    if callable(source):
        values = [source(c) for c in conditions]
        return np.array([np.nan if v is None else float(v) for v in values], dtype=float)
    if isinstance(source, int | float) and not isinstance(source, bool):
        return np.full(len(conditions), float(source))
    raise InputError(
        f"input_p1db_dbm is a {type(source).__name__}",
        where="intercept_figures",
        fix="give a number in dBm, a function of the sweep conditions, or None",
    )


def _point_conditions(table: pd.DataFrame, sweeps: sw.Sweeps) -> list[Mapping[str, float | str]]:
    from sweeprig.analysis.captures import conditions_records

    return conditions_records(table, sweeps.rows[sweeps.present])
