"""A run's figures held as columns where they are many: :class:`FigureBlock`, :class:`Figures`.

Most figures of a large run are read at one point each: an IM3 level, a spur, a supply
current, at every point of a sweep. Held as :class:`~sweeprig.analysis.figures.Figure`
objects, each costs several hundred bytes (the object, its value, its points tuple, its
budget); held as columns, one of a name costs a few dozen. A :class:`FigureBlock` holds the
figures of one name made by one analysis, each from one point: value, bound, flag mask,
conditions (the analysis' shared mappings), point, expanded uncertainty and, once budgets are
attached, its budget as columns (:class:`BlockBudgets`).

:class:`Figures` is a run's figures in reduction order: blocks and plain figures, one after
the other. It is a ``Sequence[Figure]``: indexing or iterating it makes each figure of a
block as the same :class:`Figure` the analysis would have made (equal field by field, its
budget equal too); the report's writers read the blocks' columns instead
(:meth:`Figures.parts`). A figure made twice is two equal objects, not one: a figure is
known by its position (its number in the run's figure table), never by identity.

:func:`packed` turns a list of figures into parts: each run of at least
:data:`BLOCK_MIN_FIGURES` figures of one name and unit, each from one point, without a
budget, becomes a block (a small run's figures stay as they are).
"""

from __future__ import annotations

import functools
import math
import operator
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass, replace

import numpy as np

from sweeprig.analysis.budget_groups import group_budget
from sweeprig.analysis.budget_parts import FigureBudget, SharedBudget
from sweeprig.analysis.figures import (
    BOUND_ABOVE,
    BOUND_BELOW,
    BOUND_CODES,
    BOUND_NONE,
    BOUND_SYMBOLS,
    Figure,
    collector_paused,
    flag_marked_points,
    flags_from_mask,
    mark_bits,
    new_figure,
    read_only_conditions,
)
from sweeprig.analysis.held_parts import HeldParts

#: The fewest figures of one name (from one analysis) held as a block.
BLOCK_MIN_FIGURES = 512



@dataclass(frozen=True, eq=False)
class BlockBudgets:
    """The budgets of a block's figures as columns, a row a figure: ``shared`` its
    :class:`~sweeprig.analysis.budget_parts.SharedBudget` (None: the figure has no budget),
    and per reading of its shared part's ``noisy`` (column k; NaN and 1 past them) ``snr_db``,
    ``scatter_snr_db`` and ``averages``, ``combined_db`` its u_c (dB). A figure's
    :class:`~sweeprig.analysis.budget_parts.FigureBudget` is :meth:`row`."""

    shared: np.ndarray  # object: SharedBudget | None
    snr_db: np.ndarray  # float, (figures, readings)
    scatter_snr_db: np.ndarray  # float, (figures, readings)
    averages: np.ndarray  # int64, (figures, readings)
    combined_db: np.ndarray  # float

    @functools.cached_property
    def present(self) -> np.ndarray:
        """True where the figure has a budget (bool, a row a figure; worked out once: an
        element-wise comparison of the ``shared`` column with None would call each shared
        part's ``__eq__``)."""
        return np.fromiter((b is not None for b in self.shared.tolist()), dtype=bool,
                           count=self.shared.size)

    def row(self, i: int) -> FigureBudget | None:
        """The budget of the block's figure ``i`` (None: it has none)."""
        shared: SharedBudget | None = self.shared[i]
        if shared is None:
            return None
        k = len(shared.noisy)
        snr = tuple(self.snr_db[i, :k].tolist())
        scatter = tuple(self.scatter_snr_db[i, :k].tolist())
        if snr == scatter:  # one tuple where the two are the same, as the groups share
            scatter = snr
        return group_budget(shared, snr, scatter, tuple(self.averages[i, :k].tolist()),
                            float(self.combined_db[i]))


@dataclass(frozen=True, eq=False)
class FigureBlock:
    """Figures of one name and unit, each from one point, as columns (see the module
    docstring): ``value`` (float, in ``unit``), ``bound`` (bound codes), ``flags`` (flag
    masks), ``conditions`` (object: a mapping each, shared as the analysis made them),
    ``point`` (the run-store point of each), ``uncertainty_db`` (expanded, NaN without a
    budget) and ``budgets`` (None: no figure has one yet)."""

    name: str
    unit: str
    value: np.ndarray
    bound: np.ndarray
    flags: np.ndarray
    conditions: np.ndarray
    point: np.ndarray
    uncertainty_db: np.ndarray
    budgets: BlockBudgets | None = None

    def __len__(self) -> int:
        return int(self.value.size)

    def with_columns(self, **columns: object) -> FigureBlock:
        """The block with the columns given replaced."""
        return replace(self, **columns)  # type: ignore[arg-type]

    def figures(self, start: int = 0, stop: int | None = None, *,
                budgets: bool = True) -> list[Figure]:
        """Its figures ``start`` to ``stop`` as :class:`Figure` objects (``budgets=False``:
        each without its budget, for a reader that never looks at it: making the budgets
        is most of the cost)."""
        stop = len(self) if stop is None else stop
        rows = range(start, stop)
        values = self.value[start:stop].tolist()
        bounds = self.bound[start:stop].tolist()
        masks = self.flags[start:stop].tolist()
        conds = self.conditions[start:stop].tolist()
        points = self.point[start:stop].tolist()
        uncertainty = self.uncertainty_db[start:stop].tolist()
        flag_sets = {m: flags_from_mask(m) for m in set(masks)}
        held = self.budgets if budgets else None
        name, unit, symbols = self.name, self.unit, BOUND_SYMBOLS
        out: list[Figure] = []
        append = out.append
        with collector_paused():
            for k, row in enumerate(rows):
                budget = None if held is None else held.row(row)
                append(new_figure(name, values[k], unit, symbols[bounds[k]], conds[k],
                               flag_sets[masks[k]], (points[k],), uncertainty[k], budget))
        return out

    def figure(self, row: int) -> Figure:
        """Its figure ``row`` as a :class:`Figure`."""
        return self.figures(row, row + 1)[0]


Part = FigureBlock | tuple[Figure, ...]


class Figures(HeldParts[Figure]):
    """A run's figures in reduction order, held as parts: blocks and tuples of figures
    (see the module docstring). Read as a ``Sequence[Figure]``; compares equal to any
    sequence of equal figures."""

    __slots__ = ("_loose_names",)
    block_type = FigureBlock
    noun = "figure"

    def loose_named(self, part: tuple[Figure, ...], wanted: frozenset[str]) -> list[int]:
        """The rows of ``part``, one of its loose parts (a tuple of figures), whose figure is
        called any of ``wanted``, in order. Each part's rows by name are worked out once (a
        large run's loose figures, its fitted and side figures, are read by several plots
        and tables: one pass over them, then a lookup; a part is known by its identity,
        which it keeps while this holds it)."""
        try:
            by_part = self._loose_names
        except AttributeError:
            by_part = self._loose_names = {}
        rows = by_part.get(id(part))
        if rows is None:
            if not any(held is part for held in self.parts):
                raise ValueError("not a part of these figures")
            rows = by_part[id(part)] = {}
            for i, f in enumerate(part):
                rows.setdefault(f.name, []).append(i)
        if len(wanted) == 1:
            return list(rows.get(next(iter(wanted)), ()))
        return sorted(i for name in wanted for i in rows.get(name, ()))

    @staticmethod
    def _made(block: FigureBlock, lo: int, hi: int) -> list[Figure]:
        return block.figures(lo, hi)

    def figure_at(self, position: int, *, budgets: bool = True) -> Figure:
        """The figure at ``position`` (``budgets=False``: a block's made without its
        budget, as :meth:`named` makes it; a loose figure is itself either way)."""
        for part, _first, lo, _hi in self.spans(position, position + 1):
            if isinstance(part, FigureBlock):
                return part.figures(lo, lo + 1, budgets=budgets)[0]
            return part[lo]  # type: ignore[no-any-return]
        raise IndexError(f"figure index {position} out of range")

    def named(self, names: Iterable[str], *, budgets: bool = True
              ) -> tuple[list[int], list[Figure]]:
        """The positions and figures of every figure called any of ``names``, in order
        (a block of another name is skipped whole; ``budgets=False``: a block's figures
        made without their budgets, :meth:`FigureBlock.figures`)."""
        wanted = frozenset(names)
        positions: list[int] = []
        figures: list[Figure] = []
        for part, first, _lo, _hi in self.spans(0, len(self)):
            if isinstance(part, FigureBlock):
                if part.name in wanted:
                    positions += range(first, first + len(part))
                    figures += part.figures(budgets=budgets)
            else:
                for i in self.loose_named(part, wanted):
                    positions.append(first + i)
                    figures.append(part[i])
        return positions, figures


def packed(figures: Sequence[Figure], *, least: int | None = None,
           blockable: Callable[[str], bool] | None = None) -> list[Part]:
    """``figures`` as parts (see the module docstring): each run of at least ``least``
    (default :data:`BLOCK_MIN_FIGURES`) figures of one name and unit, each from one point
    and without a budget (and of a name ``blockable`` allows), a block; the rest as
    tuples."""
    least = BLOCK_MIN_FIGURES if least is None else least
    out: list[Part] = []
    loose: list[Figure] = []
    i, count = 0, len(figures)
    while i < count:
        f = figures[i]
        j = i
        if len(f.points) == 1 and f.budget is None and (blockable is None
                                                          or blockable(f.name)):
            name, unit = f.name, f.unit
            j = i + 1
            while (j < count and figures[j].name == name and figures[j].unit == unit
                   and len(figures[j].points) == 1 and figures[j].budget is None):
                j += 1
        if j - i >= least:
            if loose:
                out.append(tuple(loose))
                loose = []
            out.append(block_of(figures[i:j]))
            i = j
        else:
            loose += figures[i:max(j, i + 1)]
            i = max(j, i + 1)
    if loose:
        out.append(tuple(loose))
    return out


def block_of(figures: Sequence[Figure]) -> FigureBlock:
    """The block of ``figures``: one name and unit, each from one point, no budget."""
    from sweeprig.analysis.figure_table import flag_masks

    first = figures[0]
    conditions = conditions_column(figures)
    return FigureBlock(
        first.name, first.unit,
        np.array([f.value for f in figures], dtype=float),
        np.array([BOUND_CODES[f.bound] for f in figures], dtype=np.int8),
        flag_masks(figures),
        conditions,
        np.array([f.points[0] for f in figures], dtype=np.int64),
        np.array([f.uncertainty_db for f in figures], dtype=float),
    )


def flag_marked_parts(parts: Sequence[Part], marks: Sequence[tuple[str, Iterable[int]]]
                      ) -> list[Part]:
    """:func:`~sweeprig.analysis.figures.flag_marked_points` of parts: a block's flag column
    taken with every mark at once."""
    bits = mark_bits(marks)
    if not bits:
        return list(parts)
    marked = np.array(sorted(bits), dtype=np.int64)
    added_at = np.array([bits[p] for p in marked.tolist()], dtype=np.int64)
    out: list[Part] = []
    for part in parts:
        if not isinstance(part, FigureBlock):
            out.append(tuple(flag_marked_points(part, marks)))
            continue
        pos = np.minimum(np.searchsorted(marked, part.point), marked.size - 1)
        added = np.where(marked[pos] == part.point, added_at[pos], 0)
        flags = part.flags | added
        out.append(part if np.array_equal(flags, part.flags)
                   else part.with_columns(flags=flags))
    return out


def conditions_column(figures: Sequence[Figure]) -> np.ndarray:
    """The figures' conditions mappings as an object array (filled by ``numpy.fromiter``:
    assigning a list of mappings to an object array first asks each whether it is a
    sequence, several times slower)."""
    return np.fromiter((f.conditions for f in figures), dtype=object, count=len(figures))


def part_conditions(parts: Sequence[Part]) -> np.ndarray:
    """Every figure's conditions mapping, in order (object array)."""
    pieces = []
    for part in parts:
        if isinstance(part, FigureBlock):
            pieces.append(part.conditions)
        else:
            pieces.append(conditions_column(part))
    return np.concatenate(pieces) if pieces else np.empty(0, dtype=object)


def columns_between(figures: Figures, first: int, stop: int, *,
                    point_numbers: bool = False) -> dict[str, np.ndarray]:
    """:func:`~sweeprig.analysis.figure_table.base_columns` of the figures at positions
    ``first`` to ``stop`` (a block's read from its columns, none of its figures made).
    ``point_numbers``: where every one of them is a block's (one point each), ``points``
    holds their point numbers (int64) instead of a 1-tuple each."""
    from sweeprig.analysis.figure_table import base_columns

    spans = list(figures.spans(first, stop))
    numbers = point_numbers and all(isinstance(part, FigureBlock) for part, *_ in spans)
    pieces = [block_columns(part, lo, hi, point_tuples=not numbers)
              if isinstance(part, FigureBlock) else base_columns(part[lo:hi])
              for part, _begin, lo, hi in spans]
    return joined_columns(pieces)


def named_columns(figures: Figures, names: Iterable[str]
                  ) -> tuple[np.ndarray, dict[str, np.ndarray], np.ndarray]:
    """The positions of the figures called any of ``names``, in order, their
    :func:`~sweeprig.analysis.figure_table.base_columns` and their conditions mappings
    (object array): a block's read from its columns, none of its figures made."""
    from sweeprig.analysis.figure_table import base_columns

    wanted = frozenset(names)
    positions: list[np.ndarray] = []
    pieces: list[dict[str, np.ndarray]] = []
    conditions: list[np.ndarray] = []
    for part, first, _lo, _hi in figures.spans(0, len(figures)):
        if isinstance(part, FigureBlock):
            if part.name in wanted:
                positions.append(np.arange(first, first + len(part), dtype=np.int64))
                pieces.append(block_columns(part, 0, len(part)))
                conditions.append(part.conditions)
            continue
        keep = figures.loose_named(part, wanted)
        if keep:
            some = [part[i] for i in keep]
            positions.append(first + np.array(keep, dtype=np.int64))
            pieces.append(base_columns(some))
            conditions.append(conditions_column(some))
    if not pieces:
        return np.zeros(0, dtype=np.int64), base_columns([]), np.empty(0, dtype=object)
    return (np.concatenate(positions), joined_columns(pieces), np.concatenate(conditions))


def block_columns(block: FigureBlock, lo: int, hi: int, *,
                  point_tuples: bool = True) -> dict[str, np.ndarray]:
    """:func:`~sweeprig.analysis.figure_table.base_columns` of the block's figures ``lo``
    to ``hi``, from its columns (``point_tuples`` False: ``points`` their point numbers,
    int64)."""
    count = hi - lo
    if point_tuples:
        # (one 1-tuple a figure)
        points = np.fromiter(zip(block.point[lo:hi].tolist()), dtype=object, count=count)
    else:
        points = np.asarray(block.point[lo:hi], dtype=np.int64)
    bounds = block.bound[lo:hi]
    bound_text = np.where(bounds == BOUND_BELOW, "<",
                          np.where(bounds == BOUND_ABOVE, ">", "")).astype(object)
    return {
        "name": np.full(count, block.name, dtype=object),
        "value": block.value[lo:hi],
        "unit": np.full(count, block.unit, dtype=object),
        "bound": bound_text,
        "uncertainty_db": block.uncertainty_db[lo:hi],
        "flags": block.flags[lo:hi],
        "points": points,
    }


def joined_columns(pieces: Sequence[dict[str, np.ndarray]]) -> dict[str, np.ndarray]:
    """Base columns of consecutive pieces as one set of columns."""
    from sweeprig.analysis.figure_table import base_columns

    if not pieces:
        return base_columns([])
    if len(pieces) == 1:
        return pieces[0]
    return {key: np.concatenate([p[key] for p in pieces]) for key in pieces[0]}


def block_maker(blockable: Callable[[str], bool] | None = None
                ) -> Callable[..., list[Figure | FigureBlock]]:
    """A stand-in for :func:`~sweeprig.analysis.figures.make_figures` (its arguments) that
    gives figures of one point each as one :class:`FigureBlock` (a list of it) when they
    are at least :data:`BLOCK_MIN_FIGURES` and of a name ``blockable`` allows, else the
    figures as ``make_figures`` gives them: what an analysis is given by the reduction, so
    that a large run's figures are never made one by one."""
    from sweeprig.analysis.figures import make_figures

    def make(name: str, unit: str, value: Sequence[float] | np.ndarray,
             bound: Sequence[int] | np.ndarray | int = BOUND_NONE,
             flag_mask: Sequence[int] | np.ndarray | int = 0,
             conditions: Sequence[Mapping[str, float | int | str]] | None = None,
             points: Sequence[tuple[int, ...]] | None = None,
             ) -> list[Figure | FigureBlock]:
        values = np.asarray(value, dtype=float).ravel()
        count = values.size
        if (count < BLOCK_MIN_FIGURES or conditions is None or points is None
                or (blockable is not None and not blockable(name))
                or set(map(len, points)) != {1}):
            return list(make_figures(name, unit, value, bound, flag_mask, conditions, points))
        if len(conditions) != count:
            raise ValueError(f"{name}: {count} values but {len(conditions)} conditions")
        mappings = np.fromiter(read_only_conditions(conditions), dtype=object, count=count)
        return [FigureBlock(
            name, unit, values.copy(),
            np.broadcast_to(np.asarray(bound, dtype=np.int8), (count,)).copy(),
            np.broadcast_to(np.asarray(flag_mask, dtype=np.int64), (count,)).copy(),
            mappings,
            np.fromiter(map(operator.itemgetter(0), points), dtype=np.int64, count=count),
            np.full(count, math.nan),
        )]

    return make


def parts_of(entries: Sequence[Figure | FigureBlock], *,
             blockable: Callable[[str], bool] | None = None) -> list[Part]:
    """An analysis' figures as :func:`block_maker` gives them, as parts: its blocks, and
    its figures between them :func:`packed`."""
    out: list[Part] = []
    loose: list[Figure] = []
    for entry in entries:
        if isinstance(entry, FigureBlock):
            if loose:
                out += packed(loose, blockable=blockable)
                loose = []
            out.append(entry)
        else:
            loose.append(entry)
    if loose:
        out += packed(loose, blockable=blockable)
    return out
