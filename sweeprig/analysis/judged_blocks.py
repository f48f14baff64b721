"""A run's judgements held as columns where they are many: :class:`JudgedBlock`,
:class:`Judgements`.

A limit on a figure made at every point (a spur level, a supply current) judges one figure
per point: as :class:`~sweeprig.analysis.limits.Judgement` objects, a large run's would be
hundreds of thousands, each holding a figure made from its block only to be judged. A
:class:`JudgedBlock` holds one limit's judgements of the figures of one
:class:`~sweeprig.analysis.figure_block.FigureBlock` as columns, judged with numpy by the
rules of :func:`~sweeprig.analysis.limits.judge` (the same verdicts, pinned by tests).

:class:`Judgements` is an assessment's judgements in order (limit by limit, each limit's
figures in the run's order): judged blocks and tuples of judgements. It is a
``Sequence[Judgement]``: a judgement of a block read from it is made then, its figure made
from the block. A judgement knows its figure by ``position``, the figure's number in the
figures judged (a run's figure table), so the report joins judgements to figures by number
(:meth:`Judgements.table`, :meth:`Judgements.of_positions`), never by object identity.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass

import numpy as np

from sweeprig.analysis.figure_block import FigureBlock, Figures
from sweeprig.analysis.figures import (
    BOUND_ABOVE,
    BOUND_BELOW,
    BOUND_NONE,
    FLAGS,
    Figure,
    bound_symbol,
    collector_paused,
    flag_bit,
    flags_from_mask,
)
from sweeprig.analysis.held_parts import HeldParts
from sweeprig.analysis.limits import (
    FAIL,
    INCONCLUSIVE,
    PASS,
    Judgement,
    Limit,
    Verdict,
    _edge_text,
    _judge,
    _matches,
    judgement_reason,
)

#: Verdict codes, ordered so that the worse verdict has the larger code.
VERDICT_CODES: dict[str, int] = {PASS: 0, INCONCLUSIVE: 1, FAIL: 2}
#: The verdict of each code.
VERDICT_NAMES: tuple[Verdict, ...] = (PASS, INCONCLUSIVE, FAIL)
_PASS, _INCONCLUSIVE, _FAIL = 0, 1, 2


@dataclass(frozen=True, eq=False)
class JudgedBlock:
    """One limit's judgements of figures of one block (see the module docstring): the
    block's ``rows`` judged (int64, ascending), the position of its row 0 among the figures
    judged (``first``), and per judgement its verdict code (:data:`VERDICT_CODES`), the mask
    of the suspect flags that made it inconclusive (0: none) and whether the figure's value
    ± U holds a limit edge."""

    limit: Limit
    block: FigureBlock
    first: int
    rows: np.ndarray
    verdict: np.ndarray
    suspect: np.ndarray
    straddles: np.ndarray

    def __len__(self) -> int:
        return int(self.rows.size)

    @property
    def positions(self) -> np.ndarray:
        """The judged figures' positions among the figures judged (int64)."""
        return self.first + self.rows

    def judgements(self, lo: int = 0, hi: int | None = None) -> list[Judgement]:
        """Its judgements ``lo`` to ``hi`` as :class:`Judgement` objects (each figure made
        from the block)."""
        hi = len(self) if hi is None else hi
        if hi <= lo:
            return []
        rows = self.rows[lo:hi]
        start, stop = int(rows[0]), int(rows[-1]) + 1
        made = self.block.figures(start, stop)
        verdicts = self.verdict[lo:hi].tolist()
        suspects = self.suspect[lo:hi].tolist()
        limit, first = self.limit, self.first
        return [Judgement(made[row - start], limit, VERDICT_NAMES[code],
                          _suspect_names(mask), first + row)
                for row, code, mask in zip(rows.tolist(), verdicts, suspects, strict=True)]

    def reasons(self) -> list[str]:
        """:attr:`Judgement.reason` of each judgement, from the block's columns
        (:meth:`reasons_at`)."""
        return self.reasons_at(np.arange(len(self)))

    def reasons_at(self, at: np.ndarray, wordings: tuple[np.ndarray, np.ndarray, list[
            str | tuple[str, ...]]] | None = None) -> list[str]:
        """The reasons of the judgements ``at`` (their numbers among the block's
        judgements, int64): a plain number spelled out here from its value and its
        wording (:meth:`plain_wordings`, or ``wordings`` when the caller has them), the
        others by :func:`~sweeprig.analysis.limits.judgement_reason`."""
        plain, wording, texts = self.plain_wordings() if wordings is None else wordings
        block, limit = self.block, self.limit
        rows = self.rows[at]
        unit = block.unit
        out = []
        for i, v, b, u, code, mask, w in zip(
                at.tolist(), block.value[rows].tolist(), block.bound[rows].tolist(),
                block.uncertainty_db[rows].tolist(), self.verdict[at].tolist(),
                self.suspect[at].tolist(), wording[at].tolist(), strict=True):
            if not plain[i]:
                out.append(judgement_reason(v, bound_symbol(b), unit, u, limit,
                                            VERDICT_NAMES[code], _suspect_names(mask)))
            elif isinstance(texts[w], str):
                out.append(texts[w])
            else:
                value = f"{v:.3f} {unit}"
                out.append("; ".join(value + words for words in texts[w]))
        return out

    def plain_wordings(self) -> tuple[np.ndarray, np.ndarray, list[str | tuple[str, ...]]]:
        """Which judgements are a plain number (finite, no bound, no suspect flag, no edge
        within ± U) and how each one's reason is worded: ``(plain, wording, wordings)``,
        ``wording`` an index into ``wordings`` (int64; meaningful where ``plain``). A
        wording is a whole reason (a text: a limit without edges), or the words after the
        value for each edge named (a tuple): the reason is then ``"; ".join(f"{value:.3f}
        {unit}" + words for words in wording)``, as
        :func:`~sweeprig.analysis.limits.judgement_reason` writes it: the edges that the
        verdict is about (all met for a pass; the missed ones for a fail)."""
        block, limit = self.block, self.limit
        rows = self.rows
        value, bound = block.value[rows], block.bound[rows]
        plain = (np.isfinite(value) & (bound == BOUND_NONE) & (self.suspect == 0)
                 & ~self.straddles)
        edges = [(edge, lower) for edge, lower in ((limit.min, True), (limit.max, False))
                 if edge is not None]
        wording = np.zeros(len(self), dtype=np.int64)
        if not edges:
            return plain, wording, ["no bounds"]
        # (a plain number is never between: its verdict is a pass or a fail)
        passed = self.verdict == _PASS
        wording += passed * (1 << len(edges))
        with np.errstate(invalid="ignore"):
            for k, (edge, lower) in enumerate(edges):
                met = value >= edge if lower else value <= edge
                wording += (met == passed) * (1 << k)
        wordings: list[str | tuple[str, ...]] = []
        for code in range(1 << (len(edges) + 1)):
            outcome = PASS if code >> len(edges) else FAIL
            wordings.append(tuple(_edge_text("", None, edge, lower, outcome)
                                  for k, (edge, lower) in enumerate(edges) if code >> k & 1))
        return plain, wording, wordings

    def margins(self) -> np.ndarray:
        """How far each judged figure is inside the limit (negative outside), in its unit:
        the nearer edge; +inf for a figure without a value, or a limit without edges."""
        return _margins(self.block.value[self.rows], self.limit)


def _margins(values: np.ndarray, limit: Limit) -> np.ndarray:
    out = np.full(values.size, math.inf)
    if limit.min is not None:
        out = np.minimum(out, values - limit.min)
    if limit.max is not None:
        out = np.minimum(out, limit.max - values)
    return np.where(np.isfinite(values), out, math.inf)


def _suspect_names(mask: int) -> tuple[str, ...]:
    """The suspect flags of a mask, sorted by name (as :func:`judge` lists them)."""
    return _SUSPECT_NAMES.get(mask) or _SUSPECT_NAMES.setdefault(
        mask, tuple(sorted(flags_from_mask(mask))))


_SUSPECT_NAMES: dict[int, tuple[str, ...]] = {}


def judge_block(block: FigureBlock, first: int, limit: Limit, suspect_mask: int,
                guard_band: bool = False) -> JudgedBlock | None:
    """``limit``'s judgements of the figures of ``block`` it applies to (None: none), by
    the rules of :func:`~sweeprig.analysis.limits.judge`; ``suspect_mask``: the flag mask of
    the suspect flags, ``first``: the position of the block's row 0."""
    if block.name != limit.name:
        return None
    if limit.conditions:
        applies: dict[int, bool] = {}
        keep = np.empty(len(block), dtype=bool)
        for i, c in enumerate(block.conditions.tolist()):
            hit = applies.get(id(c))
            if hit is None:
                hit = applies[id(c)] = all(_matches(c.get(k), v)
                                           for k, v in limit.conditions.items())
            keep[i] = hit
        rows = np.flatnonzero(keep).astype(np.int64)
    else:
        rows = np.arange(len(block), dtype=np.int64)
    if not rows.size:
        return None
    value, bound = block.value[rows], block.bound[rows]
    u = block.uncertainty_db[rows]
    suspect = block.flags[rows] & np.int64(suspect_mask)
    finite = np.isfinite(value)
    number = finite & (bound == BOUND_NONE) & np.isfinite(u)
    straddles = np.zeros(rows.size, dtype=bool)
    verdict = np.full(rows.size, _PASS, dtype=np.int8)
    with np.errstate(invalid="ignore"):
        for edge, lower in ((limit.min, True), (limit.max, False)):
            if edge is None:
                continue
            straddles |= number & (value - u < edge) & (edge < value + u)
            verdict = np.maximum(verdict, _edge_codes(value, bound, edge, lower))
    if guard_band:
        verdict[straddles] = _INCONCLUSIVE
    verdict[~finite | (suspect != 0)] = _INCONCLUSIVE
    return JudgedBlock(limit, block, first, rows, verdict, suspect, straddles)


def _edge_codes(value: np.ndarray, bound: np.ndarray, edge: float, lower: bool) -> np.ndarray:
    """:func:`~sweeprig.analysis.limits._edge_outcome` of every figure, as verdict codes."""
    plain = np.where(value >= edge if lower else value <= edge, _PASS, _FAIL)
    below = np.where(value <= edge, _FAIL if lower else _PASS, _INCONCLUSIVE)  # "< X"
    above = np.where(value >= edge, _PASS if lower else _FAIL, _INCONCLUSIVE)  # "> X"
    return np.select([bound == BOUND_BELOW, bound == BOUND_ABOVE], [below, above],
                     plain).astype(np.int8)


def judged_parts(figures: Sequence[Figure], limits: Iterable[Limit],
                 suspect: frozenset[str], guard_band: bool = False
                 ) -> tuple[Judgements, tuple[Limit, ...]]:
    """Every figure of ``figures`` judged against every limit that applies to it (a
    :class:`Figures`' blocks from their columns), in :func:`~sweeprig.analysis.limits.assess`
    order, and the limits no figure matched."""
    run = figures if isinstance(figures, Figures) else Figures([tuple(figures)])
    suspect_mask = sum(flag_bit(name) for name in suspect if name in FLAGS)
    spans = list(run.spans(0, len(run)))
    loose: dict[int, dict[str, np.ndarray]] = {}  # per span, its figures' rows by name
    parts: list[JudgedBlock | tuple[Judgement, ...]] = []
    untested: list[Limit] = []
    with collector_paused():
        for limit in limits:
            found = False
            for k, (part, first, _lo, _hi) in enumerate(spans):
                if isinstance(part, FigureBlock):
                    judged = judge_block(part, first, limit, suspect_mask, guard_band)
                    if judged is not None:
                        parts.append(judged)
                        found = True
                    continue
                named = loose.get(k)
                if named is None:
                    named = loose[k] = rows_by_name(part)
                rows = named.get(limit.name)
                if rows is None:
                    continue
                made = tuple(_judge(f, limit, suspect, guard_band, first + i)
                             for i, f in ((i, part[i]) for i in rows.tolist())
                             if not limit.conditions or limit.applies_to(f))
                if made:
                    parts.append(made)
                    found = True
            if not found:
                untested.append(limit)
    return Judgements(parts), tuple(untested)


def rows_by_name(figures: Sequence[Figure]) -> dict[str, np.ndarray]:
    """The rows of ``figures`` (ascending) per figure name."""
    import pandas as pd

    codes, names = pd.factorize(np.fromiter((f.name for f in figures), dtype=object,
                                            count=len(figures)))
    order = np.argsort(codes, kind="stable")
    bounds = np.searchsorted(codes[order], np.arange(len(names) + 1))
    return {name: order[bounds[j]:bounds[j + 1]] for j, name in enumerate(names.tolist())}


def verdict_counts(codes: np.ndarray) -> dict[str, int]:
    """How many of the verdict ``codes`` are pass, fail and inconclusive (in that order,
    as ``figures.json`` gives them)."""
    tally = np.bincount(codes, minlength=3)
    return {name: int(tally[VERDICT_CODES[name]]) for name in (PASS, FAIL, INCONCLUSIVE)}


@dataclass(frozen=True)
class JudgementTable:
    """Every judgement as a row, in order: the judged figure's ``position``, its verdict
    code (:data:`VERDICT_CODES`), its limit (an index into ``limits``, each distinct limit
    once), its ``margin`` (:meth:`JudgedBlock.margins`) and whether it ``straddles``."""

    position: np.ndarray
    verdict: np.ndarray
    limit: np.ndarray
    margin: np.ndarray
    straddles: np.ndarray
    limits: tuple[Limit, ...]


@dataclass(frozen=True)
class JudgedGroup:
    """The judgements of a group of figures (:meth:`Judgements.of_positions`), in the
    order of their figures, then of their limits: their figures' ``positions``, verdict
    codes, limits, margins and straddles (see :class:`JudgementTable`)."""

    positions: np.ndarray
    verdicts: np.ndarray
    limit_index: np.ndarray
    margins: np.ndarray
    straddles: np.ndarray
    all_limits: tuple[Limit, ...]

    def __len__(self) -> int:
        return int(self.positions.size)

    @property
    def verdict(self) -> Verdict | None:
        """The worst verdict (None: nothing was judged)."""
        return VERDICT_NAMES[int(self.verdicts.max())] if self.verdicts.size else None

    @property
    def counts(self) -> dict[str, int]:
        """Number of judgements per verdict."""
        return verdict_counts(self.verdicts)

    @property
    def straddled(self) -> int:
        """How many judgements had a limit edge inside the figure's value ± U."""
        return int(np.count_nonzero(self.straddles))

    @property
    def limits(self) -> list[Limit]:
        """The distinct limits that judged the group, in order of first appearance."""
        seen = dict.fromkeys(self.limit_index.tolist())
        return [self.all_limits[i] for i in seen]

    def shown_position(self) -> int | None:
        """The position of the figure a group shows: among the judgements of the group's
        verdict, the first nearest its limit (smallest margin: the most failing); None when
        nothing was judged."""
        if not self.verdicts.size:
            return None
        pool = np.flatnonzero(self.verdicts == self.verdicts.max())
        return int(self.positions[pool[np.argmin(self.margins[pool])]])




class Judgements(HeldParts[Judgement]):
    """An assessment's judgements in order, held as parts: judged blocks and tuples of
    judgements (see the module docstring). Read as a ``Sequence[Judgement]``; compares
    equal to any sequence of equal judgements."""

    __slots__ = ("_by_position", "_table")
    block_type = JudgedBlock
    noun = "judgement"

    def __init__(self, parts: Iterable[JudgedBlock | Sequence[Judgement]] = ()) -> None:
        super().__init__(parts)
        self._table: JudgementTable | None = None
        self._by_position: tuple[np.ndarray, np.ndarray] | None = None

    @staticmethod
    def _made(block: JudgedBlock, lo: int, hi: int) -> list[Judgement]:
        return block.judgements(lo, hi)

    def table(self) -> JudgementTable:
        """Every judgement as a row of columns (made once)."""
        if self._table is None:
            self._table = self._make_table()
        return self._table

    def _make_table(self) -> JudgementTable:
        limits: dict[int, int] = {}
        held: list[Limit] = []
        pieces: list[tuple[np.ndarray, ...]] = []
        for part in self._parts:
            if isinstance(part, JudgedBlock):
                index = limits.setdefault(id(part.limit), len(held))
                if index == len(held):
                    held.append(part.limit)
                pieces.append((part.positions, part.verdict.astype(np.int8),
                               np.full(len(part), index, dtype=np.int64), part.margins(),
                               part.straddles))
                continue
            # a loose part holds one limit's judgements (judged_parts), but any tuple of
            # judgements is taken: its margins are worked out per run of one limit
            indices = np.empty(len(part), dtype=np.int64)
            margins = np.empty(len(part), dtype=float)
            values = np.fromiter((j.figure.value for j in part), dtype=float, count=len(part))
            start = 0
            while start < len(part):
                limit = part[start].limit
                stop = start + 1
                while stop < len(part) and part[stop].limit is limit:
                    stop += 1
                index = limits.setdefault(id(limit), len(held))
                if index == len(held):
                    held.append(limit)
                indices[start:stop] = index
                margins[start:stop] = _margins(values[start:stop], limit)
                start = stop
            pieces.append((np.fromiter((j.position for j in part), dtype=np.int64,
                                       count=len(part)),
                           np.fromiter((VERDICT_CODES[j.verdict] for j in part), dtype=np.int8,
                                       count=len(part)),
                           indices, margins,
                           np.fromiter((j.straddles for j in part), dtype=bool,
                                       count=len(part))))
        if not pieces:
            empty = np.empty(0, dtype=np.int64)
            return JudgementTable(empty, empty.astype(np.int8), empty, empty.astype(float),
                                  empty.astype(bool), ())
        columns = [np.concatenate([p[k] for p in pieces]) for k in range(5)]
        return JudgementTable(*columns, tuple(held))

    @property
    def counts(self) -> dict[str, int]:
        """Number of judgements per verdict."""
        return verdict_counts(self.table().verdict)

    @property
    def straddled(self) -> int:
        """How many judgements had a limit edge inside the figure's value ± U."""
        return int(np.count_nonzero(self.table().straddles))

    def worst_by_position(self) -> tuple[np.ndarray, np.ndarray]:
        """Each judged figure's position (ascending, once) and its worst verdict code over
        the limits that judged it."""
        table = self.table()
        order = np.lexsort((-table.verdict, table.position))
        positions, verdicts = table.position[order], table.verdict[order]
        first = np.ones(positions.size, dtype=bool)
        first[1:] = positions[1:] != positions[:-1]
        return positions[first], verdicts[first]

    def of_positions(self, positions: np.ndarray) -> JudgedGroup:
        """The judgements of the figures at ``positions`` (ascending), in their figures'
        order, then in judgement order."""
        table = self.table()
        if self._by_position is None:  # (sorted once: a report asks for many groups)
            order = np.argsort(table.position, kind="stable")
            self._by_position = order, table.position[order]
        order, held = self._by_position
        lo = np.searchsorted(held, positions, side="left")
        hi = np.searchsorted(held, positions, side="right")
        counts = hi - lo
        total = int(counts.sum())
        if total:
            starts = np.repeat(lo - np.cumsum(counts) + counts, counts)
            rows = order[starts + np.arange(total)]
        else:
            rows = np.empty(0, dtype=np.int64)
        return JudgedGroup(table.position[rows], table.verdict[rows], table.limit[rows],
                           table.margin[rows], table.straddles[rows], table.limits)
