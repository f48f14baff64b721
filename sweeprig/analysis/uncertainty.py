"""Measurement uncertainty of the figures, combined the way the GUM does it.

The GUM (JCGM 100:2008, "Evaluation of measurement data — Guide to the expression of
uncertainty in measurement") combines the standard uncertainties u(x_i) of the input
quantities of a measurement model with their sensitivity coefficients c_i = ∂f/∂x_i by root
sum of squares (its equation (10), uncorrelated inputs):

    u_c(y) = sqrt( Σ (c_i · u(x_i))² )

and states an expanded uncertainty U = k · u_c with a coverage factor k (section 6; k = 2 for
a coverage probability of about 95 % when u_c is close to normally distributed, 6.3.3).

A specification stated as "± a" limits becomes a standard uncertainty by its distribution:
rectangular u = a/√3 (GUM 4.3.7), triangular u = a/√6 (GUM 4.3.9), U-shaped (arcsine)
u = a/√2 (the usual model of mismatch with unknown phase; EA-4/02 M: 2013, from memory),
or a normal one stated at k = 2, u = a/2. Type A terms (a fit's scatter) are standard
uncertainties already.

Everything here is in dB: each figure is a sum or difference of dB levels (a gain is
P_IF − P_RF, an intercept P_in + (P_fund − P_IMn)/(n − 1)), so the sensitivity coefficients
are the constants of those sums. The terms of a budget
(:func:`sweeprig.analysis.budget_groups.figure_budget`):

* **input level**: the level at the DUT's input plane. Uncalibrated it is the source's level
  accuracy plus the typed path loss (``input_level``); calibrated it is the power meter's
  accuracy and the calibration's measured repeatability.
* **output level**: the analyzer's absolute amplitude accuracy and the typed output path loss;
  calibrated, the power meter's accuracy (the analyzer is referred to it).
* **display linearity** of the analyzer, for levels compared on one analyzer (a product
  against its carrier).
* **mismatch** at each DUT plane: limits 20·log10(1 ± |Γs|·|ΓL|) (e.g. Pozar, *Microwave
  Engineering*, mismatch uncertainty; from memory), U-shaped.
* **noise**: a product read a few dB above the analyzer's noise is raised by the noise power,
  by at most 10·log10(1 + 10^(−SNR/10)) dB (power addition of uncorrelated signals);
  one-sided, taken as rectangular of that half-width (common practice, no source).
* **noise scatter** (Type A, per reading): one log-detected reading of a sine in noise
  scatters about its mean (:func:`noise_scatter_db`), by (20/ln 10)·sqrt(1/(2ρ)) dB at a
  signal-to-noise power ratio ρ, divided by √(averages). A single-point figure takes it with
  the figure's sensitivity coefficient to that reading; a fitted figure does not: its fit
  term is the observed scatter of its points, which already holds this one (counting both
  would count it twice), unless the fit has too few points for a term of its own.
* **fit**: for fitted figures, the regression's own standard uncertainty (Type A): the
  standard error of each constrained line's offset, s/√N, propagated to the intercept; for
  P_xdB, the standard error of the small-signal gain divided by the local slope of the
  compression curve.

Figures that are bounds ("< X", "> X"), not numbers, or not in dB (currents, slopes) have no
budget. This module is pure: specifications come in as :class:`InstrumentSpecs`.
"""

from __future__ import annotations

import functools
import math
import sys
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any, Literal

import numpy as np
import pandas as pd

from sweeprig.analysis.figures import Figure
from sweeprig.analysis.writable_twin import writable_twin

Shape = Literal["rectangular", "triangular", "u-shaped", "normal-k2", "standard"]

#: Divisor that turns a stated half-width into a standard uncertainty, per distribution.
#: JCGM 100:2008 4.3.7 (rectangular, √3), 4.3.9 (triangular, √6); U-shaped √2 (EA-4/02 M,
#: from memory); a normal distribution stated at k = 2 (GUM 6.2.1), 2; a standard
#: uncertainty already, 1.
DIVISORS: Mapping[str, float] = {
    "rectangular": math.sqrt(3.0),
    "triangular": math.sqrt(6.0),
    "u-shaped": math.sqrt(2.0),
    "normal-k2": 2.0,
    "standard": 1.0,
}

#: The coverage factor of every expanded uncertainty sweeprig states (GUM 6.3.3: k = 2 for
#: about 95 % coverage).
COVERAGE_FACTOR = 2.0

#: Where a default specification comes from: said beside it in every budget.
ASSUMED = "default (assumption: typical data-sheet value, no source)"


def standard_uncertainty(half_width: float, shape: str) -> float:
    """The standard uncertainty of a quantity known to lie within ± ``half_width`` with
    distribution ``shape`` (see :data:`DIVISORS`)."""
    if shape not in DIVISORS:
        raise ValueError(f"unknown distribution {shape!r}; one of {', '.join(DIVISORS)}")
    return abs(float(half_width)) / DIVISORS[shape]


def mismatch_limits_db(gamma_source: float, gamma_load: float) -> tuple[float, float]:
    """The mismatch-uncertainty limits in dB, (lower, upper) = 20·log10(1 ∓ |Γs|·|ΓL|)
    (e.g. Pozar, *Microwave Engineering*; from memory). The lower one is negative."""
    product = abs(float(gamma_source)) * abs(float(gamma_load))
    if product >= 1.0:
        return (-math.inf, 20.0 * math.log10(1.0 + product))
    return (20.0 * math.log10(1.0 - product), 20.0 * math.log10(1.0 + product))


def mismatch_half_width_db(gamma_source: float, gamma_load: float) -> float:
    """The larger magnitude of :func:`mismatch_limits_db` (the limits are not symmetric in
    dB: the lower one is the larger; using it is the safe side)."""
    low, high = mismatch_limits_db(gamma_source, gamma_load)
    return max(-low, high)


#: The standard deviation of one log-detected reading of noise alone, dB: the power of a
#: Rayleigh envelope is exponentially distributed, and for E ~ Exp(1) std[ln E] = π/√6
#: (standard result for the log of an exponential variate), so (10/ln 10)·π/√6 = 5.57 dB.
#: The scatter of |A + n| in dB falls from it as A grows: the ceiling of
#: :func:`noise_scatter_db`.
LOG_NOISE_STD_DB = 10.0 / math.log(10.0) * math.pi / math.sqrt(6.0)


def noise_scatter_db(snr_db: float, averages: int | None = 1) -> float:
    """The standard deviation (dB) of one displayed reading of a sine read ``snr_db`` above
    the analyzer's noise (level − noise floor, both as displayed, dB), averaged over
    ``averages`` sweeps.

    Derivation (small-noise expansion). The detector sees the envelope |A + n| of the sine's
    phasor A (real, power A²) and the complex Gaussian noise n in the resolution bandwidth,
    E|n|² = N, so Re n ~ N(0, N/2). With ρ = A²/N ≫ 1,

        20·log10|A + n| = 20·log10 A + (20/ln 10)·ln|1 + n/A|
                        ≈ 20·log10 A + (20/ln 10)·Re(n)/A        (ln|1 + z| ≈ Re z),

    so the reading scatters by σ = (20/ln 10)·sqrt(N/2)/A = (20/ln 10)·sqrt(1/(2ρ)) dB; the
    quadrature part Im(n) changes |A + n| only to second order. A mean of ``averages``
    independent sweeps scatters by σ/√averages (JCGM 100:2008 4.2.3). The displayed level
    holds the noise power too, so ρ = 10^(SNR/10) − 1 (the signal's power alone over the
    noise's). Within 3 % of a Monte Carlo of |A + n| from 10 dB up, within 7 % from 3 dB;
    below that the expansion fails and the scatter tends to that of noise alone,
    :data:`LOG_NOISE_STD_DB`, which is the ceiling here (the Monte Carlo in
    tests/analysis/test_uncertainty.py). NaN SNR: 0 (no floor recorded, nothing to say).
    """
    if math.isnan(snr_db) or snr_db == math.inf:
        return 0.0
    n = max(1, int(averages)) if averages is not None else 1
    rho = 10.0 ** (snr_db / 10.0) - 1.0 if snr_db < 300.0 else math.inf
    one = (LOG_NOISE_STD_DB if rho <= 0.0
           else min(20.0 / math.log(10.0) * math.sqrt(1.0 / (2.0 * rho)), LOG_NOISE_STD_DB))
    return one / math.sqrt(n)


def noise_bias_db(snr_db: float) -> float:
    """How much the analyzer's noise raises a product read ``snr_db`` above it, at most:
    10·log10(1 + 10^(−SNR/10)) (powers of uncorrelated signals add)."""
    if not math.isfinite(snr_db):
        return 0.0
    return 10.0 * math.log10(1.0 + 10.0 ** (-snr_db / 10.0))


# ---------------------------------------------------------------------------------------------
# the budget


@dataclass(frozen=True, slots=True)
class Contribution:
    """One line of an uncertainty budget.

    ``half_width_db`` is the stated limit ± a (or, for ``shape="standard"``, the standard
    uncertainty itself); ``sensitivity`` the coefficient c_i of the figure's model;
    ``kind`` "A" (evaluated from the measured data) or "B" (from specifications);
    ``origin`` where the number came from (a bench-file key, a default marked as an
    assumption, or "measured").
    """

    name: str
    what: str
    half_width_db: float
    shape: str
    sensitivity: float
    kind: Literal["A", "B"] = "B"
    origin: str = ""
    #: |c_i| · u(x_i), dB: worked out once when the line is made (a large run's budgets
    #: are read many times over: totals, worst sides, reports).
    contribution_db: float = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        # abs(c_i) · standard_uncertainty(a, shape), written out (a large run makes hundreds
        # of thousands of lines): the same operations, so the same number
        divisor = DIVISORS.get(self.shape)
        if divisor is None:
            raise ValueError(f"unknown distribution {self.shape!r}; one of "
                             f"{', '.join(DIVISORS)}")
        object.__setattr__(self, "contribution_db",
                           abs(self.sensitivity) * (abs(float(self.half_width_db)) / divisor))

    @property
    def standard_db(self) -> float:
        """u(x_i), dB."""
        return standard_uncertainty(self.half_width_db, self.shape)

    def as_dict(self) -> dict[str, object]:
        return {
            "name": self.name, "what": self.what, "half_width_db": self.half_width_db,
            "distribution": self.shape, "divisor": DIVISORS[self.shape],
            "standard_uncertainty_db": self.standard_db, "sensitivity": self.sensitivity,
            "contribution_db": self.contribution_db, "type": self.kind, "origin": self.origin,
        }


#: How every budget is combined, in words (reports, ``figures.json``).
BUDGET_METHOD = "JCGM 100:2008 (GUM): root sum of squares of c_i·u(x_i), uncorrelated"


@dataclass(frozen=True, slots=True)
class Budget:
    """A figure's uncertainty budget: its contributions, combined by root sum of squares
    (JCGM 100:2008 eq. (10), uncorrelated), expanded with ``coverage_factor``."""

    contributions: tuple[Contribution, ...]
    coverage_factor: float = COVERAGE_FACTOR
    #: u_c, dB: combined once when the budget is made.
    combined_db: float = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        # each line's c_i·u(x_i) is a float worked out when it was made
        object.__setattr__(self, "combined_db",
                           math.hypot(*[c.contribution_db for c in self.contributions]))

    @property
    def expanded_db(self) -> float:
        """U = k · u_c, dB."""
        return self.coverage_factor * self.combined_db

    def as_dict(self) -> dict[str, object]:
        return {
            "method": BUDGET_METHOD,
            "combined_standard_uncertainty_db": self.combined_db,
            "coverage_factor": self.coverage_factor,
            "expanded_uncertainty_db": self.expanded_db,
            "contributions": [c.as_dict() for c in self.contributions],
        }


#: :func:`made_line` fills a writable twin of the frozen class
#: (:mod:`sweeprig.analysis.writable_twin`), about ten times faster than the dataclasses'
#: ``__init__`` (a large run makes hundreds of thousands of lines); None: the constructors.
_OpenContribution = writable_twin(Contribution)
_OPEN_CLASSES = _OpenContribution is not None


def made_line(name: str, what: str, half_width_db: float, shape: str, sensitivity: float,
              kind: Literal["A", "B"], origin: str) -> Contribution:
    """``Contribution(name, what, half_width_db, shape, sensitivity, kind, origin)``: the
    same line (``contribution_db`` worked out by the same operations), made faster."""
    if not _OPEN_CLASSES or shape not in DIVISORS:
        return Contribution(name, what, half_width_db, shape, sensitivity, kind, origin)
    line = _OpenContribution()
    line.name = name
    line.what = what
    line.half_width_db = half_width_db
    line.shape = shape
    line.sensitivity = sensitivity
    line.kind = kind
    line.origin = origin
    line.contribution_db = abs(sensitivity) * (abs(float(half_width_db)) / DIVISORS[shape])
    line.__class__ = Contribution  # type: ignore[assignment]
    return line  # type: ignore[return-value]


def combine(contributions_db: Iterable[float]) -> float:
    """Root sum of squares of the terms c_i·u(x_i) (JCGM 100:2008 eq. (10))."""
    # math.hypot of many arguments is the correctly rounded root sum of squares (Python
    # 3.10+), in C: a large run combines hundreds of thousands of budgets.
    return math.hypot(*(float(v) for v in contributions_db))


# ---------------------------------------------------------------------------------------------
# specifications


@dataclass(frozen=True, slots=True)
class Spec:
    """One instrument specification: ± ``half_width_db`` with distribution ``shape``, and
    where it came from."""

    half_width_db: float
    shape: str = "rectangular"
    origin: str = ASSUMED


@dataclass(frozen=True)
class InstrumentSpecs:
    """The specifications a budget uses (the bench file's ``[uncertainty]`` table; every
    default is an assumption and says so in the budget).

    ``input_level``: level at the DUT's input planes without a calibration (source level
    accuracy and the typed path loss together). ``output_path``: the typed output path loss
    without a calibration. ``analyzer_absolute``: the analyzer's absolute amplitude accuracy.
    ``analyzer_linearity``: its display (scale) linearity for levels compared on it.
    ``power_meter``: power meter and sensor accuracy (calibration factor included).
    ``bench_match``/``part_match``: |Γ| of the bench's connections and of the part's ports.
    """

    input_level: Spec = Spec(1.0)
    output_path: Spec = Spec(0.3)
    analyzer_absolute: Spec = Spec(0.5)
    analyzer_linearity: Spec = Spec(0.1)
    power_meter: Spec = Spec(0.15)
    bench_match: float = 0.05
    part_match: float = 0.2
    match_origin: str = ASSUMED
    coverage_factor: float = COVERAGE_FACTOR


@dataclass(frozen=True)
class CalibrationState:
    """What a calibration corrected: the bench connections whose loss it measured (source
    connections ``rf``, ``rf2``, ``lo`` by power meter at the DUT planes; output paths
    ``if``, ``rf_port``, ``lo_port`` referred to the power meter), and its measured
    repeatability (a standard deviation, dB; None when not measured)."""

    connections: frozenset[str] = frozenset()
    repeatability_db: float | None = None
    origin: str = ""

    def covers(self, connections: tuple[str, ...]) -> bool:
        """True when every one of ``connections`` was calibrated (and there is one)."""
        return bool(connections) and all(c in self.connections for c in connections)


UNCALIBRATED = CalibrationState()


# ---------------------------------------------------------------------------------------------
# the model of each figure


@dataclass(frozen=True, slots=True)
class _Model:
    """How a figure depends on the measured levels: sensitivity to the input level, the
    output level and the analyzer's display linearity; the reading whose noise matters (and
    its sensitivity); the fit, if any (``"intercept"`` with the product's order, or
    ``"compression"``, ``"linear"`` for a mean of gains)."""

    input_c: float = 0.0
    output_c: float = 0.0
    linearity_c: float = 0.0
    noise_reading: str | None = None
    noise_c: float = 0.0
    #: Further readings whose noise matters, with their sensitivities (a difference of two
    #: products: both of them).
    noise_also: tuple[tuple[str, float], ...] = ()
    fit: str | None = None
    order: int = 0
    product: str | None = None
    relative_c: float = 0.0  # two uncorrelated gain readings (flatness): √2
    #: The bench connections the input and output levels went through.
    input_via: tuple[str, ...] = ("rf",)
    output_via: tuple[str, ...] = ("if",)


def _intercept(input_c: float, output_c: float, order: int, side: str | None,
               single: bool) -> _Model:
    prod = f"im{order}_{side}" if side else None
    return _Model(input_c=input_c, output_c=output_c, linearity_c=1.0 / (order - 1),
                  noise_reading=prod, noise_c=-1.0 / (order - 1),
                  fit=None if single else "intercept", order=order, product=prod,
                  input_via=("rf", "rf2"))


def _models() -> dict[str, _Model]:
    out: dict[str, _Model] = {
        "conversion_gain": _Model(-1.0, 1.0, noise_reading="if", noise_c=1.0),
        "small_signal_gain": _Model(-1.0, 1.0, noise_reading="if", noise_c=1.0, fit="linear"),
        "gain_flatness": _Model(noise_reading="if", noise_c=1.0, relative_c=math.sqrt(2.0)),
        "lo_power_for_gain": _Model(input_c=1.0, input_via=("lo",)),
        "image_rejection": _Model(linearity_c=1.0, noise_reading="image", noise_c=1.0),
        # an IM3 product against its carrier moves 2 dB per dB of drive (P_IM3 − P_fund =
        # −2·(IIP3 − P_in): the two-tone relation, Razavi, RF Microelectronics; Pozar): an
        # error of the tones' level at the DUT is twice an error of the dBc figure (both
        # tones' errors taken as one, the larger case)
        "im3_low": _Model(input_c=2.0, linearity_c=1.0, noise_reading="im3_low", noise_c=1.0,
                          input_via=("rf", "rf2")),
        "im3_high": _Model(input_c=2.0, linearity_c=1.0, noise_reading="im3_high",
                           noise_c=1.0, input_via=("rf", "rf2")),
        "im3_asymmetry": _Model(linearity_c=math.sqrt(2.0), noise_reading="im3_high",
                                noise_c=1.0, noise_also=(("im3_low", -1.0),)),
        "spur_dbc": _Model(linearity_c=1.0, noise_reading="spur", noise_c=1.0),
        "spur_excluded_dbc": _Model(linearity_c=1.0, noise_reading="spur", noise_c=1.0),
        "spur_dbm": _Model(output_c=1.0, noise_reading="spur", noise_c=1.0),
        "lo_if_isolation": _Model(1.0, -1.0, noise_reading="lo_at_if", noise_c=-1.0,
                                  input_via=("lo",)),
        "lo_rf_isolation": _Model(1.0, -1.0, noise_reading="lo_at_rf", noise_c=-1.0,
                                  input_via=("lo",), output_via=("rf_port",)),
        "rf_if_isolation": _Model(1.0, -1.0, noise_reading="rf_at_if", noise_c=-1.0),
        "output_psat": _Model(output_c=1.0),
        # an upconverter's own (sweeprig.analysis.direction): the LO's level at the output,
        # and the wanted output against the LO or the unwanted sideband on one analyzer
        "lo_leakage": _Model(output_c=1.0, noise_reading="lo_at_if", noise_c=1.0),
        "lo_suppression": _Model(linearity_c=1.0, noise_reading="lo_at_if", noise_c=-1.0,
                                 noise_also=(("if", 1.0),)),
        "sideband_suppression": _Model(linearity_c=1.0, noise_reading="sideband",
                                       noise_c=-1.0, noise_also=(("if", 1.0),)),
    }
    for tag in ("p0p1db", "p1db", "p3db"):
        out[f"input_{tag}"] = _Model(input_c=1.0, fit="compression")
        out[f"output_{tag}"] = _Model(output_c=1.0, fit="compression")
    for order in (3, 2):
        for side in ("low", "high"):
            out[f"iip{order}_{side}"] = _intercept(1.0, 0.0, order, side, single=False)
            out[f"iip{order}_point_{side}"] = _intercept(1.0, 0.0, order, side, single=True)
            if order == 3:
                out[f"oip3_{side}"] = _intercept(0.0, 1.0, order, side, single=False)
                out[f"oip3_point_{side}"] = _intercept(0.0, 1.0, order, side, single=True)
    return out


MODELS: Mapping[str, _Model] = _models()

#: Headline figures that are the worse of two sides: their budget is that side's budget.
WORST_OF: Mapping[str, tuple[str, str]] = {
    "iip3": ("iip3_low", "iip3_high"),
    "oip3": ("oip3_low", "oip3_high"),
    "iip2": ("iip2_low", "iip2_high"),
}

#: The figures a :data:`WORST_OF` headline takes its budget from.
_SIDE_NAMES = frozenset(side for pair in WORST_OF.values() for side in pair)

_DB_UNITS = frozenset({"dB", "dBm", "dBc"})


# ---------------------------------------------------------------------------------------------
# levels of the captures, per point and reading


class PointLevels:
    """Per reading of a capture table: its run-store points in order, with the level and
    noise floor (dBm) and sweeps averaged of each; and the input power of each point. The
    readings of the attenuation repeats are left out; of two rows of one point and reading
    the later is kept; an m×n spur is kept under ``"spur.MxN"`` as well as ``"spur"``
    (several spurs share a point). Held as numpy columns (a large run has millions of
    readings), each reading's table made on first use."""

    def __init__(self, captures: pd.DataFrame) -> None:
        self._tables: dict[str, tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]] = {}
        self._rows: dict[str, np.ndarray] = {}
        empty = captures.empty or "reading" not in captures
        # the rows a budget reads (the attenuation repeats left out), taken column by column:
        # a large run's table is not copied to read a few of its columns
        keep = (None if empty or "atten_check" not in captures
                else ~captures["atten_check"].fillna(False).astype(bool).to_numpy())

        def column(values: np.ndarray) -> np.ndarray:
            return values if keep is None else values[keep]

        def floats(name: str) -> np.ndarray:
            return column(captures[name].to_numpy(dtype=float))

        count = 0 if empty else (len(captures) if keep is None else int(keep.sum()))
        self._point = (np.zeros(0, dtype=np.int64) if empty
                       else column(captures["point"].to_numpy(dtype=np.int64)))
        self._level = np.zeros(0) if empty else floats("level_dbm")
        self._floor = (floats("noise_floor_dbm")
                       if not empty and "noise_floor_dbm" in captures else np.full(count, math.nan))
        averages = (column(pd.to_numeric(captures["averages"], errors="coerce")
                           .to_numpy(dtype=float))
                    if not empty and "averages" in captures else np.full(count, math.nan))
        usable = np.isfinite(averages) & (averages >= 1.0)
        self._averages = np.where(usable, averages, 1.0).astype(np.int64)  # int(): truncated
        # the input power of each point: its last row's
        from sweeprig.analysis.captures import last_rows

        self._input_at, last = last_rows(self._point)
        self._input = np.zeros(0) if empty else floats("rf_power_dbm")[last]
        if empty:
            return
        reading = captures["reading"] if keep is None else captures["reading"][keep]
        codes, names = pd.factorize(
            reading if isinstance(reading.dtype, pd.CategoricalDtype) else reading.astype(str),
            sort=False)
        codes = np.asarray(codes)
        order = np.argsort(codes, kind="stable")
        bounds = np.searchsorted(codes[order], np.arange(len(names) + 1))
        for k, name in enumerate(names.tolist()):
            self._rows[name] = order[bounds[k]:bounds[k + 1]]
        spur = self._rows.get("spur")
        if spur is not None and spur.size and "m" in captures and "n" in captures:
            m = column(pd.to_numeric(captures["m"], errors="coerce").to_numpy(dtype=float))[spur]
            n = column(pd.to_numeric(captures["n"], errors="coerce").to_numpy(dtype=float))[spur]
            known = np.isfinite(m) & np.isfinite(n)
            pairs = np.column_stack([np.trunc(m[known]), np.trunc(n[known])])
            if pairs.size:
                distinct, inverse = np.unique(pairs, axis=0, return_inverse=True)
                inverse = inverse.reshape(-1)
                at = spur[known]
                for k, (mm, nn) in enumerate(distinct.tolist()):
                    self._rows[spur_key(mm, nn)] = at[inverse == k]

    @classmethod
    def from_captures(cls, captures: pd.DataFrame) -> PointLevels:
        """The levels of a capture table (:mod:`sweeprig.analysis.captures`)."""
        return cls(captures)

    def _table(self, reading: str) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """(points in order, level dBm, level − floor dB, averages) of ``reading``."""
        table = self._tables.get(reading)
        if table is None:
            rows = self._rows.get(reading, np.zeros(0, dtype=np.int64))  # capture order
            last = rows[::-1]  # the later row of a point wins: its first in reverse order
            at, first = np.unique(self._point[last], return_index=True)
            keep = last[first]
            # level − floor as one IEEE subtraction per reading
            table = self._tables[reading] = (at, self._level[keep],
                                             self._level[keep] - self._floor[keep],
                                             self._averages[keep])
        return table

    def _find(self, at: np.ndarray, points: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        if at.size == 0:
            return np.zeros(points.size, dtype=np.int64), np.zeros(points.size, dtype=bool)
        pos = np.minimum(np.searchsorted(at, points), at.size - 1)
        return pos, at[pos] == points

    def snr_and_averages(self, reading: str, points: np.ndarray
                         ) -> tuple[np.ndarray, np.ndarray]:
        """(level − floor dB, averages) of ``reading`` at each of ``points`` (an int64
        array); NaN and 1 where the point has no such reading."""
        at, _, snr, avg = self._table(reading)
        pos, found = self._find(at, points)
        if at.size == 0:
            return np.full(points.size, math.nan), np.ones(points.size, dtype=np.int64)
        return np.where(found, snr[pos], math.nan), np.where(found, avg[pos], 1)

    def levels_at(self, reading: str, points: np.ndarray) -> np.ndarray:
        """The level (dBm) of ``reading`` at each of ``points`` (an int64 array, any shape);
        NaN where none."""
        at, level, _, _ = self._table(reading)
        if at.size == 0:
            return np.full(points.shape, math.nan)
        pos, found = self._find(at, points)
        return np.where(found, level[pos], math.nan)

    def inputs_at(self, points: np.ndarray) -> np.ndarray:
        """The input power (dBm) of each of ``points`` (an int64 array, any shape); NaN
        where the point is unknown."""
        if self._input_at.size == 0:
            return np.full(points.shape, math.nan)
        pos, found = self._find(self._input_at, points)
        return np.where(found, self._input[pos], math.nan)

    def levels_dbm(self, points: Sequence[int], reading: str) -> list[float]:
        """The level (dBm) of ``reading`` at each of ``points``; NaN where none."""
        return self.levels_at(reading, np.asarray(points, dtype=np.int64)).tolist()

    def inputs_dbm(self, points: Sequence[int]) -> list[float]:
        """The input power (dBm) of each of ``points``; NaN where the point is unknown."""
        return self.inputs_at(np.asarray(points, dtype=np.int64)).tolist()

    def min_snr_db(self, points: Sequence[int], reading: str) -> float:
        """The lowest level − noise floor of ``reading`` over ``points`` (NaN: unknown)."""
        snr, _ = self.snr_and_averages(reading, np.asarray(points, dtype=np.int64))
        snr = snr[np.isfinite(snr)]
        return float(snr.min()) if snr.size else math.nan

    def worst_scatter(self, points: Sequence[int], reading: str
                      ) -> tuple[float, float, int] | None:
        """(scatter dB, SNR dB, averages) of the reading of ``reading`` over ``points`` that
        scatters most by :func:`noise_scatter_db` (None: no reading with a noise floor)."""
        snrs, avgs = self.snr_and_averages(reading, np.asarray(points, dtype=np.int64))
        return worst_scatter_of(snrs.tolist(), avgs.tolist())


def worst_scatter_of(snrs: Sequence[float], averages: Sequence[int]
                     ) -> tuple[float, float, int] | None:
    """(scatter dB, SNR dB, averages) of the reading among (``snrs`` dB, ``averages``) that
    scatters most by :func:`noise_scatter_db`, the first of equals (None: no SNR known)."""
    worst: tuple[float, float, int] | None = None
    for snr, avg in zip(snrs, averages, strict=True):
        if math.isnan(snr):
            continue
        sigma = noise_scatter_db(snr, avg)
        if worst is None or sigma > worst[0]:
            worst = (sigma, snr, avg)
    return worst


def spur_key(m: float, n: float) -> str:
    """The reading name of an m×n spur: ``"spur.MxN"``."""
    return f"spur.{int(m)}x{int(n)}"


#: The readings as a budget names them, in words that hold for either conversion direction
#: (the capture table names ports by position: ``if`` is the output port).
_READING_WORDS: Mapping[str, str] = {
    "if": "the wanted output",
    "lo_at_if": "the LO at the output port",
    "lo_at_rf": "the LO at the input port",
    "rf_at_if": "the input at the output port",
    "image": "the image product",
    "sideband": "the unwanted sideband",
    "spur": "the m×n spur",
    "im3_low": "the lower IM3 product",
    "im3_high": "the upper IM3 product",
    "im2_low": "the lower IM2 product",
    "im2_high": "the upper IM2 product",
}


def _plain(reading: str) -> str:
    """A reading as budgets state it (an m×n spur: "the m×n spur")."""
    name = "spur" if reading.startswith("spur.") else reading
    return _READING_WORDS.get(name, name)


def _noise_reading(model: _Model, figure: Figure) -> str | None:
    """The reading whose noise matters for ``figure``: an m×n spur's own (from the figure's
    conditions), not the last spur read at its point."""
    return noise_reading_at(model, figure.conditions)


def noise_reading_at(model: _Model, conditions: Mapping[str, object]) -> str | None:
    """:func:`_noise_reading` of a figure of ``model`` with ``conditions``."""
    reading = model.noise_reading
    if reading == "spur":
        m, n = conditions.get("m"), conditions.get("n")
        if isinstance(m, int | float) and isinstance(n, int | float):
            return spur_key(m, n)
    return reading


def intercept_fit_u_db(input_dbm: Sequence[float], fund_dbm: Sequence[float],
                       product_dbm: Sequence[float], order: int) -> float:
    """Type A standard uncertainty of a constrained-fit intercept IIPn = (a − b)/(n − 1),
    a = mean(P_fund − P_in), b = mean(P_IMn − n·P_in): u = sqrt(u(a)² + u(b)²)/(n − 1) with
    u(a) = s_a/√N (JCGM 100:2008 4.2.3, the experimental standard deviation of the mean),
    over the points where both are known. NaN with fewer than 2 points."""
    return intercept_fit_u_rows(*(np.asarray(v, dtype=float).reshape(1, -1)
                                  for v in (input_dbm, fund_dbm, product_dbm)), order)[0]


def intercept_fit_u_rows(input_dbm: np.ndarray, fund_dbm: np.ndarray,
                         product_dbm: np.ndarray, order: int) -> list[float]:
    """:func:`intercept_fit_u_db` of each row of the arrays (shape (n, m)), dB."""
    a = fund_dbm - input_dbm
    b = product_dbm - order * input_dbm
    ok = np.isfinite(a) & np.isfinite(b)
    enough = (ok.sum(axis=1) >= 2).tolist()
    return [math.hypot(u_a, u_b) / (order - 1) if many else math.nan
            for u_a, u_b, many in zip(std_of_mean_rows(a, ok).tolist(),
                                      std_of_mean_rows(b, ok).tolist(), enough, strict=True)]


def mean_u_db(values: Sequence[float]) -> float:
    """Type A: the experimental standard deviation of the mean, s/√N (JCGM 100:2008 4.2.3).
    NaN with fewer than 2 finite values."""
    v = np.asarray(values, dtype=float).reshape(1, -1)
    return float(std_of_mean_rows(v, np.isfinite(v))[0])


# ---------------------------------------------------------------------------------------------
# budgets


@functools.lru_cache(maxsize=256)
def _cached_level_terms(model: _Model, specs: InstrumentSpecs, cal: CalibrationState
                        ) -> tuple[Contribution, ...]:
    """:func:`_level_terms`, built once per model, specifications and calibration (they are
    the same for every figure of a name in a run; a large run has hundreds of thousands)."""
    return tuple(_level_terms(model, specs, cal))


def _level_terms(model: _Model, specs: InstrumentSpecs, cal: CalibrationState
                 ) -> list[Contribution]:
    out: list[Contribution] = []
    pm = specs.power_meter
    input_cal = cal.covers(model.input_via)
    output_cal = cal.covers(model.output_via)
    if model.input_c:
        if input_cal:
            out.append(Contribution("input_power_meter", "power meter and sensor at the DUT "
                                    "input plane (source calibration)", pm.half_width_db,
                                    pm.shape, model.input_c, "B", pm.origin))
        else:
            s = specs.input_level
            out.append(Contribution("input_level", "source level and typed path loss at the "
                                    "DUT input (not calibrated)", s.half_width_db, s.shape,
                                    model.input_c, "B", s.origin))
        out.append(_mismatch("input_mismatch", "bench source ↔ part input", specs,
                             model.input_c))
    if model.output_c:
        if output_cal:
            out.append(Contribution("output_power_meter", "power meter behind the receiver "
                                    "path calibration", pm.half_width_db, pm.shape,
                                    model.output_c, "B", pm.origin))
        else:
            a, p = specs.analyzer_absolute, specs.output_path
            out.append(Contribution("analyzer_absolute", "analyzer absolute amplitude "
                                    "accuracy", a.half_width_db, a.shape, model.output_c, "B",
                                    a.origin))
            out.append(Contribution("output_path", "typed output path loss (not calibrated)",
                                    p.half_width_db, p.shape, model.output_c, "B", p.origin))
        out.append(_mismatch("output_mismatch", "part output ↔ bench load", specs,
                             model.output_c))
    c_cal = math.hypot(model.input_c if input_cal else 0.0,
                       model.output_c if output_cal else 0.0)
    if c_cal and cal.repeatability_db is not None and math.isfinite(cal.repeatability_db):
        out.append(Contribution("calibration_repeatability", "calibration repeatability "
                                "(measured by repeating it)", cal.repeatability_db,
                                "standard", c_cal, "A", cal.origin or "measured"))
    if model.linearity_c:
        lin = specs.analyzer_linearity
        out.append(Contribution("analyzer_linearity", "analyzer display linearity "
                                "(levels compared on one analyzer)", lin.half_width_db,
                                lin.shape, model.linearity_c, "B", lin.origin))
    if model.relative_c:
        lin = specs.analyzer_linearity
        out.append(Contribution("analyzer_linearity", "analyzer display linearity "
                                "(levels compared on one analyzer)", lin.half_width_db,
                                lin.shape, 1.0, "B", lin.origin))
        level = specs.power_meter if input_cal else specs.input_level
        out.append(Contribution("input_level_flatness", "input level error at two "
                                "frequencies, taken as uncorrelated", level.half_width_db,
                                level.shape, model.relative_c, "B", level.origin))
    return out


def _mismatch(name: str, what: str, specs: InstrumentSpecs, c: float) -> Contribution:
    return Contribution(name, f"mismatch, {what}: 20·log10(1 ± |Γs||ΓL|), |Γs| = "
                        f"{specs.bench_match:g}, |ΓL| = {specs.part_match:g}",
                        mismatch_half_width_db(specs.bench_match, specs.part_match),
                        "u-shaped", c, "B", specs.match_origin)


def noise_line(lines: dict[tuple, Any], reading: str, snr_db: float, c: float
               ) -> Contribution:
    """The analyzer-noise line of ``reading`` at its lowest SNR ``snr_db`` (finite) with
    sensitivity ``c``: made once per distinct (reading, SNR, c) and kept in ``lines``."""
    key = ("noise", reading, snr_db, c)
    line = lines.get(key)
    if line is None:
        line = lines[key] = made_line(
            "noise", sys.intern(f"analyzer noise under {_plain(reading)} (lowest SNR "
                                f"{snr_db:.1f} dB)"), noise_bias_db(snr_db),
            "rectangular", c, "B", _NOISE_ORIGIN)
    return line


_NOISE_ORIGIN = ("measured noise floor; one-sided bias taken as rectangular (common "
                 "practice, no source)")
_SCATTER_ORIGIN = ("measured level and noise floor; small-noise expansion of "
                   "20·log10|A + n|")


def noise_scatter_line(lines: dict[tuple, Any], reading: str, sigma_db: float,
                       snr_db: float, averages: int, c: float) -> Contribution:
    """The Type A line of one reading of ``reading`` scattering by ``sigma_db``
    (:func:`noise_scatter_db` of ``snr_db`` over ``averages`` sweeps) with sensitivity
    ``c``: made once per distinct set of those and kept in ``lines``."""
    key = ("noise_scatter", reading, sigma_db, snr_db, averages, c)
    line = lines.get(key)
    if line is None:
        line = lines[key] = _scatter_line(_plain(reading), sigma_db, snr_db, averages, c)
    return line


def _scatter_line(words: str, sigma_db: float, snr_db: float, averages: int, c: float
                  ) -> Contribution:
    return made_line(
        "noise_scatter", sys.intern(
            f"scatter of one reading of {words} in the analyzer noise "
            f"(SNR {snr_db:.1f} dB, {averages} sweep{'s' if averages > 1 else ''}): "
            "(20/ln 10)·sqrt(1/(2ρ))/√averages"), sigma_db, "standard", c, "A",
        _SCATTER_ORIGIN)


def compression_lines(figure: Figure, slope: float, specs: InstrumentSpecs,
                      small_signal_u: Mapping[tuple, float] | None) -> list[Contribution]:
    """A compression point is where the gain falls x dB below the small-signal gain: an
    error δ in that reference (its scatter, the display linearity across the compared
    levels) moves the crossing by δ / |dG/dP_in|, with ``slope`` the compression curve's
    local |dG/dP_in| between the two bracketing points (:func:`compression_slopes`; NaN:
    unknown), capped at 20 (a slope of 0.05 dB/dB)."""
    c = min(1.0 / slope, 20.0) if math.isfinite(slope) and slope > 0 else 1.0
    lin = specs.analyzer_linearity
    out = [Contribution("analyzer_linearity", "display linearity between the linear region "
                        "and the compressed level", lin.half_width_db, lin.shape, c, "B",
                        lin.origin)]
    u = (small_signal_u or {}).get(_condition_key(figure.conditions), math.nan)
    if math.isfinite(u):
        out.append(Contribution("fit", "scatter of the small-signal gain, through the "
                                f"compression slope {slope:.3g} dB/dB", u, "standard", c, "A",
                                "measured: standard deviation of the mean"))
    return out


def compression_slopes(inputs_dbm: np.ndarray, gains_db: np.ndarray) -> np.ndarray:
    """|dG/dP_in| (dB/dB) between the two points of each row of ``inputs_dbm`` and
    ``gains_db`` (shape (n, 2)); NaN where the inputs are equal, or a row has not two."""
    slope = np.full(inputs_dbm.shape[0], math.nan)
    if inputs_dbm.ndim != 2 or inputs_dbm.shape[1] != 2:
        return slope
    x0, x1 = inputs_dbm[:, 0], inputs_dbm[:, 1]
    apart = x1 != x0
    with np.errstate(all="ignore"):
        slope[apart] = np.abs((gains_db[apart, 1] - gains_db[apart, 0])
                              / (x1[apart] - x0[apart]))
    return slope


def _condition_key(conditions: Mapping[str, object]) -> tuple:
    return tuple(sorted((k, v) for k, v in conditions.items()))


def small_signal_gain_u(figures: Sequence[Figure], levels: PointLevels
                        ) -> dict[tuple, float]:
    """Per condition set (:func:`_condition_key`), the Type A standard uncertainty (dB) of
    its small-signal gain (:func:`mean_u_db` of the gains it was the mean of): the
    reference error a compression point's fit term takes."""
    gains = [f for f in figures if f.name == "small_signal_gain" and f.is_number]
    by_count: dict[int, list[int]] = {}
    for k, f in enumerate(gains):
        by_count.setdefault(len(f.points), []).append(k)
    u = np.full(len(gains), math.nan)
    for count, members in by_count.items():
        points = np.array([gains[k].points for k in members],
                          dtype=np.int64).reshape(len(members), count)
        g = levels.levels_at("if", points) - levels.inputs_at(points)
        u[members] = std_of_mean_rows(g, np.isfinite(g))
    out: dict[tuple, float] = {}
    for f, value in zip(gains, u.tolist(), strict=True):
        out[_condition_key(f.conditions)] = value
    return out


def std_of_mean_rows(values: np.ndarray, ok: np.ndarray) -> np.ndarray:
    """Per row of ``values`` (shape (n, m)), :func:`mean_u_db` of its values where ``ok``:
    s/√N, NaN under two; the same numbers as one row at a time (rows wholly ``ok`` as one
    array: numpy reduces each row alone, as it reduces one row)."""
    count = ok.sum(axis=1)
    out = np.full(values.shape[0], math.nan)
    whole = ok.all(axis=1) & (count >= 2)
    if whole.any():
        out[whole] = np.std(values[whole], axis=1, ddof=1) / np.sqrt(count[whole])
    for row in np.flatnonzero(~whole & (count >= 2)).tolist():
        out[row] = float(np.std(values[row][ok[row]], ddof=1)) / math.sqrt(int(count[row]))
    return out


def uncertainty_text(value: float, unit: str, expanded_db: float, digits: int = 2,
                     coverage_factor: float = COVERAGE_FACTOR) -> str:
    """``"12.49 ± 0.18 dB (k = 2)"``."""
    return (f"{value:.{digits}f} ± {expanded_db:.{digits}f} {unit} "
            f"(k = {coverage_factor:g})")
