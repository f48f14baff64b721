"""The noise floor around a reading, estimated from the analyzer trace of that reading.

Every line the plan knows is in the trace (the product itself, the other tone, the other
intermodulation products, LO and RF leakage, ...) is masked out with its RBW-filter skirt, and
the floor is a robust statistic (the median) of what is left, converted to a noise power.

Mask width. A swept analyzer's RBW filter is Gaussian-like: a 60 dB : 3 dB shape factor of
about 5 for the synchronously tuned / digital filters of present analyzers (about 11-15 for
old analog four-pole filters), as recalled from memory from a published spectrum-analysis
application note — not checked against the text. With a shape factor of 5 the skirt is 60 dB
down at ±2.5 RBW; ``MASK_HALF_WIDTH_RBW`` = 5 doubles that, for lines more than 60 dB above
the floor and filters less sharp than a Gaussian (common practice, no source). For the ideal
Gaussian H(df) = 2^-(2·df/RBW)² the skirt at 5 RBW is −301 dB (derived).

Median to noise power. The trace is assumed to show log-detected noise with the log-averaging
bias already removed, so that its mean in dB is the noise power (the convention of sweeprig's
simulated analyzer, ``sweeprig.sim.analyzer_display``). For E ~ Exp(1) (the power of a
Rayleigh envelope; standard result): median(E) = ln 2, so one sweep's median sits
10·log10(ln 2) + 10·γ/ln 10 = −1.592 + 2.507 = +0.916 dB above the noise power (derived; γ is
Euler's constant). For N log-averaged sweeps the mean of 10·log10(E) has standard deviation
5.57/√N dB and skewness −1.1395/√N (the log of an exponential variate is Gumbel-distributed:
skewness 12·√6·ζ(3)/π³ = 1.1395; standard result); the first-order Cornish-Fisher rule
median ≈ mean − skewness·σ/6 puts the median 1.058/N dB above (derived). Both corrections
are removed here.
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

#: Half-width of the window masked around every known line, in RBWs (see module docstring).
MASK_HALF_WIDTH_RBW = 5.0
#: Fewest unmasked trace points for an estimate: the median of n log-detected single-sweep
#: samples scatters by about 1.2533·5.57/√n dB (asymptotic standard error of a median,
#: standard result), about 1 dB at n = 50.
MIN_FLOOR_POINTS = 50

_EULER_GAMMA = 0.5772156649015329
_LOG_BIAS_DB = 10.0 * _EULER_GAMMA / math.log(10.0)  # 2.507 dB
#: How far the mean of log-detected (dB) readings of noise sits under its mean power, dB: the
#: correction a log-averaged noise reading needs (derived with numpy in
#: tests/analysis/test_noise_figure.py).
LOG_AVERAGE_BIAS_DB = _LOG_BIAS_DB
_LOG_STD_DB = 10.0 / math.log(10.0) * math.pi / math.sqrt(6.0)  # 5.57 dB
_LOG_EXP_SKEWNESS = 1.1395470994046487  # |skewness| of ln E, E ~ Exp(1) (Gumbel)


def median_above_power_db(averages: int) -> float:
    """How far the median of the displayed noise sits above the noise power, dB."""
    n = max(1, int(averages))
    if n == 1:
        return 10.0 * math.log10(math.log(2.0)) + _LOG_BIAS_DB
    return _LOG_EXP_SKEWNESS * _LOG_STD_DB / (6.0 * n)


@dataclass(frozen=True)
class NoiseFloor:
    """An estimated floor: ``dbm`` (None when unknown), the points used, and why unknown."""

    dbm: float | None
    points_used: int
    reason: str = ""


def estimate_noise_floor(
    trace_dbm: ArrayLike,
    freqs_hz: ArrayLike,
    rbw_hz: float,
    known_hz: Iterable[float],
    averages: int = 1,
    mask_half_width_rbw: float = MASK_HALF_WIDTH_RBW,
    min_points: int = MIN_FLOOR_POINTS,
) -> NoiseFloor:
    """The noise power of a trace away from every known line, dBm (None if too few points).

    ``known_hz``: every line the plan expects in the span, the reading's own product
    included; a window of ±``mask_half_width_rbw`` RBWs around each is left out.
    """
    trace = np.asarray(trace_dbm, dtype=float)
    freqs = np.asarray(freqs_hz, dtype=float)
    keep = np.isfinite(trace)
    half = mask_half_width_rbw * rbw_hz
    for f in known_hz:
        if math.isfinite(f):
            keep &= np.abs(freqs - f) > half
    used = int(np.count_nonzero(keep))
    if used < min_points:
        return NoiseFloor(
            None, used,
            f"only {used} trace points lie more than {mask_half_width_rbw:g} RBW from every "
            f"known line (at least {min_points} needed): widen the span or narrow the RBW",
        )
    return NoiseFloor(float(np.median(trace[keep])) - median_above_power_db(averages), used)
