"""Statistics of one figure over the units of a lot: spread, capability, outliers, "typ".

Pure numpy; one value per unit in, one :class:`LotStatistic` out.

* mean and sample standard deviation (``ddof = 1``: the units are a sample of the part's
  production);
* process capability (ISO 22514-2; Montgomery, *Introduction to Statistical Quality
  Control*, chapter "Process and Measurement System Capability Analysis" — section number
  from memory: 8.3 in the 6th edition)::

      Cpu = (USL − μ) / (3σ),   Cpl = (μ − LSL) / (3σ),   Cpk = min(Cpu, Cpl)

  with μ and σ estimated by the lot's mean and sample standard deviation; with one limit
  only, Cpk is that side's index. None with fewer than :data:`MIN_UNITS_FOR_CPK` units, no
  limit, or no spread;
* outlier units by Tukey's fences (Tukey, *Exploratory Data Analysis*, 1977, from memory):
  below Q1 − 1.5·IQR or above Q3 + 1.5·IQR, quartiles by numpy's default (linear)
  interpolation;
* ``typ``: the lot's median, the value a datasheet's "typ" column gives (common practice, no
  source: half the units are better, half worse, and one odd unit does not move it).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

MIN_UNITS_FOR_CPK = 5
"""Fewer units than this give no Cpk: σ from so few is too uncertain to judge a process by
(common practice, no source; capability studies usually want far more)."""

TUKEY_K = 1.5
"""Tukey's fence multiplier of the inter-quartile range."""


@dataclass(frozen=True)
class LotStatistic:
    """One figure under one set of conditions, over a lot's units (values in ``unit``).

    ``units``: the serials, in the order of ``values``. ``outliers``: serials outside Tukey's
    fences. ``histogram``: counts per bin and the ``bin_edges`` (numpy's ``auto`` bins).
    """

    units: tuple[str, ...]
    values: tuple[float, ...]
    n: int
    mean: float
    std: float
    minimum: float
    maximum: float
    typ: float
    lsl: float | None
    usl: float | None
    cpk: float | None
    outliers: tuple[str, ...]
    histogram: tuple[int, ...]
    bin_edges: tuple[float, ...]


def cpk(mean: float, std: float, lsl: float | None, usl: float | None) -> float | None:
    """Cpk = min((USL − μ)/3σ, (μ − LSL)/3σ) over the limits given (module docstring);
    None without a limit or without spread."""
    if not (std > 0 and math.isfinite(std)):
        return None
    sides = []
    if usl is not None:
        sides.append((usl - mean) / (3.0 * std))
    if lsl is not None:
        sides.append((mean - lsl) / (3.0 * std))
    return min(sides) if sides else None


def tukey_outliers(values: np.ndarray, k: float = TUKEY_K) -> np.ndarray:
    """Mask of the values outside [Q1 − k·IQR, Q3 + k·IQR]."""
    if values.size < 4:
        return np.zeros(values.shape, dtype=bool)
    q1, q3 = np.percentile(values, [25.0, 75.0])
    iqr = q3 - q1
    return (values < q1 - k * iqr) | (values > q3 + k * iqr)


def lot_statistic(units: Sequence[str], values: Sequence[float], *, lsl: float | None = None,
                  usl: float | None = None) -> LotStatistic:
    """The statistics of ``values`` (one per unit of ``units``; non-finite ones dropped)."""
    data = np.asarray(values, dtype=float)
    keep = np.isfinite(data)
    data = data[keep]
    names = tuple(u for u, k in zip(units, keep, strict=True) if k)
    if data.size == 0:
        raise ValueError("no finite value to summarise")
    mean = float(np.mean(data))
    std = float(np.std(data, ddof=1)) if data.size > 1 else math.nan
    counts, edges = np.histogram(data, bins="auto")
    capability = cpk(mean, std, lsl, usl) if data.size >= MIN_UNITS_FOR_CPK else None
    flagged = tukey_outliers(data)
    return LotStatistic(
        units=names, values=tuple(float(v) for v in data), n=int(data.size), mean=mean,
        std=std, minimum=float(np.min(data)), maximum=float(np.max(data)),
        typ=float(np.median(data)), lsl=lsl, usl=usl, cpk=capability,
        outliers=tuple(n for n, f in zip(names, flagged, strict=True) if f),
        histogram=tuple(int(c) for c in counts), bin_edges=tuple(float(e) for e in edges))
