"""Uncertainty budgets of a run's figures: a shared part per kind, the noise per figure.

A large run has hundreds of thousands of figures, most of them read at one point: a gain,
an isolation, an IM3 or spur level. Their budgets differ only in the lines that depend on
the figure's own readings (the analyzer-noise bias at its SNR, the scatter of one reading
in the noise, :mod:`sweeprig.analysis.budget_parts`); the instrument lines are one
:class:`~sweeprig.analysis.budget_parts.SharedBudget` per kind, specifications and
calibration. :func:`grouped_budgets` groups the single-point figures by kind (its model)
and by the readings whose noise matters, looks the SNR of every figure of a group up at
once (numpy, against each reading's point-ordered table) and works out every figure's
combined standard uncertainty u_c with numpy from it (JCGM 100:2008 eq. (10): the root sum
of squares of the shared lines' c_i·u(x_i) and of its own noise lines').

Fitted figures (intercepts, compression points, means of gains) and figures over several
points have lines of their own, which depend on every point of the fit: they are worked out
per model and count of points (:func:`alike_budgets`: the readings of all of them looked up
at once, their lowest SNR, fit scatter and compression slope taken row by row with numpy,
then each one's budget made); :func:`figure_budget` is one such figure alone.
:func:`attach_uncertainty` gives every figure of a run its budget and expanded uncertainty
U = k·u_c (GUM 6.3.3).
"""

from __future__ import annotations

import functools
import math
from collections.abc import Mapping, Sequence
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from sweeprig.analysis.budget_parts import (
    FigureBudget,
    Noisy,
    SharedBudget,
    budget_lines,
    noise_contributions_db,
    scatter_contributions_db,
)
from sweeprig.analysis.figures import (
    Figure,
    collector_paused,
    with_uncertainty,
)
from sweeprig.analysis.uncertainty import (
    _DB_UNITS,
    _SIDE_NAMES,
    MODELS,
    UNCALIBRATED,
    WORST_OF,
    CalibrationState,
    Contribution,
    InstrumentSpecs,
    PointLevels,
    _cached_level_terms,
    _condition_key,
    _Model,
    _noise_reading,
    compression_lines,
    compression_slopes,
    intercept_fit_u_rows,
    noise_reading_at,
    small_signal_gain_u,
    std_of_mean_rows,
    worst_scatter_of,
)
from sweeprig.analysis.writable_twin import writable_twin

if TYPE_CHECKING:
    from sweeprig.analysis.figure_block import FigureBlock, Part


def attach_uncertainty(figures: Sequence[Figure], captures: pd.DataFrame,
                       specs: InstrumentSpecs | None = None,
                       cal: CalibrationState = UNCALIBRATED) -> list[Figure]:
    """The figures with ``uncertainty_db`` (expanded, k from ``specs``) and ``budget`` (a
    :class:`~sweeprig.analysis.budget_parts.FigureBudget`) set where a budget exists; the
    others are returned unchanged. A headline figure that is the worse of two sides
    (:data:`~sweeprig.analysis.uncertainty.WORST_OF`) takes that side's budget."""
    out = list(figures)
    attach_uncertainty_in_place(out, captures, specs, cal)
    return out


def attach_uncertainty_in_place(
    figures: list[Figure], captures: pd.DataFrame, specs: InstrumentSpecs | None = None,
    cal: CalibrationState = UNCALIBRATED, *, levels: PointLevels | None = None,
) -> None:
    """:func:`attach_uncertainty`, each figure of the list replaced where it stands: a
    caller that owns the list (the reduction) never holds a run's figures twice.
    ``levels``: the captures' :class:`PointLevels`, when the caller has them."""
    specs = specs or InstrumentSpecs()
    sides: dict[tuple, Figure] = {}
    # _condition_key per distinct mapping (held beside it: its id stays its own)
    keys: dict[int, tuple[Mapping[str, object], tuple]] = {}

    def key_of(c: Mapping[str, object]) -> tuple:
        held = keys.get(id(c))
        if held is None:
            held = keys[id(c)] = (c, _condition_key(c))
        return held[1]

    with collector_paused():  # a large run makes hundreds of thousands of budgets
        budgets = grouped_budgets(figures, captures, specs, cal, levels=levels)
        for i, budget in enumerate(budgets):
            if budget is not None:
                f = figures[i] = with_uncertainty(figures[i], budget.expanded_db, budget)
                if f.name in _SIDE_NAMES:
                    sides[(f.name, key_of(f.conditions), f.value)] = f
        del budgets
    for i, f in enumerate(figures):
        if f.name in WORST_OF and f.is_number:
            for side in WORST_OF[f.name]:
                match = sides.get((side, key_of(f.conditions), f.value))
                if match is not None:
                    figures[i] = with_uncertainty(f, match.uncertainty_db, match.budget)
                    break


def attach_uncertainty_to_parts(
    parts: Sequence[Part], captures: pd.DataFrame, specs: InstrumentSpecs | None = None,
    cal: CalibrationState = UNCALIBRATED,
) -> list[Part]:
    """:func:`attach_uncertainty_in_place` of a run's figures held as parts
    (:mod:`sweeprig.analysis.figure_block`): the loose figures as there, a block's budgets
    worked out as columns (:class:`~sweeprig.analysis.figure_block.BlockBudgets`) with its
    uncertainty column; the same budgets, figure by figure."""
    from sweeprig.analysis.figure_block import FigureBlock

    specs = specs or InstrumentSpecs()
    levels = PointLevels.from_captures(captures)
    loose = [f for part in parts if not isinstance(part, FigureBlock) for f in part]
    attach_uncertainty_in_place(loose, captures, specs, cal, levels=levels)
    out: list[Part] = []
    taken = 0
    for part in parts:
        if isinstance(part, FigureBlock):
            out.append(_with_block_budgets(part, levels, specs, cal))
        else:
            out.append(tuple(loose[taken:taken + len(part)]))
            taken += len(part)
    return out


def blockable(name: str) -> bool:
    """Whether figures called ``name`` may be held in a block (their budgets worked out as
    columns): not a fitted figure's, nor one a headline takes its budget from."""
    model = MODELS.get(name)
    return ((model is None or model.fit is None) and name not in WORST_OF
            and name not in _SIDE_NAMES)


def _with_block_budgets(block: FigureBlock, levels: PointLevels, specs: InstrumentSpecs,
                        cal: CalibrationState) -> FigureBlock:
    """The block with its budgets and uncertainty column, as :func:`grouped_budgets` gives
    each of its figures (a block never holds a fitted figure: :func:`blockable`)."""
    from sweeprig.analysis.figure_block import BlockBudgets

    model = MODELS.get(block.name)
    if model is None or block.unit not in _DB_UNITS:
        return block
    if model.fit is not None:
        raise ValueError(f"a block of fitted figures ({block.name}): see blockable()")
    count = len(block)
    eligible = np.flatnonzero((block.bound == 0) & np.isfinite(block.value))
    if eligible.size == 0:
        return block
    # the readings whose noise matters, per row: fixed for the name, or (an m×n spur) its
    # own product's, read once per distinct conditions mapping
    groups: dict[Noisy, np.ndarray] = {}
    if model.noise_reading == "spur":
        from sweeprig.analysis.figure_table import distinct_mappings

        mappings, which = distinct_mappings(block.conditions[eligible])
        # each distinct mapping's noisy set, as a code: a spur's reading follows from its
        # m and n alone, so it is worked out once per pair of values and their types (which
        # the reading also depends on)
        noisy_code: dict[Noisy, int] = {}
        by_orders: dict[tuple[object, ...], int] = {}

        def code_of(c: Mapping[str, object]) -> int:
            m, n = c.get("m"), c.get("n")
            orders = (m, n, type(m), type(n))
            known = by_orders.get(orders)
            if known is None:
                known = by_orders[orders] = noisy_code.setdefault(
                    _noisy(model, noise_reading_at(model, c)), len(noisy_code))
            return known

        codes = np.fromiter(map(code_of, mappings), dtype=np.int64,
                            count=len(mappings))[which]
        for noisy, k in noisy_code.items():
            groups[noisy] = eligible[codes == k]
    else:
        groups[_noisy(model, model.noise_reading)] = eligible
    width = max(1, *(len(noisy) for noisy in groups))
    shared_column = np.full(count, None, dtype=object)
    snr = np.full((count, width), math.nan)
    scatter = np.full((count, width), math.nan)
    averages = np.ones((count, width), dtype=np.int64)
    combined = np.full(count, math.nan)
    uncertainty = np.full(count, math.nan)
    for noisy, rows in groups.items():
        shared = shared_budget(model, noisy, specs, cal)
        finite, raw, avg, u_c = _group_columns(shared, block.point[rows], levels)
        k = len(noisy)
        shared_column[rows] = [shared] * rows.size
        snr[rows, :k] = finite.T
        scatter[rows, :k] = raw.T
        averages[rows, :k] = avg.T
        combined[rows] = u_c
        uncertainty[rows] = shared.coverage_factor * u_c
    return block.with_columns(
        uncertainty_db=uncertainty,
        budgets=BlockBudgets(shared_column, snr, scatter, averages, combined))


def _noisy(model: _Model, reading: str | None) -> Noisy:
    """The (reading, sensitivity) pairs whose noise matters, in budget order."""
    return tuple((r, c) for r, c in [(reading, model.noise_c), *model.noise_also]
                 if r is not None and c)


@functools.lru_cache(maxsize=1024)
def shared_budget(model: _Model, noisy: Noisy, specs: InstrumentSpecs,
                  cal: CalibrationState) -> SharedBudget:
    """The shared part of the budget of a figure of ``model`` whose noise matters on
    ``noisy``: one object per kind, specifications and calibration."""
    return SharedBudget(_cached_level_terms(model, specs, cal), noisy,
                        tuple(model.relative_c or c for _, c in noisy),
                        specs.coverage_factor)


def figure_budget(figure: Figure, levels: PointLevels, specs: InstrumentSpecs,
                  cal: CalibrationState = UNCALIBRATED, *,
                  small_signal_u: Mapping[tuple, float] | None = None
                  ) -> FigureBudget | None:
    """The budget of ``figure`` alone (None: a bound, not a number, not in dB, or a figure
    with no model): the lowest SNR of each reading whose noise matters over its points, a
    fitted figure's fit or compression lines, and (without a fit line, whose observed
    scatter holds it) the reading that scatters most (:func:`alike_budgets`)."""
    model = MODELS.get(figure.name)
    if model is None or not figure.is_number or figure.unit not in _DB_UNITS:
        return None
    noisy = _noisy(model, _noise_reading(model, figure))
    return alike_budgets(model, noisy, [figure], levels, specs, cal,
                         small_signal_u=small_signal_u)[0]


def alike_budgets(model: _Model, noisy: Noisy, figures: Sequence[Figure],
                  levels: PointLevels, specs: InstrumentSpecs,
                  cal: CalibrationState = UNCALIBRATED, *,
                  small_signal_u: Mapping[tuple, float] | None = None
                  ) -> list[FigureBudget]:
    """The budgets of ``figures`` (numbers in dB, each over the same count of points, of
    ``model`` with the noisy readings ``noisy``), one each, as :func:`figure_budget` gives
    it. Their readings are looked up for all of them at once, and their SNR, fit and slope
    worked out row by row with numpy (the same numbers as for one figure)."""
    shared = shared_budget(model, noisy, specs, cal)
    count = len(figures)
    width = len(figures[0].points)
    points = np.array([f.points for f in figures], dtype=np.int64).reshape(count, width)
    snrs: list[np.ndarray] = []
    lowest: list[list[float]] = []
    averages: list[np.ndarray] = []
    for reading, _ in noisy:
        snr, avg = levels.snr_and_averages(reading, points.ravel())
        snr, avg = snr.reshape(count, width), avg.reshape(count, width)
        finite = np.isfinite(snr)
        low = np.full(count, math.nan)
        known = finite.any(axis=1)
        if known.any():
            low[known] = np.where(finite[known], snr[known], math.inf).min(axis=1)
        snrs.append(snr)
        averages.append(avg)
        lowest.append(low.tolist())
    # per figure: its fit's u (NaN: none) or its compression slope
    fit_u: list[float] = [math.nan] * count
    fit_text = fit_origin = ""
    slopes: list[float] = []
    if model.fit in ("intercept", "linear", "compression"):
        inputs = levels.inputs_at(points)
        wanted = levels.levels_at("if", points)
        if model.fit == "intercept" and model.product is not None:
            fit_u = intercept_fit_u_rows(inputs, wanted,
                                         levels.levels_at(model.product, points), model.order)
            fit_text = f"scatter about the slope-1/slope-{model.order} lines ({width} points)"
            fit_origin = "measured: regression standard error"
        elif model.fit == "linear":
            gains = wanted - inputs
            fit_u = std_of_mean_rows(gains, np.isfinite(gains)).tolist()
            fit_text = f"scatter of the gain over the linear region ({width} points)"
            fit_origin = "measured: standard deviation of the mean"
        elif model.fit == "compression":
            slopes = compression_slopes(inputs, wanted - inputs).tolist()
    snr_lists = [s.tolist() for s in snrs]
    avg_lists = [a.tolist() for a in averages]
    lines: dict[tuple, object] = {}  # the noise lines, made once for the figures
    out: list[FigureBudget] = []
    for i, figure in enumerate(figures):
        own: list[Contribution] = []
        fitted = math.isfinite(fit_u[i])
        if fitted:
            own.append(Contribution("fit", fit_text, fit_u[i], "standard", 1.0, "A",
                                    fit_origin))
        elif slopes:
            own += compression_lines(figure, slopes[i], specs, small_signal_u)
        scatter_snr: list[float] = []
        scatter_avg: list[int] = []
        for j in range(len(noisy)):
            # A fit's own Type A term is the observed scatter of its points, this one
            # included: only a figure without one (single readings, or too few points)
            # takes it here.
            worst = None if fitted else worst_scatter_of(snr_lists[j][i], avg_lists[j][i])
            if worst is not None and worst[0] > 0.0:
                scatter_snr.append(worst[1])
                scatter_avg.append(worst[2])
            else:
                scatter_snr.append(math.nan)
                scatter_avg.append(1)
        budget = FigureBudget(shared, tuple(low[i] for low in lowest), tuple(scatter_snr),
                              tuple(scatter_avg), tuple(own))
        combined = math.hypot(*[c.contribution_db for c in budget_lines(budget, lines)])
        object.__setattr__(budget, "combined_db", combined)
        out.append(budget)
    return out


def grouped_budgets(figures: Sequence[Figure], captures: pd.DataFrame,
                    specs: InstrumentSpecs, cal: CalibrationState = UNCALIBRATED, *,
                    levels: PointLevels | None = None) -> list[FigureBudget | None]:
    """Every figure's budget as :func:`figure_budget` gives it (None where a figure has
    none), the single-point figures worked out per group of one kind and one set of noisy
    readings from the per-reading tables of ``captures`` (:class:`PointLevels`, numpy),
    their u_c with numpy; the others one at a time."""
    groups: dict[tuple[str, Noisy], list[int]] = {}
    alone: list[int] = []
    # per figure name: its model and, unless it depends on the figure (an m×n spur's own
    # reading), its noisy readings
    kinds: dict[str, tuple[_Model | None, Noisy | None]] = {}
    isfinite = math.isfinite
    for i, f in enumerate(figures):
        kind = kinds.get(f.name)
        if kind is None:
            model = MODELS.get(f.name)
            fixed = (None if model is None or model.noise_reading == "spur"
                     else _noisy(model, model.noise_reading))
            kind = kinds[f.name] = (model, fixed)
        model, noisy = kind
        # (f.is_number, spelled out: this loop meets every figure of the run)
        if model is None or f.bound is not None or not isfinite(f.value) \
                or f.unit not in _DB_UNITS:
            continue
        if model.fit is not None or len(f.points) != 1:
            alone.append(i)
            continue
        if noisy is None:
            noisy = _noisy(model, _noise_reading(model, f))
        group = groups.get((f.name, noisy))
        if group is None:
            group = groups[(f.name, noisy)] = []
        group.append(i)
    budgets: list[FigureBudget | None] = [None] * len(figures)
    if levels is None:
        levels = PointLevels.from_captures(captures)
    if alone:
        small_signal_u = small_signal_gain_u(figures, levels)
        # alike: one model, the same noisy readings and count of points
        alike: dict[tuple[str, Noisy, int], list[int]] = {}
        for i in alone:
            f = figures[i]
            model = MODELS[f.name]
            key = (f.name, _noisy(model, _noise_reading(model, f)), len(f.points))
            alike.setdefault(key, []).append(i)
        for (name, noisy, _count), members in alike.items():
            made = alike_budgets(MODELS[name], noisy, [figures[i] for i in members], levels,
                                 specs, cal, small_signal_u=small_signal_u)
            for i, budget in zip(members, made, strict=True):
                budgets[i] = budget
    for (name, noisy), members in groups.items():
        shared = shared_budget(MODELS[name], noisy, specs, cal)
        points = np.fromiter((int(figures[i].points[0]) for i in members), dtype=np.int64,
                             count=len(members))
        for index, budget in zip(members, _group_budgets(shared, points, levels),
                                 strict=True):
            budgets[index] = budget
    return budgets


def _group_columns(shared: SharedBudget, points: np.ndarray, levels: PointLevels
                   ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """The columns of :func:`_group_budgets`: per reading of ``shared.noisy`` (a row each)
    the SNR at each point where finite (else NaN), the SNR as read, the sweeps; and u_c
    (dB) per point, by root sum of squares of the shared lines and the noise lines."""
    count = points.size
    squares = np.full(count, sum(c.contribution_db ** 2 for c in shared.lines))
    k = len(shared.noisy)
    finite_rows = np.full((k, count), math.nan)
    raw_rows = np.full((k, count), math.nan)
    averages = np.ones((k, count), dtype=np.int64)
    for j, ((reading, c), c_scatter) in enumerate(zip(shared.noisy, shared.scatter_c,
                                                      strict=True)):
        snr, avg = levels.snr_and_averages(reading, points)
        finite = np.where(np.isfinite(snr), snr, math.nan)
        squares += noise_contributions_db(finite, c) ** 2
        squares += scatter_contributions_db(snr, avg, c_scatter) ** 2
        finite_rows[j], raw_rows[j], averages[j] = finite, snr, avg
    return finite_rows, raw_rows, averages, np.sqrt(squares)


#: FigureBudgets are made through a writable twin (a large run makes hundreds of
#: thousands: :mod:`sweeprig.analysis.writable_twin`); None: by the constructor.
_OpenFigureBudget = writable_twin(FigureBudget)


def _group_budgets(shared: SharedBudget, points: np.ndarray, levels: PointLevels
                   ) -> list[FigureBudget]:
    """The budgets of the single-point figures at ``points`` of one shared part: per
    reading of ``shared.noisy`` the SNR at the figure's point (a noise line where finite)
    and, a single reading having no fit term, the same SNR and sweeps for its scatter
    line; u_c by root sum of squares of the shared lines and those (numpy)."""
    count = points.size
    finite, raw, avg, combined_array = _group_columns(shared, points, levels)
    noise_snr: list[list[float]] = finite.tolist()
    scatter_snr: list[list[float]] = raw.tolist()
    averages: list[list[int]] = avg.tolist()
    combined = combined_array.tolist()
    k = len(shared.noisy)
    if k == 0:
        rows_snr: list[tuple[float, ...]] = [()] * count
        rows_scatter: list[tuple[float, ...]] = rows_snr
        rows_avg: list[tuple[int, ...]] = [()] * count
    else:
        rows_snr = list(zip(*noise_snr, strict=True))
        scatter_rows = list(zip(*scatter_snr, strict=True))
        # one tuple where the two are the same (a finite SNR: most figures)
        rows_scatter = [n if s == n else s for n, s in zip(rows_snr, scatter_rows,
                                                            strict=True)]
        distinct: dict[tuple[int, ...], tuple[int, ...]] = {}
        rows_avg = [distinct.setdefault(a, a) for a in zip(*averages, strict=True)]
    return [group_budget(shared, n, s, a, u)
            for n, s, a, u in zip(rows_snr, rows_scatter, rows_avg, combined, strict=True)]


def group_budget(shared: SharedBudget, snr_db: tuple[float, ...],
                 scatter_snr_db: tuple[float, ...], averages: tuple[int, ...],
                 combined_db: float) -> FigureBudget:
    """The :class:`~sweeprig.analysis.budget_parts.FigureBudget` of a single-point figure
    (no lines of its own), its fields set directly (:data:`_OpenFigureBudget`): the one
    builder of the group budgets, a figure's when it is read from a block too."""
    if _OpenFigureBudget is None:
        return FigureBudget(shared, snr_db, scatter_snr_db, averages, (), combined_db)
    budget = _OpenFigureBudget()
    budget.shared = shared
    budget.snr_db = snr_db
    budget.scatter_snr_db = scatter_snr_db
    budget.averages = averages
    budget.own_lines = ()
    budget.combined_db = combined_db
    budget.__class__ = FigureBudget  # type: ignore[assignment]
    return budget  # type: ignore[return-value]
