"""Conversion gain, its flatness over a band, temperature coefficient and LO-drive needs.

Conversion gain G = P_IF − P_RF (dB), both at the DUT ports. Array functions work along the
last axis (one sweep per row, NaN padding ignored); the ``*_figures`` functions take a
capture table (see :mod:`sweeprig.analysis.captures`) and return :class:`Figure` lists.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

from sweeprig.analysis import sweeps as sw
from sweeprig.analysis.captures import conditions_records, has_bit, point_table
from sweeprig.analysis.figures import (
    BOUND_ABOVE,
    BOUND_BELOW,
    BOUND_NONE,
    EDGE_OF_SWEEP,
    FEW_POINTS,
    IN_NOISE,
    MISSING_READING,
    Figure,
    Maker,
    make_figures,
    mask_where,
)
from sweeprig.analysis.validity import UNPOWERED_GAIN_MARGIN_DB, gain_collapsed

#: LO drive: the gain counts as "full" within this much of its maximum (dB).
LO_GAIN_WITHIN_DB = 0.5
#: LO drive: the gain is "still rising" when the highest LO power tested beats every other by
#: more than this (dB; our choice, no source: above the scatter of repeated gain readings).
LO_GAIN_RISING_DB = 0.1


def conversion_gain_db(if_power_dbm: ArrayLike, rf_power_dbm: ArrayLike) -> np.ndarray:
    """G = P_IF − P_RF (dB), powers at the DUT ports in dBm."""
    return np.asarray(if_power_dbm, dtype=float) - np.asarray(rf_power_dbm, dtype=float)


def gain_flatness_db(
    gain_db: ArrayLike,
    freq_hz: ArrayLike | None = None,
    band_hz: tuple[float, float] | None = None,
) -> np.ndarray:
    """max − min of the gain along the last axis (dB), over points with ``freq_hz`` inside
    ``band_hz`` (inclusive) when a band is given. NaN where no point counts."""
    gain = np.asarray(gain_db, dtype=float)
    keep = np.isfinite(gain)
    if band_hz is not None:
        if freq_hz is None:
            raise ValueError("gain_flatness_db: band_hz needs freq_hz")
        freq = np.asarray(freq_hz, dtype=float)
        keep &= (freq >= band_hz[0]) & (freq <= band_hz[1])
    high = np.where(keep, gain, -np.inf).max(axis=-1, initial=-np.inf)
    low = np.where(keep, gain, np.inf).min(axis=-1, initial=np.inf)
    return np.where(keep.any(axis=-1), high - low, np.nan)


def gain_tempco_db_per_c(temperature_c: ArrayLike, gain_db: ArrayLike) -> np.ndarray:
    """Least-squares slope of gain versus temperature along the last axis (dB/°C).

    NaN with fewer than two distinct temperatures.
    """
    slope, _, _ = sw.line_fit(np.asarray(temperature_c, float), np.asarray(gain_db, float))
    return slope


def lo_power_for_gain_dbm(
    lo_power_dbm: ArrayLike,
    gain_db: ArrayLike,
    within_db: float = LO_GAIN_WITHIN_DB,
    rising_db: float = LO_GAIN_RISING_DB,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Lowest LO power from which the gain stays within ``within_db`` of its maximum.

    ``lo_power_dbm`` ascending along the last axis. Returns (value dBm, bound code, at the
    edge). The value is a tested LO power (no interpolation). It is a "<" bound when already
    the lowest LO power tested qualifies (less may do), and a ">" bound when the gain is still
    rising at the highest LO power tested (it beats every other point by more than
    ``rising_db``: the true maximum may lie beyond, so more drive may be needed); the third
    array is True in both edge cases.
    """
    lo = np.asarray(lo_power_dbm, dtype=float)
    gain = np.asarray(gain_db, dtype=float)
    sw.require_ascending(lo, "lo_power_for_gain_dbm")
    present = np.isfinite(lo) & np.isfinite(gain)
    best = np.where(present, gain, -np.inf).max(axis=-1, initial=-np.inf)
    ok = present & (gain >= best[..., None] - within_db)
    start, found = sw.first_true(sw.tail_all(ok, present) & present)
    value = np.where(found, sw.pick(lo, start), np.nan)
    first_present, _ = sw.first_true(present)
    last_present, _ = sw.last_true(present)
    index = np.arange(lo.shape[-1])
    others = np.where(present & (index != last_present[..., None]), gain, -np.inf)
    top_gain = sw.pick(gain, last_present)
    at_top = found & (top_gain - others.max(axis=-1, initial=-np.inf) > rising_db)
    at_bottom = found & (start == first_present) & ~at_top
    bound = np.where(at_top, BOUND_ABOVE, np.where(at_bottom, BOUND_BELOW, BOUND_NONE))
    return value, bound, at_top | at_bottom


# ---------------------------------------------------------------------------------------------
# capture-table adapters


def gain_table(captures: pd.DataFrame, *, study: str | Sequence[str] | None = None) -> pd.DataFrame:
    """One row per point with an ``if`` reading: its conditions, ``gain_db``, ``gain_bound``
    (code) and ``gain_flags`` (mask; ``in_noise`` makes the gain a "<" bound)."""
    table = point_table(captures, ("if",), study=study, where="gain")
    table = table[table["if_present"].to_numpy()].reset_index(drop=True)
    table["gain_db"] = conversion_gain_db(table["if_level_dbm"], table["rf_power_dbm"])
    flags = table["if_flags"].to_numpy()
    table["gain_bound"] = np.where(has_bit(flags, IN_NOISE), BOUND_BELOW, BOUND_NONE)
    table["gain_flags"] = flags
    return table


def unpowered_points(
    captures: pd.DataFrame, expected_gain_db: float,
    margin_db: float = UNPOWERED_GAIN_MARGIN_DB,
) -> np.ndarray:
    """Run-store indices (ascending) of the points whose conversion gain, from their ``if``
    reading, is more than ``margin_db`` below ``expected_gain_db``: the part looks
    unpowered, wrongly powered or not driven there (see
    :func:`sweeprig.analysis.validity.gain_collapsed`). Every study with an ``if`` reading
    counts, two-tone ones included (tone 1's output against its drive)."""
    if captures.empty:
        return np.zeros(0, dtype=np.int64)
    table = gain_table(captures)
    collapsed = gain_collapsed(table["gain_db"].to_numpy(), expected_gain_db, margin_db)
    return np.asarray(table["point"].to_numpy()[collapsed], dtype=np.int64)


def conversion_gain_figures(
    captures: pd.DataFrame, *, study: str | Sequence[str] | None = None,
    make: Maker = make_figures,
) -> list[Figure]:
    """``conversion_gain`` at every point with an ``if`` reading (conditions: the point's)."""
    table = gain_table(captures, study=study)
    rows = np.arange(len(table))
    return make(
        "conversion_gain",
        "dB",
        table["gain_db"].to_numpy(),
        table["gain_bound"].to_numpy(),
        table["gain_flags"].to_numpy(),
        conditions_records(table, rows),
        [(p,) for p in table["point"].tolist()],
    )


def gain_flatness_figures(
    captures: pd.DataFrame,
    *,
    band_hz: tuple[float, float] | None = None,
    over: str = "rf_freq_hz",
    along: Sequence[str] = ("lo_freq_hz",),
    study: str | Sequence[str] | None = None,
) -> list[Figure]:
    """``gain_flatness`` (max − min gain) over ``over`` inside ``band_hz`` (all when None),
    one figure per group of the other conditions. ``along`` names columns that move with
    ``over`` in the sweep (the LO follows the RF for a fixed IF) and so are not fixed.
    Conditions gain ``band_low_hz``/``band_high_hz`` when a band is given."""
    table = gain_table(captures, study=study)
    keys = sw.default_keys(table, (over, *along))
    sweeps = sw.group_sweeps(table, keys, over, where="gain_flatness")
    gain = sweeps.take(table["gain_db"])
    freq = sweeps.take(table[over])
    inside = sweeps.present
    if band_hz is not None:
        inside = inside & (freq >= band_hz[0]) & (freq <= band_hz[1])
    value = gain_flatness_db(gain, freq, band_hz)
    flags = np.bitwise_or.reduce(np.where(inside, sweeps.take(table["gain_flags"], 0), 0), axis=-1)
    count = inside.sum(axis=-1)
    flags |= mask_where(count < 2, FEW_POINTS)
    # A "<" gain (IF in the noise) makes max − min unknowable in general: keep the number,
    # the in_noise flag says so. Missing readings cannot occur here (rows need an IF reading).
    conditions = sweeps.conditions(table)
    if band_hz is not None:
        conditions = [
            {**c, "band_low_hz": float(band_hz[0]), "band_high_hz": float(band_hz[1])}
            for c in conditions
        ]
    return make_figures(
        "gain_flatness", "dB", value, BOUND_NONE, flags, conditions, sweeps.points(table, inside)
    )


def gain_tempco_figures(
    captures: pd.DataFrame, *, study: str | Sequence[str] | None = None
) -> list[Figure]:
    """``gain_tempco`` (dB/°C): least-squares slope over temperature, one figure per group
    of the other conditions. ``few_points`` when fewer than two temperatures."""
    table = gain_table(captures, study=study)
    keys = sw.default_keys(table, ("temperature_c",))
    sweeps = sw.group_sweeps(table, keys, "temperature_c", where="gain_tempco")
    temp = sweeps.take(table["temperature_c"])
    gain = sweeps.take(table["gain_db"])
    value = gain_tempco_db_per_c(temp, gain)
    flags = np.bitwise_or.reduce(sweeps.take(table["gain_flags"], 0), axis=-1)
    distinct = _distinct_count(temp)
    flags |= mask_where(distinct < 2, FEW_POINTS)
    return make_figures(
        "gain_tempco",
        "dB/°C",
        value,
        BOUND_NONE,
        flags,
        sweeps.conditions(table),
        sweeps.points(table),
    )


def lo_drive_figures(
    captures: pd.DataFrame,
    *,
    within_db: float = LO_GAIN_WITHIN_DB,
    study: str | Sequence[str] | None = None,
) -> list[Figure]:
    """``lo_power_for_gain``: the lowest LO power tested from which the gain stays within
    ``within_db`` of its maximum, one figure per group of the other conditions."""
    table = gain_table(captures, study=study)
    keys = sw.default_keys(table, ("lo_power_dbm",))
    sweeps = sw.group_sweeps(table, keys, "lo_power_dbm", where="lo_drive")
    lo = sweeps.take(table["lo_power_dbm"])
    gain = sweeps.take(table["gain_db"])
    value, bound, edge = lo_power_for_gain_dbm(lo, gain, within_db)
    bound = np.where(sweeps.present.sum(axis=-1) < 2, BOUND_NONE, bound)
    flags = np.bitwise_or.reduce(sweeps.take(table["gain_flags"], 0), axis=-1)
    flags |= mask_where(edge, EDGE_OF_SWEEP)
    flags |= mask_where(sweeps.present.sum(axis=-1) < 2, FEW_POINTS)
    flags |= mask_where(np.isnan(value), MISSING_READING)
    return make_figures(
        "lo_power_for_gain",
        "dBm",
        value,
        bound,
        flags,
        sweeps.conditions(table),
        sweeps.points(table),
    )


def _distinct_count(values: np.ndarray) -> np.ndarray:
    """Number of distinct finite values along the last axis (values ascending, NaN last)."""
    finite = np.isfinite(values)
    if values.shape[-1] == 0:
        return np.zeros(values.shape[:-1], dtype=np.int64)
    with np.errstate(invalid="ignore"):
        step = np.diff(values, axis=-1) > 0
    return finite[..., :1].sum(axis=-1) + (step & finite[..., 1:]).sum(axis=-1)

