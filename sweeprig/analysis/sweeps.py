"""Sweeps: points grouped by their fixed conditions and laid out as padded 2-D arrays.

A point table (one row per point) is split into groups that share ``keys`` (the fixed
settings); inside a group the rows are ordered by the swept column. :class:`Sweeps` holds the
row numbers as a ``(groups, longest sweep)`` array padded with -1, so every sweep can be
reduced at once along the last axis; :meth:`Sweeps.take` reads a column into that layout with
NaN padding. NaN values of a key form their own group value (single-tone points have NaN
``rf2_freq_hz``).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from sweeprig.analysis.captures import POINT, STUDY, conditions_records
from sweeprig.errors import InputError


@dataclass(frozen=True)
class Sweeps:
    """Row layout of grouped sweeps. ``rows[g, k]``: table row of the k-th point of group g
    (ascending in the swept column), -1 past the end of the group."""

    rows: np.ndarray
    keys: tuple[str, ...]
    swept: str

    @property
    def count(self) -> int:
        """Number of groups."""
        return int(self.rows.shape[0])

    @property
    def present(self) -> np.ndarray:
        """(groups, n) bool: True where a point sits (False in the padding)."""
        return self.rows >= 0

    @property
    def first_rows(self) -> np.ndarray:
        """(groups,) the first table row of each group (for its conditions)."""
        return self.rows[:, 0]

    def take(self, column: np.ndarray | pd.Series, fill: float = np.nan) -> np.ndarray:
        """(groups, n) array of ``column`` values, ``fill`` in the padding."""
        values = np.asarray(column)
        out = values[np.where(self.rows >= 0, self.rows, 0)]
        if out.dtype == bool:
            return out & (self.rows >= 0)
        if np.issubdtype(out.dtype, np.integer):
            return np.where(self.rows >= 0, out, int(fill) if np.isfinite(fill) else 0)
        return np.where(self.rows >= 0, out, fill)

    def points(self, table: pd.DataFrame | Mapping[str, np.ndarray], mask: np.ndarray | None = None
               ) -> list[tuple[int, ...]]:
        """Per group, the point indices of its members (where ``mask`` is true, if given)."""
        point = np.asarray(table[POINT], dtype=np.int64)
        keep = self.present if mask is None else (self.present & mask)
        taken = point[np.where(keep, self.rows, 0)]
        return [tuple(taken[g][keep[g]].tolist()) for g in range(self.count)]

    def conditions(
        self, table: pd.DataFrame | Mapping[str, np.ndarray]
    ) -> list[Mapping[str, float | str]]:
        """Per group, its fixed conditions (the key columns, NaN ones left out)."""
        return conditions_records(table, self.first_rows, self.keys)


def group_sweeps(
    table: pd.DataFrame, keys: Sequence[str], swept: str, *, where: str = "analysis"
) -> Sweeps:
    """Group a point table by ``keys`` and order each group by ``swept`` (ascending, NaN
    last). Raises InputError when a column is missing."""
    missing = [k for k in (*keys, swept) if k not in table.columns]
    if missing:
        raise InputError(
            f"the point table has no column {', '.join(repr(k) for k in missing)}",
            where=where,
            fix="group sweeps by condition columns of the capture table",
        )
    count = len(table)
    if count == 0:
        return Sweeps(np.full((0, 1), -1, dtype=np.int64), tuple(keys), swept)
    if keys:
        group = table.groupby(list(keys), dropna=False, sort=True).ngroup().to_numpy(np.int64)
    else:
        group = np.zeros(count, dtype=np.int64)
    order_value = np.asarray(table[swept], dtype=float)
    order = np.lexsort((np.where(np.isnan(order_value), np.inf, order_value), group))
    sorted_group = group[order]
    sizes = np.bincount(sorted_group)
    starts = np.concatenate(([0], np.cumsum(sizes)[:-1]))
    position = np.arange(count) - starts[sorted_group]
    rows = np.full((sizes.size, int(sizes.max())), -1, dtype=np.int64)
    rows[sorted_group, position] = order
    return Sweeps(rows, tuple(keys), swept)


def default_keys(table: pd.DataFrame, swept: Sequence[str]) -> tuple[str, ...]:
    """Study plus every condition column of ``table`` except the ``swept`` ones."""
    from sweeprig.analysis.captures import CONDITION_COLUMNS

    return (STUDY, *[c for c in CONDITION_COLUMNS if c in table.columns and c not in swept])


def row_median(values: np.ndarray, mask: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Median along the last axis over finite entries (where ``mask``), without warnings.

    Returns (median, count); the median is NaN where nothing counts.
    """
    values = np.asarray(values, dtype=float)
    keep = np.isfinite(values) if mask is None else (np.isfinite(values) & mask)
    data = np.sort(np.where(keep, values, np.inf), axis=-1)
    count = keep.sum(axis=-1)
    if values.shape[-1] == 0:
        return np.full(values.shape[:-1], np.nan), count
    lo = np.clip((count - 1) // 2, 0, None)
    hi = np.clip(count // 2, 0, None)
    a = np.take_along_axis(data, lo[..., None], axis=-1)[..., 0]
    b = np.take_along_axis(data, hi[..., None], axis=-1)[..., 0]
    return np.where(count > 0, 0.5 * (a + b), np.nan), count


def line_fit(
    x: np.ndarray, y: np.ndarray, mask: np.ndarray | None = None
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Least-squares line y = slope·x + offset along the last axis, over finite (masked)
    entries. Returns (slope, offset, count); slope NaN with fewer than 2 distinct x."""
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    keep = np.isfinite(x) & np.isfinite(y)
    if mask is not None:
        keep &= mask
    count = keep.sum(axis=-1)
    safe = np.maximum(count, 1)
    xs = np.where(keep, x, 0.0)
    ys = np.where(keep, y, 0.0)
    x_mean = xs.sum(axis=-1) / safe
    y_mean = ys.sum(axis=-1) / safe
    dx = np.where(keep, x - x_mean[..., None], 0.0)
    dy = np.where(keep, y - y_mean[..., None], 0.0)
    sxx = (dx * dx).sum(axis=-1)
    sxy = (dx * dy).sum(axis=-1)
    ok = (count >= 2) & (sxx > 0)
    slope = np.where(ok, sxy / np.where(ok, sxx, 1.0), np.nan)
    offset = np.where(ok, y_mean - slope * x_mean, np.nan)
    return slope, offset, count


def require_ascending(x: np.ndarray, where: str) -> None:
    """Raise InputError unless the finite values along the last axis are ascending."""
    x = np.asarray(x, dtype=float)
    if x.shape[-1] < 2:
        return
    with np.errstate(invalid="ignore"):
        step = np.diff(x, axis=-1)
    if (step < 0).any():
        raise InputError(
            "the swept values are not in ascending order",
            where=where,
            fix="sort each sweep by its swept value (NaN padding at the end)",
        )


def tail_all(condition: np.ndarray, present: np.ndarray) -> np.ndarray:
    """True at k when ``condition`` holds at every present position ≥ k (last axis)."""
    ok = np.asarray(condition, dtype=bool) | ~np.asarray(present, dtype=bool)
    return np.flip(np.logical_and.accumulate(np.flip(ok, axis=-1), axis=-1), axis=-1)


def first_true(condition: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(index of the first True along the last axis, whether there is one)."""
    condition = np.asarray(condition, dtype=bool)
    return np.argmax(condition, axis=-1), condition.any(axis=-1)


def last_true(condition: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(index of the last True along the last axis, whether there is one)."""
    condition = np.asarray(condition, dtype=bool)
    n = condition.shape[-1]
    return n - 1 - np.argmax(np.flip(condition, axis=-1), axis=-1), condition.any(axis=-1)


def pick(values: np.ndarray, index: np.ndarray) -> np.ndarray:
    """values[..., index] per row (index shaped like values without its last axis)."""
    values = np.asarray(values)
    index = np.clip(np.asarray(index, dtype=np.int64), 0, max(values.shape[-1] - 1, 0))
    return np.take_along_axis(values, index[..., None], axis=-1)[..., 0]


def pick_many(values: np.ndarray, index: np.ndarray) -> np.ndarray:
    """values[row, index[row, k]] for an index array of the same shape (clipped to range)."""
    values = np.asarray(values)
    index = np.clip(np.asarray(index, dtype=np.int64), 0, max(values.shape[-1] - 1, 0))
    return np.take_along_axis(values, index, axis=-1)
