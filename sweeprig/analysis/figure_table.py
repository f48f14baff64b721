"""Figures as columns: :func:`figure_table`, one row per figure of the names asked for.

What a plot or a table needs from many figures at once (a large run holds hundreds of
thousands), read in one pass over the figures of those names only, without a dict per
figure. Columns, in this order:

``name`` (str), ``value`` (float, in ``unit``), ``unit`` (str), ``bound`` ("<", ">" or ""),
``uncertainty_db`` (expanded, k = 2, in ``unit``; NaN without a budget), ``flags`` (int64
flag mask: bit i is ``FLAGS[i]``, see :func:`sweeprig.analysis.figures.flag_bit`;
:func:`sweeprig.analysis.captures.has_bit` tests one), ``points`` (tuple of run-store point
indices), then one column per condition key met among those figures, in order of first
appearance: floats (NaN where a figure lacks it), except ``study`` and any key with text
values, which are str ("" where missing). The index is the figure's position in the sequence
given (for a run, ``run.figures``), so a row leads back to its Figure.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from typing import TYPE_CHECKING

import numpy as np

from sweeprig.analysis.figures import Figure, flag_bit

if TYPE_CHECKING:
    import pandas as pd

#: The columns every figure table has, before its condition columns.
BASE_COLUMNS: tuple[str, ...] = ("name", "value", "unit", "bound", "uncertainty_db", "flags",
                                 "points")


def figure_table(figures: Sequence[Figure], names: Iterable[str] | None = None
                 ) -> pd.DataFrame:
    """The figures called any of ``names`` (None: all) as a table (see the module
    docstring)."""
    import pandas as pd

    rows, columns = figure_columns(figures, names)
    return pd.DataFrame({k: v.tolist() if v.dtype == object else v
                         for k, v in columns.items()},
                        index=pd.Index(rows, dtype=np.int64, name="figure"))


def figure_columns(figures: Sequence[Figure], names: Iterable[str] | None = None
                   ) -> tuple[np.ndarray, dict[str, np.ndarray]]:
    """:func:`figure_table`'s rows (positions in ``figures``) and columns as numpy arrays
    (text and ``points`` as object arrays), without building the DataFrame: for a caller
    that formats them at once (the report's figure table)."""
    wanted = None if names is None else frozenset(names)
    rows: list[int] = []
    picked: list[Figure] = []
    for i, f in enumerate(figures):
        if wanted is None or f.name in wanted:
            rows.append(i)
            picked.append(f)
    masks: dict[tuple[str, ...], int] = {}
    flag_masks = []
    for f in picked:
        mask = masks.get(f.flags)
        if mask is None:
            mask = masks[f.flags] = sum(flag_bit(flag) for flag in f.flags)
        flag_masks.append(mask)
    points = np.empty(len(picked), dtype=object)
    points[:] = [tuple(f.points) for f in picked]
    columns: dict[str, np.ndarray] = {
        "name": np.array([f.name for f in picked], dtype=object),
        "value": np.array([f.value for f in picked], dtype=float),
        "unit": np.array([f.unit for f in picked], dtype=object),
        "bound": np.array([f.bound or "" for f in picked], dtype=object),
        "uncertainty_db": np.array([f.uncertainty_db for f in picked], dtype=float),
        "flags": np.array(flag_masks, dtype=np.int64),
        "points": points,
    }
    # figures of one point or group share their conditions mapping: read each distinct
    # mapping once (in order of first appearance) and spread its values by index
    distinct, which = distinct_conditions(picked)
    keys: dict[str, None] = {}
    for conditions in distinct:
        for key in conditions:
            if key not in keys:
                keys[key] = None
    for key in keys:
        values = [c.get(key) for c in distinct]
        if key == "study" or any(isinstance(v, str) for v in values):
            texts = np.array(["" if v is None else str(v) for v in values], dtype=object)
            columns[key] = texts[which]
        else:
            numbers = np.array([np.nan if v is None else float(v) for v in values],
                               dtype=float)
            columns[key] = numbers[which]
    return np.array(rows, dtype=np.int64), columns


def distinct_conditions(figures: Sequence[Figure]
                         ) -> tuple[list[Mapping[str, object]], np.ndarray]:
    """The distinct conditions mappings (by identity) of ``figures`` in order of first
    appearance, and per figure the index of its own among them."""
    mappings = [f.conditions for f in figures]
    if not mappings:
        return [], np.zeros(0, dtype=np.int64)
    ids = np.fromiter(map(id, mappings), dtype=np.uint64, count=len(mappings))
    _, first, inverse = np.unique(ids, return_index=True, return_inverse=True)
    order = np.argsort(first, kind="stable")
    rank = np.empty_like(order)
    rank[order] = np.arange(order.size)
    return [mappings[i] for i in first[order].tolist()], rank[inverse.ravel()]


def condition_mappings(figures: Iterable[Figure]) -> list[Mapping[str, object]]:
    """The distinct conditions mappings (by identity) of ``figures``, in order of first
    appearance: what a question about the set of condition values needs to read (the
    figures of one point share one mapping)."""
    return list({id(f.conditions): f.conditions for f in figures}.values())
