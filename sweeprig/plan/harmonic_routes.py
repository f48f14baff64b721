"""The sources' harmonic lines of a drive as arrays, from a route table built once per planner.

:func:`sweeprig.plan.margins.source_harmonic_lines` follows every route by which a source's
harmonic reaches the part's output (the relations and their sources are in its docstring).
Each route's line sits at ``|n·f + s·m·f_LO|`` with a level ``a·P + b`` (P the tone's power,
dBm; ``a`` = 1, or 2 for a harmonic with its fundamental in the input stage), and ``(n, s·m,
a, b)`` depend on the sources' stated harmonics, the part's gain and isolation only, never on
the drive. :class:`HarmonicRoutes` holds them as arrays, in the order
:func:`~sweeprig.plan.margins.source_harmonic_lines` lists its lines, so a drive's lines are a
few array operations instead of a hundred line objects; the levels are the same sums, so the
lines are the same numbers (``tests/plan/test_harmonic_routes.py`` checks both ways agree).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from sweeprig.formats.pathloss import ConstantLoss, PathLoss, TableLoss
from sweeprig.plan import margins as mg

FloatArray = NDArray[np.float64]


@dataclass(frozen=True)
class ToneRoutes:
    """The routes of one source tone (one per line of
    :func:`~sweeprig.plan.margins.source_harmonic_lines`): the line is at
    ``|rf_multiple·f + lo_multiple·f_LO|`` (``lo_multiple`` carries the sign), its level
    ``power_factor·P + offset_db`` (dBm)."""

    rf_multiple: FloatArray
    lo_multiple: FloatArray
    power_factor: FloatArray
    offset_db: FloatArray

    def lines(self, f_lo_hz: float, freq_hz: float, power_dbm: float
              ) -> tuple[FloatArray, FloatArray]:
        """(frequency, level) of this tone's lines at a drive, Hz and dBm."""
        # an absurd frequency (a file's 1e307 Hz, refused later by the limits) gives inf, as
        # the reference's Python floats do, not a numpy overflow warning
        with np.errstate(over="ignore", invalid="ignore"):
            freq = np.abs(self.rf_multiple * freq_hz + self.lo_multiple * f_lo_hz)
            return freq, self.power_factor * power_dbm + self.offset_db


def tone_routes(
    harmonics_dbc: Sequence[float], lo_harmonics_dbc: Sequence[float], gain_db: float,
    even_conversion_db: float, iip2_dbm: float = mg.ASSUMED_PART_IIP2_DBM,
    max_lo_order: int = mg.HARMONIC_MAX_LO_ORDER,
) -> ToneRoutes:
    """The routes of a tone whose source has ``harmonics_dbc`` (2nd up), in the loops and
    order of :func:`~sweeprig.plan.margins.source_harmonic_lines`."""
    rows: list[tuple[float, float, float, float]] = []

    def add(m: int, n: int, factor: float, offset: float) -> None:
        # _both_sides: n·f for m = 0, else |n·f − m·f_LO| and n·f + m·f_LO
        if m == 0:
            rows.append((n, 0.0, factor, offset))
        else:
            rows.extend([(n, -m, factor, offset), (n, m, factor, offset)])

    even_lo = [(h, dbc) for h, dbc in enumerate(lo_harmonics_dbc, start=2) if h % 2 == 0]
    orders = [(1, 0.0), *enumerate(harmonics_dbc, start=2)]
    for m in range(max_lo_order + 1):
        conv = mg.lo_order_conversion_db(m, gain_db, even_conversion_db)
        for k, r_k in orders:
            if k >= 2:
                add(m, k, 1.0, r_k + conv)
                for n in {k + 1, k - 1} - {0, 1}:
                    add(m, n, 2.0, r_k - iip2_dbm + conv)
            if m % 2 == 0:
                for _, l_h in even_lo:
                    add(m, k, 1.0, r_k + gain_db + l_h)
    table = np.array(rows, dtype=float).reshape(-1, 4)
    return ToneRoutes(*(np.ascontiguousarray(table[:, c]) for c in range(4)))


def source_harmonic_arrays(
    routes: Sequence[ToneRoutes], f_lo_hz: float, tones: Sequence[mg.HarmonicTone]
) -> tuple[FloatArray, FloatArray]:
    """(frequency, level) of the lines :func:`~sweeprig.plan.margins.source_harmonic_lines`
    gives for ``tones`` (``routes[i]`` made for ``tones[i]``'s source), in its order: lines
    at 0 Hz or below and lines of non-finite level are left out, as there."""
    freqs, levels = [], []
    for route, tone in zip(routes, tones, strict=True):
        f, lv = route.lines(f_lo_hz, tone.freq_hz, tone.power_dbm)
        freqs.append(f)
        levels.append(lv)
    if not freqs:
        return np.zeros(0), np.zeros(0)
    freq, level = np.concatenate(freqs), np.concatenate(levels)
    keep = (freq > 0) & np.isfinite(level)
    return freq[keep], level[keep]


def estimate_losses_db(loss: PathLoss, freq_hz: FloatArray) -> FloatArray:
    """``loss.estimate_at`` at each frequency (Hz), dB: one array operation for a constant
    or table loss (the same interpolation, hence the same numbers), one call per frequency
    otherwise."""
    if isinstance(loss, ConstantLoss):
        return np.full(freq_hz.shape, loss.at(0.0), dtype=float)
    if isinstance(loss, TableLoss):
        return np.interp(freq_hz, loss.freq_hz, loss.loss_table_db)
    return np.array([loss.estimate_at(float(f)) for f in freq_hz], dtype=float)
