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

from collections.abc import Iterable, Sequence
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
    columns: dict[str, object] = {
        "name": [f.name for f in picked],
        "value": np.array([f.value for f in picked], dtype=float),
        "unit": [f.unit for f in picked],
        "bound": [f.bound or "" for f in picked],
        "uncertainty_db": np.array([f.uncertainty_db for f in picked], dtype=float),
        "flags": np.array(flag_masks, dtype=np.int64),
        "points": [tuple(f.points) for f in picked],
    }
    keys: dict[str, None] = {}
    for f in picked:
        for key in f.conditions:
            if key not in keys:
                keys[key] = None
    for key in keys:
        values = [f.conditions.get(key) for f in picked]
        if key == "study" or any(isinstance(v, str) for v in values):
            columns[key] = ["" if v is None else str(v) for v in values]
        else:
            columns[key] = np.array([np.nan if v is None else float(v) for v in values],
                                    dtype=float)
    return pd.DataFrame(columns, index=pd.Index(rows, dtype=np.int64, name="figure"))

