"""Uncertainty budgets of a run's figures, worked out per group of figures at once.

:func:`sweeprig.analysis.uncertainty.figure_budget` builds one figure's budget; a large run
has hundreds of thousands of figures, most of them read at one point: a gain, an isolation,
an IM3 or spur level. Their budgets differ only in the lines that depend on the figure's own
reading (the analyzer-noise bias at its SNR, the scatter of one reading in the noise): the
instrument lines are the same for every figure of a kind. :func:`grouped_budgets` therefore
groups the single-point figures by kind (its model) and by the readings whose noise matters,
looks the SNR of every figure of a group up at once (numpy, against each reading's
point-ordered table), makes each distinct line once (the scalar
:func:`~sweeprig.analysis.uncertainty.noise_bias_db` and
:func:`~sweeprig.analysis.uncertainty.noise_scatter_db` per distinct SNR, so every line is
the very number the per-figure path gives), and one :class:`Budget` per distinct set of
lines, shared by every figure that has it.

Fitted figures (intercepts, compression points, means of gains) and figures over several
points keep the per-figure path: they are a few per cent of a run, and their fit terms
depend on every point of the fit. :func:`per_figure_budgets` is the reference the grouped
path is tested against (tests/analysis/test_uncertainty_groups.py): the same budgets, line
for line, for every figure.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from sweeprig.analysis.figures import Figure
from sweeprig.analysis.uncertainty import (
    _DB_UNITS,
    MODELS,
    Budget,
    CalibrationState,
    Contribution,
    InstrumentSpecs,
    PointLevels,
    _cached_level_terms,
    _Model,
    _noise_reading,
    figure_budget,
    made_budget,
    noise_lines,
    noise_scatter_lines,
)

#: The readings whose noise matters to a figure, with their sensitivities.
Noisy = tuple[tuple[str, float], ...]


def per_figure_budgets(figures: Sequence[Figure], levels: PointLevels,
                       specs: InstrumentSpecs, cal: CalibrationState,
                       small_signal_u: Mapping[tuple, float] | None = None,
                       lines: dict[tuple, Any] | None = None) -> list[Budget | None]:
    """Each figure's budget by :func:`figure_budget`, one figure at a time (the reference)."""
    lines = {} if lines is None else lines
    return [figure_budget(f, levels, specs, cal, small_signal_u=small_signal_u, lines=lines)
            for f in figures]


def grouped_budgets(figures: Sequence[Figure], levels: PointLevels, specs: InstrumentSpecs,
                    cal: CalibrationState,
                    small_signal_u: Mapping[tuple, float] | None = None,
                    lines: dict[tuple, Any] | None = None) -> list[Budget | None]:
    """The budgets :func:`per_figure_budgets` gives (None where a figure has none), worked
    out per group of single-point figures of one kind and one set of noisy readings; equal
    budgets of a group are one shared object. ``lines``: as for :func:`figure_budget`."""
    lines = {} if lines is None else lines
    budgets: list[Budget | None] = [None] * len(figures)
    groups: dict[tuple[str, Noisy], list[int]] = {}
    # per figure name: its model and, unless it depends on the figure (an m×n spur's own
    # reading), its noisy readings
    kinds: dict[str, tuple[_Model | None, Noisy | None]] = {}
    for i, f in enumerate(figures):
        kind = kinds.get(f.name)
        if kind is None:
            model = MODELS.get(f.name)
            fixed = (None if model is None or model.noise_reading == "spur"
                     else _noisy(model, model.noise_reading))
            kind = kinds[f.name] = (model, fixed)
        model, noisy = kind
        if model is None or not f.is_number or f.unit not in _DB_UNITS:
            continue
        if model.fit is not None or len(f.points) != 1:
            budgets[i] = figure_budget(f, levels, specs, cal, small_signal_u=small_signal_u,
                                       lines=lines)
            continue
        if noisy is None:
            noisy = _noisy(model, _noise_reading(model, f))
        group = groups.get((f.name, noisy))
        if group is None:
            group = groups[(f.name, noisy)] = []
        group.append(i)
    tables = _ReadingTables(levels)
    for (name, noisy), members in groups.items():
        model = MODELS[name]
        level_key = ("level", name)
        level_terms = lines.get(level_key)
        if level_terms is None:
            level_terms = lines[level_key] = _cached_level_terms(model, specs, cal)
        points = np.fromiter((int(figures[i].points[0]) for i in members), dtype=np.int64,
                             count=len(members))
        for index, budget in zip(members, _group_budgets(model, noisy, level_terms, points,
                                                         tables, specs, lines), strict=True):
            budgets[index] = budget
    return budgets


def _noisy(model: _Model, reading: str | None) -> Noisy:
    """The (reading, sensitivity) pairs whose noise matters, as :func:`figure_budget` has
    them."""
    return tuple((r, c) for r, c in [(reading, model.noise_c), *model.noise_also]
                 if r is not None and c)


class _ReadingTables:
    """Per reading: its points in order, with level − noise floor (dB) and sweeps averaged
    (built from :class:`PointLevels` once, on first use of each reading)."""

    def __init__(self, levels: PointLevels) -> None:
        self._levels = levels
        self._by_reading: dict[str, list[tuple[int, str]]] | None = None
        self._tables: dict[str, tuple[np.ndarray, np.ndarray, np.ndarray]] = {}

    def snr_and_averages(self, reading: str, points: np.ndarray
                         ) -> tuple[np.ndarray, np.ndarray]:
        """(level − floor dB, averages) of ``reading`` at each of ``points``; NaN and 1
        where the point has no such reading."""
        table = self._tables.get(reading)
        if table is None:
            table = self._tables[reading] = self._table(reading)
        at, snr, avg = table
        if at.size == 0:
            return np.full(points.size, math.nan), np.ones(points.size, dtype=np.int64)
        pos = np.minimum(np.searchsorted(at, points), at.size - 1)
        found = at[pos] == points
        return (np.where(found, snr[pos], math.nan),
                np.where(found, avg[pos], 1))

    def _table(self, reading: str) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        levels = self._levels
        if self._by_reading is None:
            by_reading: dict[str, list[tuple[int, str]]] = {}
            for key in levels.level_dbm:
                keys = by_reading.get(key[1])
                if keys is None:
                    keys = by_reading[key[1]] = []
                keys.append(key)
            self._by_reading = by_reading
        keys = self._by_reading.get(reading, [])
        at = np.fromiter((k[0] for k in keys), dtype=np.int64, count=len(keys))
        level = np.fromiter((levels.level_dbm[k] for k in keys), dtype=float, count=len(keys))
        floor = np.fromiter((levels.floor_dbm[k] for k in keys), dtype=float, count=len(keys))
        avg = np.fromiter((levels.averages.get(k, 1) for k in keys), dtype=np.int64,
                          count=len(keys))
        order = np.argsort(at, kind="stable")
        # level − floor as PointLevels.min_snr_db and worst_scatter work it out (IEEE
        # subtraction: the same number)
        return at[order], level[order] - floor[order], avg[order]


def _group_budgets(model: _Model, noisy: Noisy, level_terms: tuple[Contribution, ...],
                   points: np.ndarray, tables: _ReadingTables, specs: InstrumentSpecs,
                   lines: dict[tuple, Any]) -> list[Budget]:
    """The budgets of the single-point figures at ``points`` of one kind (``model``) and one
    set of noisy readings, in the order :func:`figure_budget` writes their lines: the level
    terms, a noise line per reading with a finite SNR, then (a single reading has no fit
    term) a noise-scatter line per reading with a scatter above zero."""
    count = points.size
    # per slot: the distinct lines (None: no line) and each figure's number among them
    # (-1: no line)
    noise_slots: list[tuple[list[Contribution | None], np.ndarray]] = []
    scatter_slots: list[tuple[list[Contribution | None], np.ndarray]] = []
    for reading, c in noisy:
        snr, avg = tables.snr_and_averages(reading, points)
        known = ~np.isnan(snr)
        values, inverse = np.unique(snr[known], return_inverse=True)
        inverse = inverse.reshape(-1)
        values_list = values.tolist()
        finite = np.isfinite(values)
        noise: list[Contribution | None] = [None] * len(values_list)
        for k, line in zip(np.flatnonzero(finite).tolist(),
                           noise_lines(lines, reading, values[finite].tolist(), c),
                           strict=True):
            noise[k] = line
        code = np.full(count, -1, dtype=np.int64)
        code[known] = inverse
        noise_slots.append((noise, code))
        # the scatter line is per (SNR, averages): one number per pair
        known_avg = avg[known]
        radix = int(known_avg.max(initial=1)) + 1
        pairs, pair_inverse = np.unique(inverse * radix + known_avg, return_inverse=True)
        scatter = noise_scatter_lines(
            lines, reading, [(values_list[pair // radix], pair % radix)
                             for pair in pairs.tolist()], model.relative_c or c)
        code = np.full(count, -1, dtype=np.int64)
        code[known] = pair_inverse.reshape(-1)
        scatter_slots.append((scatter, code))
    coverage = specs.coverage_factor
    slots = noise_slots + scatter_slots
    if not slots:
        return [made_budget(level_terms, coverage)] * count
    if math.prod(len(made) + 1 for made, _ in slots) < 2**62:
        # one number per distinct set of lines (mixed radix over the slots)
        key = np.zeros(count, dtype=np.int64)
        for made, code in slots:
            key = key * (len(made) + 1) + (code + 1)
        _, first, inverse = np.unique(key, return_index=True, return_inverse=True)
    else:  # too many distinct lines for one int64: compare the rows themselves
        _, first, inverse = np.unique(np.column_stack([code for _, code in slots]),
                                      axis=0, return_index=True, return_inverse=True)
    # per slot, each distinct budget's line there (None: none); a budget's lines are the
    # level terms and then its slots' lines in order, as figure_budget writes them
    columns = [[made[k] if k >= 0 else None for k in code[first].tolist()]
               for made, code in slots]
    distinct = [made_budget(level_terms + tuple(filter(None, row)), coverage)
                for row in zip(*columns, strict=True)]
    return [distinct[k] for k in inverse.reshape(-1).tolist()]
