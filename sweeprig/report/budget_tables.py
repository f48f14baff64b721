"""A run's uncertainty budgets as tables: the shared parts once, each figure's own part as
columns of the figure table.

A figure's budget is a shared part (:class:`~sweeprig.analysis.budget_parts.SharedBudget`:
the lines that do not depend on the figure's own readings, one per kind of figure) and its
own inputs (:class:`~sweeprig.analysis.budget_parts.FigureBudget`: the SNR and sweeps of
each reading whose noise matters, a fitted figure's own lines, u_c). So beside
``figures.json``:

* ``budget-terms.csv`` (:func:`budget_terms_frame`): every distinct line of a shared part or
  of a fitted figure's own lines, written whole once;
* ``budgets.csv`` (:func:`budgets_frame`): every distinct shared part once: its lines'
  numbers, k, the readings whose noise matters with the sensitivities of their noise and
  noise-scatter lines, and the root sum of squares of its lines alone;
* ``figures.csv``: per figure the columns :func:`budget_columns` gives
  (:data:`BUDGET_FIGURE_COLUMNS`: its shared part's number, u_c, the SNRs and sweeps, its
  own lines' numbers).

The three tables grow with the number of kinds of figure, not of figures, except the
figure table's columns. :func:`figure_budget_entries` reads them back, each figure's
lines put together by :func:`~sweeprig.analysis.budget_parts.budget_lines`, the one
function that does it.
"""

from __future__ import annotations

import csv
import math
from collections.abc import Iterable, Iterator, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from sweeprig.analysis.budget_parts import FigureBudget, SharedBudget, budget_lines
from sweeprig.analysis.figure_block import FigureBlock, Figures
from sweeprig.analysis.figure_table import object_ids
from sweeprig.analysis.figures import Figure, collector_paused
from sweeprig.analysis.reduce import RunFigures
from sweeprig.analysis.uncertainty import DIVISORS, MODELS, Contribution

#: The distinct-shared-part table beside ``figures.json``.
BUDGETS_FILE = "budgets.csv"
#: The table of distinct budget lines beside ``figures.json``.
BUDGET_TERMS_FILE = "budget-terms.csv"
#: Its columns: the line's number, then :meth:`Contribution.as_dict`'s keys.
BUDGET_TERM_COLUMNS: tuple[str, ...] = (
    "term", "name", "what", "half_width_db", "distribution", "divisor",
    "standard_uncertainty_db", "sensitivity", "contribution_db", "type", "origin")
#: The columns of the shared-part table.
BUDGET_COLUMNS: tuple[str, ...] = ("budget", "coverage_factor", "contributions",
                                   "shared_uncertainty_db", "noise_readings",
                                   "noise_sensitivities", "scatter_sensitivities")

#: The most readings whose noise matters to one figure (a difference of two products: 2).
NOISE_SLOTS = max(1, *(1 + len(m.noise_also) for m in MODELS.values()))


def _slot_names(k: int) -> tuple[str, str, str]:
    suffix = "" if k == 0 else f"_{k + 1}"
    return (f"noise_snr_db{suffix}", f"scatter_snr_db{suffix}", f"averages{suffix}")


#: The figure table's budget columns (:func:`budget_columns`), in order: ``budget`` (a row
#: of ``budgets.csv``), ``combined_uncertainty_db`` (u_c), per reading whose noise matters
#: (a second one with the suffix ``_2``) ``noise_snr_db`` (its lowest SNR: a noise line when
#: not empty), ``scatter_snr_db`` and ``averages`` (the reading that scatters most: a
#: noise-scatter line when its scatter is above zero), then ``own_terms`` (a fitted
#: figure's own lines, rows of ``budget-terms.csv``).
BUDGET_FIGURE_COLUMNS: tuple[str, ...] = (
    "budget", "combined_uncertainty_db",
    *(name for k in range(NOISE_SLOTS) for name in _slot_names(k)), "own_terms")
#: Those of them holding whole numbers or nothing (pandas' nullable integers).
BUDGET_INTEGER_COLUMNS: tuple[str, ...] = (
    "budget", *(_slot_names(k)[2] for k in range(NOISE_SLOTS)))


@dataclass(frozen=True)
class FigureBudgets:
    """A run's budgets as tables: ``terms`` every distinct line of a shared part or a
    fitted figure's own lines (the shared parts' lines first, in order of first use, then
    the fitted figures' own lines in figure order); ``shared`` every distinct shared part
    in order of first use, with ``shared_terms`` its lines' numbers in ``terms``. The
    figure table's budget columns are made a slice of figures at a time from ``figures``
    (the run's, in order: :func:`budget_columns`), with ``shared_numbers`` (a shared part
    object's ``id`` → its number) and ``own_terms`` (a fitted figure's position → its own
    lines' numbers, space-separated): a large run's columns are never held whole."""

    terms: tuple[Contribution, ...]
    shared: tuple[SharedBudget, ...]
    shared_terms: tuple[tuple[int, ...], ...]
    figures: Figures
    shared_numbers: Mapping[int, int]
    own_terms: Mapping[int, str]


def figure_budgets(run: RunFigures) -> FigureBudgets:
    """The tables of the budgets of ``run``'s figures (see :class:`FigureBudgets`). Two
    shared parts are one when they have the same lines, noisy readings and k."""
    term_numbers: dict[Contribution, int] = {}
    shared_numbers: dict[SharedBudget, int] = {}
    by_id: dict[int, int] = {}
    shared: list[SharedBudget] = []
    shared_terms: list[tuple[int, ...]] = []

    def numbers(lines: Iterable[Contribution]) -> tuple[int, ...]:
        return tuple(term_numbers.setdefault(line, len(term_numbers)) for line in lines)

    owners: list[tuple[int, FigureBudget]] = []  # the fitted figures with their own lines

    def met(part: SharedBudget) -> None:
        if id(part) not in by_id:
            number = shared_numbers.get(part)
            if number is None:
                number = shared_numbers[part] = len(shared)
                shared.append(part)
                shared_terms.append(numbers(part.lines))
            by_id[id(part)] = number

    with collector_paused():
        for i, part_or_figure in _budget_holders(run.figures):
            if isinstance(part_or_figure, FigureBlock):
                # a block's shared parts, in order of first use (none of its figures made)
                for part in _first_used(part_or_figure):
                    met(part)
                continue
            budget = part_or_figure.budget
            if budget is None:
                continue
            met(budget.shared)
            if budget.own_lines:
                owners.append((i, budget))
        own = {i: " ".join(map(str, numbers(b.own_lines))) for i, b in owners}
    return FigureBudgets(tuple(term_numbers), tuple(shared), tuple(shared_terms),
                         run.figures, by_id, own)


def _budget_holders(figures: Figures) -> Iterator[tuple[int, Figure | FigureBlock]]:
    """(position, figure) per loose figure and (position of its first, block) per block,
    in order."""
    for part, first, _lo, _hi in figures.spans(0, len(figures)):
        if isinstance(part, FigureBlock):
            yield first, part
        else:
            yield from enumerate(part, first)


def _first_used(block: FigureBlock) -> list[SharedBudget]:
    """The distinct shared parts of a block's budgets, in order of first use."""
    if block.budgets is None:
        return []
    column = block.budgets.shared
    held = np.flatnonzero(block.budgets.present)
    if held.size == 0:
        return []
    ids = object_ids(column[held])
    _, first = np.unique(ids, return_index=True)
    return [column[held[i]] for i in sorted(first.tolist())]


def budget_columns(budgets: FigureBudgets, first: int = 0, stop: int | None = None
                   ) -> dict[str, np.ndarray]:
    """The figure table's budget columns (:data:`BUDGET_FIGURE_COLUMNS`, name → array) of
    figures ``first`` to ``stop`` (the whole run by default): its shared part's number, u_c,
    per reading whose noise matters its SNR, scatter SNR and sweeps, and its own lines'
    numbers (empty or NaN without a budget). A block's are read from its budget columns,
    none of its figures made."""
    figures = budgets.figures
    stop = len(figures) if stop is None else min(stop, len(figures))
    count = stop - first
    columns: dict[str, Any] = {
        name: (np.full(count, "", dtype=object) if name == "own_terms"
               else np.full(count, math.nan)) for name in BUDGET_FIGURE_COLUMNS
        if name not in BUDGET_INTEGER_COLUMNS}
    # the whole numbers as values and a mask of the empty cells (pandas' nullable integers)
    whole = {name: (np.zeros(count, dtype=np.int64), np.ones(count, dtype=bool))
             for name in BUDGET_INTEGER_COLUMNS}
    for part, begin, lo, hi in figures.spans(first, stop):
        rows = slice(begin + lo - first, begin + hi - first)
        if isinstance(part, FigureBlock):
            _block_budget_columns(columns, whole, rows, part, lo, hi, budgets.shared_numbers)
        else:
            _figure_budget_columns(columns, whole, rows, part[lo:hi], begin + lo, budgets)
    for name, (values, empty) in whole.items():
        columns[name] = pd.arrays.IntegerArray(values, empty)
    return {name: columns[name] for name in BUDGET_FIGURE_COLUMNS}


#: A whole-number column being filled: its values and where it is empty.
_Whole = tuple[np.ndarray, np.ndarray]


def _block_budget_columns(columns: dict[str, np.ndarray], whole: dict[str, _Whole],
                          rows: slice, block: FigureBlock, lo: int, hi: int,
                          number: Mapping[int, int]) -> None:
    """Fill ``rows`` of the budget ``columns`` (and the ``whole``-number ones) from
    ``block``'s rows ``lo`` to ``hi``."""
    held = block.budgets
    if held is None:
        return
    shared = held.shared[lo:hi]
    has = held.present[lo:hi]
    values, empty = (a[rows] for a in whole["budget"])
    values[has] = np.fromiter((number[id(b)] for b in shared[has].tolist()), dtype=np.int64,
                              count=int(has.sum()))
    empty[has] = False
    columns["combined_uncertainty_db"][rows] = held.combined_db[lo:hi]
    for k in range(min(held.snr_db.shape[1], NOISE_SLOTS)):
        snr_name, scatter_name, averages_name = _slot_names(k)
        columns[snr_name][rows] = held.snr_db[lo:hi, k]
        scatter = held.scatter_snr_db[lo:hi, k]
        columns[scatter_name][rows] = scatter
        seen = ~np.isnan(scatter)
        values, empty = (a[rows] for a in whole[averages_name])
        values[seen] = held.averages[lo:hi, k][seen]
        empty[seen] = False


def _figure_budget_columns(columns: dict[str, np.ndarray], whole: dict[str, _Whole],
                           rows: slice, figures: Sequence[Figure], first: int,
                           budgets: FigureBudgets) -> None:
    """Fill ``rows`` of the budget ``columns`` (and the ``whole``-number ones) from
    ``figures`` (at positions ``first`` on), column by column over those with a budget."""
    nan = math.nan
    with collector_paused():
        every = [f.budget for f in figures]
        at = [i for i, b in enumerate(every) if b is not None]
        if not at:
            return
        inside: list[FigureBudget] = [every[i] for i in at]  # type: ignore[misc]
        del every
        where = np.array(at, dtype=np.int64) + rows.start
        number = budgets.shared_numbers
        values, empty = whole["budget"]
        values[where] = [number[id(b.shared)] for b in inside]
        empty[where] = False
        columns["combined_uncertainty_db"][where] = [b.combined_db for b in inside]
        for k in range(NOISE_SLOTS):
            snr_name, scatter_name, averages_name = _slot_names(k)
            columns[snr_name][where] = [b.snr_db[k] if len(b.snr_db) > k else nan
                                        for b in inside]
            scatter_at = [b.scatter_snr_db[k] if len(b.scatter_snr_db) > k else nan
                          for b in inside]
            columns[scatter_name][where] = scatter_at
            seen = [j for j, s in enumerate(scatter_at) if s == s]
            values, empty = whole[averages_name]
            values[where[seen]] = [inside[j].averages[k] for j in seen]
            empty[where[seen]] = False
        own_terms = budgets.own_terms
        for i, row in zip(at, where.tolist(), strict=True):
            text = own_terms.get(first + i)
            if text is not None:
                columns["own_terms"][row] = text


def budgets_frame(budgets: FigureBudgets) -> pd.DataFrame:
    """The shared-part table (``budgets.csv``, :data:`BUDGET_COLUMNS`): per shared part its
    number, k, its lines' numbers in ``budget-terms.csv`` (space-separated), the root sum of
    squares of those lines (dB), and the readings whose noise matters with the sensitivities
    of their noise and noise-scatter lines (space-separated, in the same order)."""
    parts = budgets.shared
    return pd.DataFrame({
        "budget": np.arange(len(parts), dtype=np.int64),
        "coverage_factor": np.array([p.coverage_factor for p in parts], dtype=float),
        "contributions": [" ".join(map(str, t)) for t in budgets.shared_terms],
        "shared_uncertainty_db": np.array([p.combined_db for p in parts], dtype=float),
        "noise_readings": [" ".join(r for r, _ in p.noisy) for p in parts],
        "noise_sensitivities": [" ".join(repr(float(c)) for _, c in p.noisy) for p in parts],
        "scatter_sensitivities": [" ".join(repr(float(c)) for c in p.scatter_c)
                                  for p in parts],
    }, columns=list(BUDGET_COLUMNS))


def budget_terms_frame(budgets: FigureBudgets) -> pd.DataFrame:
    """The table of distinct budget lines (``budget-terms.csv``, columns
    :data:`BUDGET_TERM_COLUMNS`, the keys of :meth:`Contribution.as_dict`): every line
    complete, with its source, distribution, divisor, sensitivity, contribution and GUM
    type."""
    terms = budgets.terms
    shapes = [t.shape for t in terms]
    return pd.DataFrame({
        "term": np.arange(len(terms), dtype=np.int64),
        "name": pd.Series([t.name for t in terms], dtype=object),
        "what": pd.Series([t.what for t in terms], dtype=object),
        "half_width_db": np.array([t.half_width_db for t in terms], dtype=float),
        "distribution": pd.Series(shapes, dtype=object),
        "divisor": np.array([DIVISORS.get(s, math.nan) for s in shapes], dtype=float),
        "standard_uncertainty_db": np.array([t.standard_db for t in terms], dtype=float),
        "sensitivity": np.array([t.sensitivity for t in terms], dtype=float),
        "contribution_db": np.array([t.contribution_db for t in terms], dtype=float),
        "type": pd.Series([t.kind for t in terms], dtype=object),
        "origin": pd.Series([t.origin for t in terms], dtype=object),
    }, columns=list(BUDGET_TERM_COLUMNS))


def read_budget_tables(folder: Path, budgets_file: str, terms_file: str
                       ) -> tuple[list[Contribution], list[SharedBudget]]:
    """The lines and shared parts of ``budget-terms.csv`` and ``budgets.csv`` in
    ``folder``, as the report wrote them (OSError, KeyError, ValueError, IndexError: the
    caller names the file)."""
    with (folder / terms_file).open(encoding="utf-8", newline="") as f:
        terms = [Contribution(row["name"], row["what"], float(row["half_width_db"]),
                              row["distribution"], float(row["sensitivity"]),
                              row["type"], row["origin"])  # type: ignore[arg-type]
                 for row in csv.DictReader(f)]
    shared: list[SharedBudget] = []
    with (folder / budgets_file).open(encoding="utf-8", newline="") as f:
        for row in csv.DictReader(f):
            readings = row["noise_readings"].split()
            noise_c = [float(c) for c in row["noise_sensitivities"].split()]
            scatter_c = tuple(float(c) for c in row["scatter_sensitivities"].split())
            if not len(readings) == len(noise_c) == len(scatter_c):
                raise ValueError(f"budget {row['budget']}: noise readings and "
                                 "sensitivities do not match")
            shared.append(SharedBudget(
                tuple(terms[int(i)] for i in row["contributions"].split()),
                tuple(zip(readings, noise_c, strict=True)), scatter_c,
                float(row["coverage_factor"])))
    return terms, shared


def figure_budget_from_row(row: Mapping[str, str], terms: Sequence[Contribution],
                           shared: Sequence[SharedBudget]) -> FigureBudget | None:
    """The budget of one row of ``figures.csv`` (None: its ``budget`` cell is empty)."""
    if not row["budget"]:
        return None
    part = shared[int(row["budget"])]
    slots = range(len(part.noisy))
    names = [_slot_names(k) for k in slots]
    return FigureBudget(
        part, tuple(_number(row[n[0]]) for n in names),
        tuple(_number(row[n[1]]) for n in names),
        tuple(int(row[n[2]]) if row[n[2]] else 1 for n in names),
        tuple(terms[int(i)] for i in row["own_terms"].split()),
        float(row["combined_uncertainty_db"]))


def _number(text: str) -> float:
    return float(text) if text else math.nan


class BudgetEntries:
    """Budgets read back as the format-2 ``figures.json`` had them: :meth:`entry` gives a
    figure's budget as a dict whose ``contributions`` index :attr:`terms` (every distinct
    line met, as :meth:`Contribution.as_dict`)."""

    def __init__(self) -> None:
        self.terms: list[dict[str, object]] = []
        self._numbers: dict[Contribution, int] = {}
        self._lines: dict[tuple, object] = {}

    def entry(self, budget: FigureBudget) -> dict[str, object]:
        numbers = []
        for line in budget_lines(budget, self._lines):
            number = self._numbers.get(line)
            if number is None:
                number = self._numbers[line] = len(self.terms)
                self.terms.append(line.as_dict())
            numbers.append(number)
        return {"combined_standard_uncertainty_db": budget.combined_db,
                "coverage_factor": budget.coverage_factor,
                "expanded_uncertainty_db": budget.expanded_db,
                "contributions": numbers}
