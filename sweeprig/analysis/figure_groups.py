"""A run's figures of some names grouped by name and by conditions, held as columns:
:class:`HeldGroup`, :func:`held_groups`.

The report's summary shows one line per figure name and group of conditions (study,
temperature, supply): the worst figure, the range, the flags counted, the conditions that
vary inside. A large run has hundreds of thousands of such figures, most of them in blocks
(:mod:`sweeprig.analysis.figure_block`); making each as a :class:`Figure` only to read its
value, flags and conditions cost the report most of a second and about 50 MB at 100k points.
A group here holds its members' positions, values, flag masks and conditions mappings as
arrays, read from the blocks' columns; the one figure a line shows is made by
:meth:`HeldGroup.figure`.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from sweeprig.analysis.figure_block import Figures, named_columns
from sweeprig.analysis.figure_table import distinct_mappings, first_appearances
from sweeprig.analysis.figures import Figure, flags_from_mask


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

    def __len__(self) -> int:
        return int(self.positions.size)

    def figure(self, k: int) -> Figure:
        """Member ``k`` as a :class:`Figure`: a block's made without its budget (what the
        summary and the datasheet read never includes one), a loose figure as it is."""
        return self.figures.figure_at(int(self.positions[k]), budgets=False)

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
                key: Callable[[Mapping[str, object]], tuple[object, ...]] | None = None
                ) -> list[HeldGroup]:
    """The figures called any of ``names`` grouped by name and by the values of the
    condition keys ``by`` (``None`` where a figure's conditions lack one; groups compare as
    tuples of those values), or by ``key`` of their conditions mapping when given: names
    in ``names`` order, each name's groups in order of their first figure. No figure is
    made (a block's columns are read); the key is worked out once per distinct mapping."""
    positions, columns, conditions = named_columns(figures, names)
    if not positions.size:
        return []
    mappings, which = distinct_mappings(conditions)
    keys: dict[tuple[object, ...], int] = {}
    key_of = np.fromiter(
        (keys.setdefault(tuple(map(c.get, by)) if key is None else key(c), len(keys))
         for c in mappings),
        dtype=np.int64, count=len(mappings))
    rank = {name: i for i, name in enumerate(dict.fromkeys(names))}
    name_rank = np.fromiter(map(rank.__getitem__, columns["name"].tolist()), dtype=np.int64,
                            count=positions.size)
    code = name_rank * len(keys) + key_of[which]
    distinct, first, inverse = np.unique(code, return_index=True, return_inverse=True)
    # names in their given order, each name's groups by their first figure
    order = np.lexsort((first, distinct // len(keys)))
    members = np.argsort(inverse.ravel(), kind="stable")
    ends = np.concatenate(([0], np.cumsum(np.bincount(inverse.ravel(),
                                                      minlength=distinct.size))))
    key_list = list(keys)
    units = columns["unit"]
    out: list[HeldGroup] = []
    for g in order.tolist():
        at = members[ends[g]:ends[g + 1]]
        # the group's distinct mappings in order of first appearance, and each member's
        first_of, mapping_of = first_appearances(which[at])
        out.append(HeldGroup(
            figures=figures,
            name=str(columns["name"][at[0]]),
            key=key_list[int(distinct[g] % len(keys))],
            unit=str(units[at[0]]),
            positions=positions[at],
            values=columns["value"][at],
            bounds=columns["bound"][at],
            uncertainty_db=columns["uncertainty_db"][at],
            masks=columns["flags"][at],
            points=columns["points"][at],
            mappings=tuple(mappings[j] for j in which[at[first_of]].tolist()),
            mapping_of=mapping_of,
        ))
    return out
