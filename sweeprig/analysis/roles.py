"""What a study measures, from its readings and the shape of its sweep: the study roles
(``ROLE_*``) :func:`~sweeprig.analysis.reduce.reduce_run` gives it, the figures a
``[[spec]]`` can name that each role yields, and the sequence's specs as limits.

Kept apart from the reduction so that checking a sequence file (``sweeprig check``,
:mod:`sweeprig.plan.spec_coverage`) reads the same tables without loading the store, the
capture table or pandas.
"""

from __future__ import annotations

from collections.abc import Mapping
from types import MappingProxyType
from typing import TYPE_CHECKING

from sweeprig.formats.fields import axis_len

if TYPE_CHECKING:
    from sweeprig.analysis.limits import Limit
    from sweeprig.formats.sequence import Sequence, Study

#: What a study can feed (see :mod:`sweeprig.analysis.reduce`).
ROLE_GAIN = "gain"
ROLE_FLATNESS = "flatness"
ROLE_TEMPCO = "tempco"
ROLE_COMPRESSION = "compression"
ROLE_TWO_TONE = "two_tone"
ROLE_LO_DRIVE = "lo_drive"
ROLE_SPURS = "spurs"
ROLE_ISOLATION = "isolation"
ROLE_IMAGE = "image"
ROLE_SUPPLY = "supply"
ROLE_SIDEBAND = "sideband"

ISOLATION_READINGS = ("lo_at_if", "lo_at_rf", "rf_at_if")
TWO_TONE_READINGS = ("im3_low", "im3_high", "im2_low", "im2_high")

#: Spec figure names (``docs/sequence-format.md``, section [[spec]]) → analysis figure names.
SPEC_FIGURES: Mapping[str, str] = MappingProxyType({
    "conversion_gain_db": "conversion_gain",
    "gain_flatness_db": "gain_flatness",
    "input_p1db_dbm": "input_p1db",
    "output_p1db_dbm": "output_p1db",
    "iip3_dbm": "iip3",
    "oip3_dbm": "oip3",
    "iip2_dbm": "iip2",
    "lo_if_isolation_db": "lo_if_isolation",
    "lo_rf_isolation_db": "lo_rf_isolation",
    "rf_if_isolation_db": "rf_if_isolation",
    "image_rejection_db": "image_rejection",
    "supply_current_a": "supply_current",
    "spur_dbc": "spur_dbc",
    "if_rf_isolation_db": "if_rf_isolation",
    "sideband_suppression_dbc": "sideband_suppression",
    "lo_suppression_dbc": "lo_suppression",
    "lo_leakage_dbm": "lo_leakage",
    "noise_figure_db": "noise_figure",
})

def limits_from_sequence(sequence: Sequence) -> tuple[Limit, ...]:
    """The sequence's ``[[spec]]`` entries as analysis limits: a spec's name mapped by
    :data:`SPEC_FIGURES`, its ``temperature``, ``supply`` and ``study`` the limit's
    conditions."""
    from sweeprig.analysis.limits import Limit

    out: list[Limit] = []
    for spec in sequence.spec:
        conditions: dict[str, float | str] = {}
        if spec.temperature is not None:
            conditions["temperature_c"] = float(spec.temperature)
        if spec.supply is not None:
            conditions["supply_v"] = float(spec.supply)
        if spec.study is not None:
            conditions["study"] = spec.study
        out.append(Limit(
            name=SPEC_FIGURES[spec.figure],
            min=spec.min,
            max=spec.max,
            conditions=MappingProxyType(conditions),
            label=spec.note or spec.figure,
        ))
    return tuple(out)

def shape_from_sequence(study: Study) -> tuple[bool, bool, bool, bool]:
    """(two tones, input power swept, LO power swept, a frequency swept) from the study's
    axes; the frequency is the input's or the LO's (with a fixed input the output moves with
    the LO: an upconverter's output band)."""
    return (
        study.two_tone,
        axis_len(study.rf_power) > 1,
        axis_len(study.lo_power) > 1,
        axis_len(study.rf_frequency) > 1 or axis_len(study.lo_frequency) > 1,
    )

def study_roles(
    readings: tuple[str, ...], two_tone: bool, rf_swept: bool, lo_swept: bool,
    freq_swept: bool, *, temperatures: int,
) -> tuple[str, ...]:
    """The roles (``ROLE_*``) a study with these capture readings and this sweep shape
    (two tones, input power swept, LO power swept, a frequency swept; over ``temperatures``
    temperatures) feeds: see :mod:`sweeprig.analysis.reduce`."""
    roles: list[str] = []
    has_if = "if" in readings
    if two_tone:
        if any(r in readings for r in TWO_TONE_READINGS):
            roles.append(ROLE_TWO_TONE)
    elif has_if and rf_swept:
        roles.append(ROLE_COMPRESSION)
    elif has_if and lo_swept:
        roles.append(ROLE_LO_DRIVE)
    elif has_if:
        roles.append(ROLE_GAIN)
        if freq_swept:
            roles.append(ROLE_FLATNESS)
        if temperatures > 1:
            roles.append(ROLE_TEMPCO)
    if "spur" in readings:
        roles.append(ROLE_SPURS)
    if any(r in readings for r in ISOLATION_READINGS):
        roles.append(ROLE_ISOLATION)
    if "image" in readings:
        roles.append(ROLE_IMAGE)
    if "supply_current" in readings:
        roles.append(ROLE_SUPPLY)
    if "sideband" in readings:
        roles.append(ROLE_SIDEBAND)
    return tuple(roles)

#: The figures a ``[[spec]]`` can name that each role yields, each with the capture readings
#: it needs besides the role (every item; ``"a|b"``: either). Mirrors :func:`_figures` and the
#: analysis functions it calls: a role or figure added there needs its line here.
ROLE_SPEC_FIGURES: Mapping[str, tuple[tuple[str, tuple[str, ...]], ...]] = MappingProxyType({
    ROLE_GAIN: (("conversion_gain", ()),),
    ROLE_FLATNESS: (("gain_flatness", ()),),
    ROLE_COMPRESSION: (("input_p1db", ()), ("output_p1db", ())),
    ROLE_TWO_TONE: (("iip3", ("if", "im3_low|im3_high")), ("oip3", ("if", "im3_low|im3_high")),
                    ("iip2", ("if", "im2_low|im2_high"))),
    ROLE_ISOLATION: (("lo_if_isolation", ("lo_at_if",)), ("lo_rf_isolation", ("lo_at_rf",)),
                     ("rf_if_isolation", ("rf_at_if",))),
    ROLE_IMAGE: (("image_rejection", ()),),
    ROLE_SUPPLY: (("supply_current", ()),),
    ROLE_SPURS: (("spur_dbc", ()),),
})
#: The upconverter's own figures (:func:`sweeprig.analysis.direction.upconverter_figures`),
#: in the same form; the positional names above are renamed for it by
#: :func:`sweeprig.analysis.direction.trade_name`.
UP_ROLE_SPEC_FIGURES: Mapping[str, tuple[tuple[str, tuple[str, ...]], ...]] = MappingProxyType({
    ROLE_ISOLATION: (("lo_suppression", ("if", "lo_at_if")), ("lo_leakage", ("lo_at_if",))),
    ROLE_SIDEBAND: (("sideband_suppression", ("if", "sideband")),),
})


def planned_readings(study: Study) -> tuple[str, ...]:
    """The capture readings (:mod:`sweeprig.analysis.load`) a study's ``read`` list gives.
    An ``mxn`` reading gives spurs, and may stand in for the wanted output (``if``): counted
    as both, so nothing it could measure is denied."""
    from sweeprig.analysis.load import DIRECT_KINDS, PRODUCT_SUFFIXES

    out: list[str] = []
    for spec in study.readings():
        if spec.kind in DIRECT_KINDS:
            out.append(DIRECT_KINDS[spec.kind])
        elif spec.kind == "mxn":
            out += ["spur", "if"]
        else:
            out += [short for (kind, _), short in PRODUCT_SUFFIXES.items() if kind == spec.kind]
    return tuple(dict.fromkeys(out))


def planned_figure_names(sequence: Sequence) -> dict[str, tuple[str, ...]]:
    """Per study (file order), the analysis names of the figures a ``[[spec]]`` can name
    that its results will hold: the study roles
    :func:`~sweeprig.analysis.reduce.reduce_run` gives it, from its axes and readings."""
    from sweeprig.analysis.direction import trade_name

    conversion = sequence.mixing.conversion
    out: dict[str, tuple[str, ...]] = {}
    for study in sequence.study:
        readings = planned_readings(study)
        roles = study_roles(readings, *shape_from_sequence(study),
                       temperatures=sequence.temperature_count())
        tables = [ROLE_SPEC_FIGURES] + ([UP_ROLE_SPEC_FIGURES] if conversion == "up" else [])
        out[study.name] = tuple(
            trade_name(name, conversion) for table in tables for role in roles
            for name, needs in table.get(role, ())
            if all(any(r in readings for r in item.split("|")) for item in needs)) + (
            ("noise_figure",) if any(r.kind == "noise_figure" for r in study.readings())
            else ())
    return out
