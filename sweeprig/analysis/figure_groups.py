"""A run's figures of some names grouped by name and by conditions, held as columns:
:class:`HeldGroup`, :func:`held_groups`.

The report's summary shows one line per figure name and group of conditions (study,
temperature, supply): the worst figure, the range, the flags counted, the conditions that
vary inside. A large run has hundreds of thousands of such figures, most of them in blocks
(:mod:`sweeprig.analysis.figure_block`); making each as a :class:`Figure` only to read its
value, flags and conditions cost the report most of a second and about 50 MB at 100k points.
A group here holds its members' positions, values, flag masks and conditions mappings as
arrays, read from the blocks' columns; the one figure a line shows is made by
:meth:`HeldGroup.figure`. Given the run's conditions as columns
(:class:`~sweeprig.analysis.figure_table.RunConditions`, as the report has them), the
groups' keys, their conditions' distinct numbers and the nominal corner are read from
those columns too, not mapping by mapping (170k distinct mappings at 100k points).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from sweeprig.analysis.figure_block import Figures, named_columns
from sweeprig.analysis.figure_table import (
    RunConditions,
    condition_numbers,
    distinct_mappings,
    first_appearances,
)
from sweeprig.analysis.figures import Figure, flags_from_mask

#: Two condition values are the same corner when :func:`math.isclose` says so with these.
_REL_TOL, _ABS_TOL = 1e-9, 1e-12


def _close(value: object, target: float) -> bool:
    """``value`` is a number within :data:`_REL_TOL` / :data:`_ABS_TOL` of ``target``."""
    return isinstance(value, int | float) and math.isclose(float(value), target,
                                                            rel_tol=_REL_TOL, abs_tol=_ABS_TOL)


@dataclass(frozen=True, eq=False)
class HeldGroup:
    """The figures of one name whose conditions give one group key, in position order:
    ``positions`` (their numbers in the run's figure table, ascending, int64), ``values``
    (float), ``bounds`` ("", "<" or ">"), ``uncertainty_db`` (float, the figure's unit),
    ``masks`` (flag masks, int64), ``points`` (each one's run-store point tuple, object),
    ``mappings`` (their distinct conditions mappings, by identity, in order of first
    appearance: the figures of one point share one; the first member's is the first) and
    ``mapping_of`` (each one's index among ``mappings``, int64). ``unit``: the first
    member's."""

    figures: Figures
    name: str
    key: tuple[object, ...]
    unit: str
    positions: np.ndarray
    values: np.ndarray
    bounds: np.ndarray
    uncertainty_db: np.ndarray
    masks: np.ndarray
    points: np.ndarray
    mappings: tuple[Mapping[str, object], ...]
    mapping_of: np.ndarray
    #: The run's conditions as columns, and the index there of each of ``mappings``
    #: (:func:`held_groups` given them), else None.
    conditions: RunConditions | None = None
    mapping_rows: np.ndarray | None = None

    def __len__(self) -> int:
        return int(self.positions.size)

    def figure(self, k: int) -> Figure:
        """Member ``k`` as a :class:`Figure`: a block's made without its budget (what the
        summary and the datasheet read never includes one), a loose figure as it is."""
        return self.figures.figure_at(int(self.positions[k]), budgets=False)

    def condition_numbers(self, key: str, *, finite: bool = True,
                          among: np.ndarray | None = None) -> list[float]:
        """:func:`~sweeprig.analysis.figure_table.condition_numbers` of the group's
        distinct mappings (``among``: only those at these indices of ``mappings``), read
        from the run's columns where the group has them."""
        if self.conditions is not None and self.mapping_rows is not None:
            rows = self.mapping_rows if among is None else self.mapping_rows[among]
            got = self.conditions.column(key).numbers(rows, finite=finite)
            if got is not None:
                return got
        mappings = self.mappings if among is None else [self.mappings[j]
                                                        for j in among.tolist()]
        return condition_numbers(mappings, key, finite=finite)

    def holds(self, key: str) -> bool:
        """Whether any of the group's mappings holds ``key``."""
        if self.conditions is not None and self.mapping_rows is not None:
            return bool(self.conditions.column(key).present[self.mapping_rows].any())
        return any(key in c for c in self.mappings)

    def close_to(self, key: str, target: float, among: np.ndarray) -> np.ndarray:
        """Of the mappings at ``among`` (indices of ``mappings``), which hold a number for
        ``key`` within a relative 1e-9 (or 1e-12 absolute) of ``target``: ``math.isclose``
        of each, worked out on the run's columns where the group has them."""
        if self.conditions is None or self.mapping_rows is None:
            return np.array([_close(self.mappings[j].get(key), target)
                             for j in among.tolist()], dtype=bool)
        column = self.conditions.column(key)
        rows = self.mapping_rows[among]
        value = column.value[rows]
        # math.isclose, element by element: equal, or both finite and near
        with np.errstate(invalid="ignore"):
            diff = np.abs(target - value)
            near = ((diff <= abs(_REL_TOL * target)) | (diff <= np.abs(_REL_TOL * value))
                    | (diff <= _ABS_TOL))
        finite = np.isfinite(value) & math.isfinite(target)
        return column.number[rows] & ((value == target) | (finite & near))

    def flag_counts(self) -> dict[str, int]:
        """How many members carry each flag (flags nobody carries left out), counted once
        per distinct flag mask."""
        counts: dict[str, int] = {}
        masks, tally = np.unique(self.masks, return_counts=True)
        for mask, count in zip(masks.tolist(), tally.tolist(), strict=True):
            for flag in flags_from_mask(mask):
                counts[flag] = counts.get(flag, 0) + count
        return counts


def held_groups(figures: Figures, names: Sequence[str], by: Sequence[str] = (), *,
                key: Callable[[Mapping[str, object]], tuple[object, ...]] | None = None,
                as_text: bool = False, conditions: RunConditions | None = None
                ) -> list[HeldGroup]:
    """The figures called any of ``names`` grouped by name and by the values of the
    condition keys ``by`` (``None`` where a figure's conditions lack one; with ``as_text``
    each value as text, ``""`` where missing; groups compare as tuples of those values), or
    by ``key`` of their conditions mapping when given: names in ``names`` order, each
    name's groups in order of their first figure. No figure is made (a block's columns are
    read); the key is worked out once per distinct mapping.

    ``conditions``: the figures' own :class:`~sweeprig.analysis.figure_table.RunConditions`
    (a run's ``figure_conditions``): the groups' keys are then read from its columns (see
    :func:`_key_codes`), and each group can read its conditions there
    (:meth:`HeldGroup.condition_numbers`); the same groups either way."""
    positions, columns, conditions_column = named_columns(figures, names)
    if not positions.size:
        return []
    rows = None
    coded = None
    if conditions is None:
        mappings, which = distinct_mappings(conditions_column)
    else:
        # the run's distinct mappings (by identity, as distinct_mappings finds them here)
        rows, which = conditions.distinct_at(figures, positions)
        mappings = list(map(conditions.mappings.__getitem__, rows.tolist()))
        if key is None:
            coded = _key_codes(conditions, rows, by, as_text)
    if coded is None:
        if key is None:
            key = _group_key(by, as_text)
        keys: dict[tuple[object, ...], int] = {}
        key_of = np.fromiter((keys.setdefault(key(c), len(keys)) for c in mappings),
                             dtype=np.int64, count=len(mappings))
        key_list = list(keys)
    else:
        key_of, key_list = coded
    rank = {name: i for i, name in enumerate(dict.fromkeys(names))}
    name_rank = np.fromiter(map(rank.__getitem__, columns["name"].tolist()), dtype=np.int64,
                            count=positions.size)
    count = len(key_list)
    code = name_rank * count + key_of[which]
    distinct, first, inverse = np.unique(code, return_index=True, return_inverse=True)
    # names in their given order, each name's groups by their first figure
    order = np.lexsort((first, distinct // count))
    members = np.argsort(inverse.ravel(), kind="stable")
    ends = np.concatenate(([0], np.cumsum(np.bincount(inverse.ravel(),
                                                      minlength=distinct.size))))
    units = columns["unit"]
    out: list[HeldGroup] = []
    for g in order.tolist():
        at = members[ends[g]:ends[g + 1]]
        # the group's distinct mappings in order of first appearance, and each member's
        first_of, mapping_of = first_appearances(which[at])
        own = which[at[first_of]]
        out.append(HeldGroup(
            figures=figures,
            name=str(columns["name"][at[0]]),
            key=key_list[int(distinct[g] % count)],
            unit=str(units[at[0]]),
            positions=positions[at],
            values=columns["value"][at],
            bounds=columns["bound"][at],
            uncertainty_db=columns["uncertainty_db"][at],
            masks=columns["flags"][at],
            points=columns["points"][at],
            mappings=tuple(mappings[j] for j in own.tolist()),
            mapping_of=mapping_of,
            conditions=conditions,
            mapping_rows=None if rows is None else rows[own],
        ))
    return out


#: Numbers from this size on are left to the mappings (an int there and the float it
#: rounds to are different keys; as floats, they would be one).
_EXACT_FLOAT = 2.0 ** 53


def _group_key(by: Sequence[str], as_text: bool
               ) -> Callable[[Mapping[str, object]], tuple[object, ...]]:
    """A mapping's group key: its values of ``by`` (None where missing), or with
    ``as_text`` each as text ("" where missing)."""
    by = tuple(by)
    if as_text:
        return lambda c: tuple(str(c.get(k, "")) for k in by)
    return lambda c: tuple(map(c.get, by))


def _key_codes(conditions: RunConditions, rows: np.ndarray, by: Sequence[str], as_text: bool
               ) -> tuple[np.ndarray, list[tuple[object, ...]]] | None:
    """The group key of each of the mappings at ``rows`` of ``conditions`` (their indices
    into its distinct mappings) as :func:`held_groups` works it out from each mapping, read
    from the keys' :class:`~sweeprig.analysis.figure_table.ConditionColumn`: per mapping the
    index of its key, the keys in order of first appearance, each the tuple its first
    mapping gives. None when a key's values are not all numbers or all text where present
    (another value, a NaN, a number too large to be one float): the caller reads the
    mappings one by one."""
    import pandas as pd

    combined = np.zeros(rows.size, dtype=np.int64)
    for name in by:
        column = conditions.column(name)
        present = column.present[rows]
        all_text = bool(column.text[rows][present].all())
        if as_text and not all_text:
            return None
        if all_text:
            values = column.values_at(rows)
            values[~present] = "" if as_text else None
            codes = pd.factorize(values, use_na_sentinel=True)[0]  # (None: -1)
        elif column.number[rows][present].all():
            values = column.value[rows]
            held = values[present]
            # (zeros of both signs are one value to a tuple and to factorize alike)
            if np.isnan(held).any() or (np.abs(held) >= _EXACT_FLOAT).any():
                return None
            codes = np.full(rows.size, -1, dtype=np.int64)
            codes[present] = pd.factorize(held)[0]
        else:
            return None
        combined = pd.factorize(combined * (rows.size + 1) + (codes + 1))[0]
    # (factorize numbers the keys in order of first appearance: each one's first mapping)
    first = np.unique(combined, return_index=True)[1]
    made = _group_key(by, as_text)
    return combined, [made(conditions.mappings[r]) for r in rows[first].tolist()]
