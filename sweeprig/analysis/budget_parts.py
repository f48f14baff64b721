"""A figure's uncertainty budget as a shared part and the figure's own lines.

Most of a budget does not depend on the figure's own readings: the instrument lines (source
or power meter, analyzer accuracy, mismatch, calibration, display linearity) are the same
for every figure of one kind, specifications and calibration. What differs from figure to
figure is the noise: the analyzer-noise bias at the lowest SNR of each reading whose noise
matters, and the scatter of one reading in the noise (see
:mod:`sweeprig.analysis.uncertainty`). A large run has hundreds of thousands of figures and
a few dozen distinct shared parts, so a budget is kept as

* a :class:`SharedBudget`, made once per kind of figure (its lines, the readings whose noise
  matters with their sensitivities, the coverage factor), shared by every figure of it, and
* a :class:`FigureBudget` per figure: that shared part, the SNR (dB) and sweeps averaged of
  each of those readings, the few lines only a fitted figure has (its fit and compression
  terms), and its combined standard uncertainty u_c (worked out for a whole group of figures
  at once with numpy: :func:`noise_contributions_db`).

:func:`budget_lines` is the one place a figure's full list of lines is put back together
(the HTML report, ``figures.json``'s reader, tests): the shared lines, a noise line per
reading with a finite SNR, the figure's own fit lines, then a noise-scatter line per reading
that scatters (the order the GUM budget has always been written in). The lines are combined
by root sum of squares of c_i·u(x_i) and expanded with k (JCGM 100:2008 eq. (10) and 6.3.3).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from sweeprig.analysis.uncertainty import (
    COVERAGE_FACTOR,
    DIVISORS,
    LOG_NOISE_STD_DB,
    Budget,
    Contribution,
    noise_line,
    noise_scatter_db,
    noise_scatter_line,
)

#: The readings whose noise matters to a figure, with their sensitivities c_i.
Noisy = tuple[tuple[str, float], ...]


@dataclass(frozen=True, slots=True)
class SharedBudget:
    """The part of a budget that does not depend on the figure's own readings' SNR.

    ``lines``: its lines (dB); ``noisy``: per reading whose noise matters, (reading, c of
    its noise line); ``scatter_c``: per such reading, the c of its noise-scatter line;
    ``coverage_factor``: k."""

    lines: tuple[Contribution, ...]
    noisy: Noisy = ()
    scatter_c: tuple[float, ...] = ()
    coverage_factor: float = COVERAGE_FACTOR
    #: The root sum of squares of ``lines`` alone, dB.
    combined_db: float = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        object.__setattr__(self, "combined_db",
                           math.hypot(*[c.contribution_db for c in self.lines]))


@dataclass(frozen=True, slots=True)
class FigureBudget:
    """One figure's budget: its :class:`SharedBudget` and its own inputs.

    Per reading of ``shared.noisy``: ``snr_db`` the lowest level − noise floor over the
    figure's points (a noise line where finite), ``scatter_snr_db`` and ``averages`` the
    SNR and sweeps of the reading that scatters most (a noise-scatter line where
    :func:`~sweeprig.analysis.uncertainty.noise_scatter_db` of them is above zero; NaN: no
    such line, as for a fitted figure, whose fit term holds that scatter). ``own_lines``:
    a fitted figure's own lines (compression and fit terms). ``combined_db``: u_c, dB.
    The full list of lines: :func:`budget_lines` (``contributions``)."""

    shared: SharedBudget
    snr_db: tuple[float, ...] = ()
    scatter_snr_db: tuple[float, ...] = ()
    averages: tuple[int, ...] = ()
    own_lines: tuple[Contribution, ...] = ()
    combined_db: float = field(default=math.nan, compare=False)

    @property
    def coverage_factor(self) -> float:
        return self.shared.coverage_factor

    @property
    def expanded_db(self) -> float:
        """U = k · u_c, dB."""
        return self.shared.coverage_factor * self.combined_db

    @property
    def contributions(self) -> tuple[Contribution, ...]:
        """Every line of the budget, in order (:func:`budget_lines`)."""
        return budget_lines(self)

    def as_budget(self) -> Budget:
        """The budget as one :class:`Budget` of all its lines."""
        return Budget(budget_lines(self), self.shared.coverage_factor)


def budget_lines(budget: FigureBudget, lines: dict[tuple, object] | None = None
                 ) -> tuple[Contribution, ...]:
    """A figure's full budget, line by line: the shared lines, a noise line per reading
    with a finite SNR, the figure's own lines, then a noise-scatter line per reading that
    scatters. The one function that puts a budget back together. ``lines``: a dict the
    noise lines made are kept in and taken from (many figures share them)."""
    if lines is None:
        lines = {}
    shared = budget.shared
    out = list(shared.lines)
    for (reading, c), snr in zip(shared.noisy, budget.snr_db, strict=True):
        if math.isfinite(snr):
            out.append(noise_line(lines, reading, snr, c))
    out += budget.own_lines
    for (reading, _), c, snr, averages in zip(shared.noisy, shared.scatter_c,
                                              budget.scatter_snr_db, budget.averages,
                                              strict=True):
        sigma = noise_scatter_db(snr, averages)
        if sigma > 0.0:
            out.append(noise_scatter_line(lines, reading, sigma, snr, averages, c))
    return tuple(out)


def whole_budget(budget: Budget) -> FigureBudget:
    """A budget with no lines of its own (every line shared, as a noise figure's own
    :class:`Budget`), as a :class:`FigureBudget`."""
    shared = SharedBudget(budget.contributions, coverage_factor=budget.coverage_factor)
    return FigureBudget(shared, combined_db=budget.combined_db)


_RECTANGULAR = DIVISORS["rectangular"]


def noise_contributions_db(snr_db: np.ndarray, c: float) -> np.ndarray:
    """|c|·u of the noise line at each of ``snr_db`` (0 where not finite: no line): the
    bias 10·log10(1 + 10^(−SNR/10)) taken as rectangular (as
    :func:`~sweeprig.analysis.uncertainty.noise_bias_db`), for many figures at once."""
    snr = np.asarray(snr_db, dtype=float)
    finite = np.isfinite(snr)
    bias = np.zeros(snr.shape)
    bias[finite] = 10.0 * np.log10(1.0 + 10.0 ** (-snr[finite] / 10.0))
    return abs(c) * (bias / _RECTANGULAR)


def scatter_contributions_db(snr_db: np.ndarray, averages: np.ndarray, c: float
                             ) -> np.ndarray:
    """|c|·σ of the noise-scatter line at each (SNR, averages) (0: no line): the scatter of
    :func:`~sweeprig.analysis.uncertainty.noise_scatter_db`, for many figures at once."""
    snr = np.asarray(snr_db, dtype=float)
    n = np.maximum(np.asarray(averages, dtype=float), 1.0)
    known = ~np.isnan(snr) & (snr != math.inf)
    s = np.where(known, snr, 0.0)
    with np.errstate(over="ignore", divide="ignore", invalid="ignore"):
        rho = np.where(s < 300.0, 10.0 ** (s / 10.0) - 1.0, math.inf)
        one = np.where(rho <= 0.0, LOG_NOISE_STD_DB,
                       np.minimum(20.0 / math.log(10.0) * np.sqrt(1.0 / (2.0 * rho)),
                                  LOG_NOISE_STD_DB))
    return np.where(known, abs(c) * (one / np.sqrt(n)), 0.0)
