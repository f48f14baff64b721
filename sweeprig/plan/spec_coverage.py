"""Spec limits the plan can evaluate: a ``[[spec]]`` no planned point can ever judge is
refused before the run, not reported as "no figure" after the night.

A limit can be evaluated when at least one figure the planned run will hold matches it. The
figures are those :func:`sweeprig.analysis.reduce.reduce_run` will compute, from the same
study roles (:func:`~sweeprig.analysis.roles.planned_figure_names`), each with the
conditions the run records: its study, the chamber set point (none without a chamber) and
the supply voltage (none when the supply is not controlled). The match is the analysis's own:
:meth:`sweeprig.analysis.limits.Limit.applies_to` on the limits
:func:`~sweeprig.analysis.roles.limits_from_sequence` builds.

:func:`check_specs` raises a located :class:`~sweeprig.errors.InputError` (exit 2) naming
what is never measured, what the sequence does measure or visit, and the fix.
"""

from __future__ import annotations

import math
from dataclasses import replace
from types import MappingProxyType
from typing import TYPE_CHECKING

from sweeprig.errors import InputError
from sweeprig.formats.sequence import Sequence
from sweeprig.plan.axes import Axis, axis_from_spec

if TYPE_CHECKING:
    from sweeprig.analysis.figures import Figure
    from sweeprig.analysis.limits import Limit

#: Most values of an axis listed in a message; longer axes are described by their range.
MAX_LISTED = 12

#: What a study needs for each spec figure (see ``docs/sequence-format.md``).
HOW_TO_MEASURE: dict[str, str] = {
    "conversion_gain_db": 'a one-tone study with a fixed rf_power and lo_power reading "wanted"',
    "gain_flatness_db": 'a one-tone study with fixed powers, an rf_frequency sweep, reading '
    '"wanted"',
    "input_p1db_dbm": 'a one-tone study sweeping rf_power, reading "wanted"',
    "output_p1db_dbm": 'a one-tone study sweeping rf_power, reading "wanted"',
    "iip3_dbm": 'a two-tone study (tone_spacing) reading "wanted" and "im3"',
    "oip3_dbm": 'a two-tone study (tone_spacing) reading "wanted" and "im3"',
    "iip2_dbm": 'a two-tone study (tone_spacing) reading "wanted" and "im2"',
    "lo_if_isolation_db": 'a study reading "lo_at_if"',
    "lo_rf_isolation_db": 'a study reading "lo_at_rf"',
    "rf_if_isolation_db": 'a study reading "rf_at_if"',
    "image_rejection_db": 'a study reading "wanted" and "image"',
    "supply_current_a": 'a study reading "supply_current"',
    "spur_dbc": 'a study reading "mxn"',
    # upconverters (conversion = "up"; the reading kinds of formats/vocabulary.py)
    "lo_if_isolation_db@up": 'a study reading "lo_at_input"',
    "lo_rf_isolation_db@up": 'a study reading "lo_at_output"',
    "rf_if_isolation_db@up": 'a study reading "input_at_output" and name the figure '
    'if_rf_isolation_db (an upconverter\'s input is its IF)',
    "if_rf_isolation_db": 'an upconverter study reading "input_at_output"',
    "sideband_suppression_dbc": 'an upconverter study reading "wanted" and "sideband"',
    "lo_suppression_dbc": 'an upconverter study reading "wanted" and "lo_at_output"',
    "lo_leakage_dbm": 'an upconverter study reading "lo_at_output"',
    "noise_figure_db": 'a study reading "noise_figure"',
}


def how_to_measure(figure: str, conversion: str) -> str:
    """What a study needs for a spec figure, in the words of the conversion direction."""
    return HOW_TO_MEASURE.get(f"{figure}@{conversion}", HOW_TO_MEASURE[figure])


def check_specs(sequence: Sequence) -> None:
    """Refuse the first ``[[spec]]`` that no figure of the planned run can match."""
    if not sequence.spec:
        return
    from sweeprig.analysis.roles import limits_from_sequence, planned_figure_names

    limits = limits_from_sequence(sequence)
    measured = planned_figure_names(sequence)
    temperatures = _axis(sequence, "temperature")
    supplies = _axis(sequence, "supply")
    for j, (spec, limit) in enumerate(zip(sequence.spec, limits, strict=True)):
        figures = _planned(measured, _near(temperatures, spec.temperature),
                           _near(supplies, spec.supply))
        if any(limit.applies_to(f) for f in figures):
            continue
        raise _unreachable(sequence, j, limit, figures, measured, temperatures, supplies)


def _axis(sequence: Sequence, key: str) -> Axis | None:
    value = getattr(sequence.conditions, key)
    return None if value is None else axis_from_spec(key, value)


def _near(axis: Axis | None, value: float | None) -> tuple[float | None, ...]:
    """The axis values a limit at ``value`` could match: those nearest to it (an axis may
    hold millions of values, never listed), or the first value when the limit names none;
    ``(None,)`` without the axis (the run records no value)."""
    if axis is None:
        return (None,)
    if value is None or axis.shape == "list":
        return axis.listed if axis.shape == "list" else (axis.value(0),)
    last = axis.count - 1
    if last == 0:
        position = 0.0
    elif axis.shape == "step":
        position = (value - axis.start) / axis.step
    elif axis.shape == "linear":
        position = (value - axis.start) / (axis.stop - axis.start) * last
    elif value > 0 and axis.start > 0:  # log
        position = math.log(value / axis.start) / math.log(axis.stop / axis.start) * last
    else:
        position = 0.0
    if not math.isfinite(position):
        position = 0.0
    position = min(max(position, 0.0), float(last))
    indices = {math.floor(position), math.ceil(position), last}
    return tuple(axis.value(i) for i in sorted(indices))


def _planned(measured: dict[str, tuple[str, ...]], temperatures: tuple[float | None, ...],
             supplies: tuple[float | None, ...]) -> list[Figure]:
    """Placeholder figures (no value yet) with the conditions the run will record."""
    from sweeprig.analysis.figures import FIGURE_CATALOGUE, Figure

    out: list[Figure] = []
    for study, names in measured.items():
        for t in temperatures:
            for v in supplies:
                conditions: dict[str, float | str] = {"study": study}
                if t is not None:
                    conditions["temperature_c"] = t
                if v is not None:
                    conditions["supply_v"] = v
                frozen = MappingProxyType(conditions)
                out += [Figure(name, math.nan, FIGURE_CATALOGUE[name][0], conditions=frozen)
                        for name in names]
    return out


def _unreachable(sequence: Sequence, j: int, limit: Limit, figures: list[Figure],
                 measured: dict[str, tuple[str, ...]], temperatures: Axis | None,
                 supplies: Axis | None) -> InputError:
    """The located message for spec ``j``: the first of its conditions that no planned
    figure meets (checked one at a time with the same matching rule), and the fix."""
    from sweeprig.analysis.roles import SPEC_FIGURES

    spec = sequence.spec[j]
    spec_names = {v: k for k, v in SPEC_FIGURES.items()}
    figure = spec.figure

    def meets(*keys: str) -> bool:
        only = replace(limit, conditions=MappingProxyType(
            {k: v for k, v in limit.conditions.items() if k in keys}))
        return any(only.applies_to(f) for f in figures)

    if not meets():
        found = sorted({spec_names[n] for names in measured.values() for n in names
                        if n in spec_names})
        return InputError(
            f"no study in the sequence measures {figure}, so this limit can never be "
            f"evaluated; the sequence measures {', '.join(found) if found else 'no spec figure'}",
            where=sequence.where(("spec", j, "figure")),
            fix=f"add {how_to_measure(figure, sequence.mixing.conversion)}, or remove this "
            "[[spec]]")
    if spec.study is not None and not meets("study"):
        doing = [name for name, names in measured.items() if SPEC_FIGURES[figure] in names]
        return InputError(
            f"study {spec.study!r} does not measure {figure}, so this limit can never be "
            f"evaluated; studies that measure it: {', '.join(repr(d) for d in doing)}",
            where=sequence.where(("spec", j, "study")),
            fix=f"name one of those studies in study = \"...\", or make {spec.study!r} "
            f"{how_to_measure(figure, sequence.mixing.conversion)}")
    for key, name, unit, axis, value in (
        ("temperature", "temperature_c", "degC", temperatures, spec.temperature),
        ("supply", "supply_v", "V", supplies, spec.supply),
    ):
        if value is None or meets(name):
            continue
        where = sequence.where(("spec", j, key))
        if axis is None:
            return InputError(
                f"the limit on {figure} applies at {key} {value:g} {unit}, but the sequence "
                f"sets no {key} ([conditions] {key} is not given), so its figures carry none "
                "and this limit can never be evaluated",
                where=where,
                fix=f"give [conditions] {key} = \"{value:g} {unit}\" (it then controls the "
                f"{'chamber' if key == 'temperature' else 'DUT supply'}), or remove {key} "
                "from this [[spec]]")
        plural = "temperatures" if key == "temperature" else "supply voltages"
        return InputError(
            f"the limit on {figure} applies at {key} {value:g} {unit}, which the sequence "
            f"never visits, so it can never be evaluated; {plural} visited: "
            f"{_visited(axis, unit)}",
            where=where,
            fix=f"add {value:g} {unit} to [conditions] {key}, or set this [[spec]]'s {key} "
            "to one the sequence visits")
    return InputError(  # each condition is met somewhere, never all together
        f"no planned point measures {figure} under all of this limit's conditions "
        f"({', '.join(f'{k}={v}' for k, v in limit.conditions.items())}), so it can never "
        "be evaluated",
        where=sequence.where(("spec", j)),
        fix="change the limit's conditions to ones a study measuring it visits")


def _visited(axis: Axis, unit: str) -> str:
    if axis.count <= MAX_LISTED:
        return ", ".join(f"{axis.value(i):g}" for i in range(axis.count)) + f" {unit}"
    return (f"{axis.count:,} values from {axis.minimum:g} to {axis.maximum:g} {unit}"
            + (f" in steps of {axis.step:g} {unit}" if axis.shape == "step" else ""))
