"""A run's figures as fit observations: which figures the twin fit uses, and refusals.

An :class:`Observation` is one measured figure (its value in its unit) with the conditions
it was measured under (SI, keys of the capture table). Only plain numbers are used: a bound
(``< x``), a NaN, or a figure carrying a flag that says the number is not the part's
(:data:`DISQUALIFYING_FLAGS`) is left out, and :func:`observations_from_figures` says how
many were.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from types import MappingProxyType

from sweeprig.analysis import figures
from sweeprig.errors import InputError

#: Figure name → (unit, residual scale in that unit). The scale weighs the kinds against
#: each other in the least-squares sum: about half of the twin's accuracy target for the
#: kind (gain ±0.1 dB, P1dB ±0.3 dB, IIP3 ±0.5 dB, isolation ±1 dB; common practice, no
#: source), so that no kind swamps the others because its numbers are bigger.
FITTED_FIGURES: Mapping[str, tuple[str, float]] = MappingProxyType({
    "conversion_gain": ("dB", 0.05),
    "lo_drive_gain": ("dB", 0.05),
    "compression_gain": ("dB", 0.1),  # a sweep has many points: each weighs less
    "input_p1db": ("dBm", 0.15),
    "iip3_point_low": ("dBm", 0.25),
    "iip3_point_high": ("dBm", 0.25),
    # IM2 lines sit far down and move with small mismatches: a bench repeats them to about
    # ±1 dB (common practice, no source); half of that, as for the other kinds
    "iip2_point_low": ("dBm", 0.5),
    "iip2_point_high": ("dBm", 0.5),
    "lo_if_isolation": ("dB", 0.5),
    "lo_rf_isolation": ("dB", 0.5),
    "rf_if_isolation": ("dB", 0.5),
    # an upconverter's input→output feedthrough (IF in, RF out): the same path as a
    # downconverter's rf_if_isolation, named for its ports
    "if_rf_isolation": ("dB", 0.5),
    "supply_current": ("A", 0.5e-3),
    "noise_figure": ("dB", 0.2),
})

#: The figures that constrain the core (the other figures each constrain their own path).
CORE_FIGURES = ("conversion_gain", "lo_drive_gain", "compression_gain", "input_p1db",
                "iip3_point_low", "iip3_point_high")

#: Fit groups other than the core whose parameters are constrained by more than one figure
#: name (group → figure names); any other group is constrained by the one figure it names.
GROUP_FIGURES: Mapping[str, tuple[str, ...]] = MappingProxyType({
    "even_order": ("iip2_point_low", "iip2_point_high"),
})

#: The figures without which there is no twin: the gain sets the transconductor.
REQUIRED_FIGURES = ("conversion_gain",)

#: Flags that say a number is not the part's own (analyzer overload, a dead part, a reading
#: in the noise, a source harmonic landing on the product, an SSB noise figure converted with
#: a doubtful image ratio, a part below its stated supply or short of its drive, a reference
#: lost): such figures are left out.
DISQUALIFYING_FLAGS = frozenset({
    figures.IN_NOISE, figures.OVERLOAD, figures.ANALYZER_DISTORTION,
    figures.ANALYZER_COMPRESSION, figures.RBW_MERGED, figures.NOISE_LIMITED,
    figures.SOURCE_HARMONIC,
    figures.MISSING_READING, figures.UNPOWERED, figures.SUPPLY_CURRENT_OFF,
    figures.IMAGE_RATIO_DOUBTFUL, figures.SUPPLY_LIMITED, figures.SOURCE_UNLEVELED,
    figures.REFERENCE_UNLOCKED, figures.ANALYZER_UNCALIBRATED, figures.TEMPERATURE_OFF,
})

#: Condition key of a ``noise_figure`` observation: 1.0 when the figure is double-sideband
#: (referred to the signal and image bands' gains together), 0.0 when single-sideband.
NOISE_DSB = "noise_dsb"

_CONDITION_KEYS = ("temperature_c", "supply_v", "lo_freq_hz", "lo_power_dbm", "rf_freq_hz",
                   "rf_power_dbm", "rf2_freq_hz", "rf2_power_dbm")


@dataclass(frozen=True)
class Observation:
    """One measured figure: ``name`` (see :data:`FITTED_FIGURES`), ``value`` in its unit,
    ``conditions`` (SI: ``temperature_c``, ``supply_v``, ``lo_freq_hz``, ``lo_power_dbm``,
    ``rf_freq_hz``, ``rf_power_dbm``, and for two tones ``rf2_freq_hz``, ``rf2_power_dbm``; a
    noise figure also :data:`NOISE_DSB`), ``study`` it came from."""

    name: str
    value: float
    conditions: Mapping[str, float] = field(hash=False)
    study: str = ""

    @property
    def scale(self) -> float:
        """Residual scale in the figure's unit (see :data:`FITTED_FIGURES`)."""
        return FITTED_FIGURES[self.name][1]

    def condition(self, key: str, default: float = math.nan) -> float:
        """One condition (SI), ``default`` when the figure does not carry it."""
        return float(self.conditions.get(key, default))


@dataclass(frozen=True)
class ObservationSet:
    """What the fit may use, and what was left out (name → count, with the reason)."""

    observations: tuple[Observation, ...]
    left_out: Mapping[str, int]

    def named(self, name: str) -> tuple[Observation, ...]:
        """The observations of one figure name."""
        return tuple(o for o in self.observations if o.name == name)

    def of_group(self, group: str) -> tuple[Observation, ...]:
        """The observations that constrain fit group ``group`` (see :data:`GROUP_FIGURES`)."""
        names = GROUP_FIGURES.get(group, (group,))
        return tuple(o for o in self.observations if o.name in names)

    def distinct(self, name: str, key: str) -> tuple[float, ...]:
        """Distinct values of condition ``key`` among the observations called ``name``."""
        values = {round(o.condition(key), 9) for o in self.named(name)}
        return tuple(sorted(v for v in values if math.isfinite(v)))

    def counts(self) -> dict[str, int]:
        """Observations per figure name."""
        out: dict[str, int] = {}
        for o in self.observations:
            out[o.name] = out.get(o.name, 0) + 1
        return out


def observations_from_figures(figures: Iterable[object], *, where: str,
                              extra: Iterable[Observation] = (),
                              lo_freq_by_point: Mapping[int, float] = MappingProxyType({}),
                              ) -> ObservationSet:
    """The fit's observations from analysis figures (:class:`~sweeprig.analysis.figures.Figure`
    objects or anything with ``name``, ``value``, ``bound``, ``flags``, ``conditions``,
    ``points``). ``lo_freq_by_point``: the LO frequency (Hz) of each run-store point, for the
    figures whose conditions do not carry it (the noise figure's name the IF instead).

    Raises :class:`~sweeprig.errors.InputError` (at ``where``) naming the missing figures when
    a required one has no usable number.
    """
    kept: list[Observation] = []
    left_out: dict[str, int] = {}
    for fig in figures:
        name = str(getattr(fig, "name", ""))
        if name not in FITTED_FIGURES:
            continue
        value = float(getattr(fig, "value", math.nan))
        flags = set(getattr(fig, "flags", ()) or ())
        if getattr(fig, "bound", None) is not None or not math.isfinite(value):
            left_out[f"{name} (a bound or no number)"] = (
                left_out.get(f"{name} (a bound or no number)", 0) + 1)
            continue
        bad = flags & DISQUALIFYING_FLAGS
        if bad:
            key = f"{name} (flagged {', '.join(sorted(bad))})"
            left_out[key] = left_out.get(key, 0) + 1
            continue
        raw = dict(getattr(fig, "conditions", {}) or {})
        conditions = {k: float(raw[k]) for k in _CONDITION_KEYS
                      if k in raw and isinstance(raw[k], int | float)}
        if name == "noise_figure":
            conditions[NOISE_DSB] = 1.0 if raw.get("sideband") == "dsb" else 0.0
        points = tuple(getattr(fig, "points", ()) or ())
        if "lo_freq_hz" not in conditions and points and points[0] in lo_freq_by_point:
            conditions["lo_freq_hz"] = float(lo_freq_by_point[points[0]])
        kept.append(Observation(name, value, MappingProxyType(conditions),
                                str(raw.get("study", ""))))
    kept += list(extra)
    if any(o.name == "compression_gain" for o in kept):
        n = sum(o.name == "input_p1db" for o in kept)
        if n:  # the curve itself says more, without the P1dB's interpolation between steps
            kept = [o for o in kept if o.name != "input_p1db"]
            left_out["input_p1db (the compression sweep's points are fitted instead)"] = n
    result = ObservationSet(tuple(kept), MappingProxyType(left_out))
    missing = [n for n in REQUIRED_FIGURES if not result.named(n)]
    if missing:
        have = ", ".join(f"{n} ×{c}" for n, c in sorted(result.counts().items())) or "none"
        raise InputError(
            f"the run is too small to fit a twin: no usable {', '.join(missing)} figure "
            f"(usable figures: {have})",
            where=where,
            fix="fit a run with at least a gain study (read 'wanted' at a fixed small RF "
                "power); for the compression and intercepts add an RF-power sweep and a "
                "two-tone study",
        )
    return result
