"""Sequence files: what to measure on a mixer, as validated, frozen pydantic models.

Every power in a sequence is at the DUT's port planes; the bench file's path losses turn it
into source settings. Internal units: Hz, dBm, dB, V, A, s, degC. Every key is documented in
``docs/sequence-format.md``; :func:`load_sequence` is the entry point.
"""

from __future__ import annotations

import math
import os
import re
from collections.abc import Callable
from pathlib import Path
from typing import Annotated, Any, Literal

from pydantic import (
    BeforeValidator,
    Discriminator,
    Field,
    PrivateAttr,
    Tag,
    ValidationError,
    ValidationInfo,
    WithJsonSchema,
    field_validator,
)
from pydantic_core import PydanticCustomError

from sweeprig.errors import InputError, UnitError
from sweeprig.formats.fields import (
    TAG_PREFIX,
    AxisValue,
    Current,
    Frequency,
    Frozen,
    LevelDb,
    LocatedFile,
    Power,
    RangeSpec,
    StrictBool,
    StrictInt,
    Temperature,
    Time,
    Voltage,
    axis,
    axis_len,
)
from sweeprig.formats.loading import load_document, validation_error
from sweeprig.formats.point_limit import DEFAULT_MAX_POINTS
from sweeprig.formats.toml_locate import KeyPath, format_key_path
from sweeprig.units import parse_quantity

#: Sweep axes a study may give, in the default nesting order (outermost first: slow first).
STUDY_AXES: tuple[str, ...] = (
    "lo_frequency", "lo_power", "tone_spacing", "rf_frequency", "rf_power",
)
AxisName = Literal["lo_frequency", "lo_power", "tone_spacing", "rf_frequency", "rf_power"]

#: What a study can read at each point (sweeprig's own vocabulary; see the format doc).
READING_KINDS: tuple[str, ...] = (
    "wanted", "lo_at_if", "lo_at_rf", "rf_at_if", "image", "mxn", "im3", "im2",
    "supply_current", "input_power", "noise_figure",
    "sideband",
)
ReadingKind = Literal[
    "wanted", "lo_at_if", "lo_at_rf", "rf_at_if", "image", "mxn", "im3", "im2",
    "supply_current", "input_power", "noise_figure",
    "sideband",
]
#: Readings that measure distortion (eligible for the attenuation check).
DISTORTION_KINDS = frozenset({"mxn", "im3", "im2"})

#: Figure names a spec limit may name, with the quantity kind of their values.
FIGURES: dict[str, str] = {
    "conversion_gain_db": "level_db",
    "gain_flatness_db": "level_db",
    "input_p1db_dbm": "power",
    "output_p1db_dbm": "power",
    "iip3_dbm": "power",
    "oip3_dbm": "power",
    "iip2_dbm": "power",
    "lo_if_isolation_db": "level_db",
    "lo_rf_isolation_db": "level_db",
    "rf_if_isolation_db": "level_db",
    "image_rejection_db": "level_db",
    "supply_current_a": "current",
    "spur_dbc": "level_db",
    # upconverters (see formats/vocabulary.py): the RF port is the output
    "if_rf_isolation_db": "level_db",
    "sideband_suppression_dbc": "level_db",
    "lo_suppression_dbc": "level_db",
    "lo_leakage_dbm": "power",
    "noise_figure_db": "level_db",  # either direction
}
FigureName = Literal[
    "conversion_gain_db", "gain_flatness_db", "input_p1db_dbm", "output_p1db_dbm", "iip3_dbm",
    "oip3_dbm", "iip2_dbm", "lo_if_isolation_db", "lo_rf_isolation_db", "rf_if_isolation_db",
    "image_rejection_db", "supply_current_a", "spur_dbc", "noise_figure_db",
    "if_rf_isolation_db", "sideband_suppression_dbc", "lo_suppression_dbc", "lo_leakage_dbm",
]

_NAME_PATTERN = r"^[A-Za-z0-9][A-Za-z0-9_.-]*$"


# -- analyzer settings ------------------------------------------------------------------------

AUTO = "auto"


def _auto_or(kind: str | None) -> Callable[[Any], Any]:
    def parse(value: Any) -> Any:
        if value is None or (isinstance(value, str) and value.strip().lower() == AUTO):
            return AUTO if value is not None else None
        if kind is None:  # a count
            if isinstance(value, bool) or not isinstance(value, int):
                raise PydanticCustomError(
                    "semantic", "{what}",
                    {"what": f"{value!r} is not a whole number",
                     "fix": 'write a whole number such as 4, or "auto"'})
            return value
        try:
            return parse_quantity(value, kind)
        except UnitError as exc:
            raise PydanticCustomError(
                "quantity", "{what}", {"what": exc.what, "fix": f'{exc.fix}, or "auto"'}
            ) from None

    return parse


def _auto_type(kind: str | None, description: str) -> Any:
    schema = {"anyOf": [{"type": "number"}, {"type": "string"}], "description": description}
    return Annotated[Any, BeforeValidator(_auto_or(kind)), WithJsonSchema(schema)]


class AnalyzerSettings(Frozen):
    """Spectrum-analyzer settings for readings; each is a value, ``"auto"``, or left out.

    Left out means "inherit" (reading → study → sequence ``[analyzer]``), and ``"auto"`` at
    the end of that chain: sweeprig derives it from the product's frequency and its
    predicted level (see ``docs/sequence-format.md``).
    """

    span: _auto_type("frequency", 'span around the product, e.g. "20 kHz", or "auto"') = None
    rbw: _auto_type("frequency", 'resolution bandwidth, e.g. "1 kHz", or "auto"') = None
    attenuation: _auto_type("level_db", 'input attenuation, e.g. "10 dB", or "auto"') = None
    reference_level: _auto_type("power", 'reference level, e.g. "0 dBm", or "auto"') = None
    averages: _auto_type(None, 'trace averages (whole number), or "auto" (1)') = None


def _all_auto(value: Any) -> Any:
    if isinstance(value, str) and value.strip().lower() == AUTO:
        return {name: AUTO for name in AnalyzerSettings.model_fields}
    return value


AnalyzerField = Annotated[AnalyzerSettings, BeforeValidator(_all_auto)]


class AnalyzerDefaults(AnalyzerSettings):
    """Sequence-wide analyzer settings and the rules behind ``"auto"``."""

    mixer_level: Power = Field(
        -20.0, description="highest total power wanted at the analyzer's first mixer (after "
        "the input attenuation); sets auto attenuation")
    noise_margin: LevelDb = Field(
        10.0, description="how far the displayed noise must sit below a product's expected "
        "level; sets auto RBW")
    spur_floor: LevelDb = Field(
        70.0, description="for products of unknown level, how far below the reference "
        "(wanted output, or the leaking source) the analyzer must still see")
    distortion_margin: LevelDb = Field(
        20.0, description="how far the analyzer's own distortion products, and products made "
        "from the sources' harmonics, must sit below a product; sets auto attenuation and "
        "the automatic attenuation check")
    max_sweep_time: Time = Field(
        2.0, description="longest analyzer sweep the auto settings may choose (sweep time "
        "2.5·span/RBW²); bounds how narrow auto RBW goes")
    on_risk: Literal["warn", "refuse"] = Field(
        "warn", description="readings that no analyzer setting can keep their margins: "
        "\"warn\" (check and plan warn, the run measures them and records the risk) or "
        "\"refuse\" (check, plan and run refuse the sequence before any RF is switched on)")


# -- header, part, mixing, conditions ----------------------------------------------------------


class About(Frozen):
    """Who runs what, and why."""

    title: str = Field("", description="one line saying what this sequence characterises")
    operator: str = Field("", description="who prepared or runs it")
    notes: str = Field("", description="free text carried into the results")
    tags: tuple[str, ...] = Field((), description="free tags for finding runs later")


#: The range each expected figure of ``[part]`` may take, dB: wider than any mixer's (common
#: practice, no source); beyond it the value is a typing slip, not a part.
PART_DB_RANGE: dict[str, tuple[float, float]] = {
    "expected_gain": (-100.0, 100.0),
    "expected_lo_if_isolation": (-100.0, 200.0),
    "expected_lo_rf_isolation": (-100.0, 200.0),
    "expected_rf_if_isolation": (-100.0, 200.0),
    "expected_noise_figure": (0.0, 100.0),
}


class Part(Frozen):
    """The part under test and what it is expected to do (for predictions and auto settings)."""

    id: str = Field(description="part number of the device under test")
    serial: str = Field("", description="serial or sample number")
    expected_gain: LevelDb = Field(
        description="expected small-signal conversion gain, dB (negative for a loss)")
    expected_lo_if_isolation: LevelDb | None = Field(
        None, description="expected LO→IF isolation, dB (positive). Unknown: predictions "
        "assume none, the safe side")
    expected_lo_rf_isolation: LevelDb | None = Field(
        None, description="expected LO→RF isolation, dB (positive). Unknown: assume none")
    expected_rf_if_isolation: LevelDb | None = Field(
        None, description="expected RF→IF isolation, dB (positive). Unknown: assume none")
    expected_noise_figure: LevelDb | None = Field(
        None, description="expected single-sideband noise figure, dB, for the part's output "
        "noise at the analyzer. Unknown: 15 dB is assumed (pessimistic for an active mixer), or "
        "the conversion loss + 3 dB when that is larger")
    passive: bool = Field(
        False, description="true for a part that needs no DC supply (a passive mixer): a "
        "sequence without [conditions] supply is then not refused on a bench with a supply")
    expected_supply_current: Current | None = Field(
        None, description="expected DC supply current, A; a measured supply current more "
        "than 30 % away from it flags the figures of that point supply_current_off")
    sim_part: str | None = Field(
        None, description="the simulated part that --sim serves for this sequence: a shipped "
        "part name (sweeprig/sim/parts) or a part file, relative to this sequence file. Unset: "
        "the simulated bench's own part")

    @field_validator("expected_gain", "expected_lo_if_isolation", "expected_lo_rf_isolation",
                     "expected_rf_if_isolation", "expected_noise_figure")
    @classmethod
    def _plausible_db(cls, value: float | None, info: ValidationInfo) -> float | None:
        """A part's expected figures within what any mixer can have (the planner computes
        levels from them; a typing slip of 2034611 dB would overflow its sums)."""
        low, high = PART_DB_RANGE[str(info.field_name)]
        if value is not None and not low <= value <= high:
            raise PydanticCustomError(
                "semantic", "{what}",
                {"what": f"{value:g} dB is outside {low:g} dB to {high:g} dB",
                 "fix": "give the part's expected figure in dB, e.g. \"12 dB\""})
        return value


class Mixing(Frozen):
    """The frequency plan: which product is wanted, and how the LO follows the RF."""

    conversion: Literal["down", "up"] = Field(
        "down", description="down: output = |f_rf − f_lo|; up: output = f_rf + f_lo "
        "(lo_side low) or f_lo − f_rf (lo_side high)")
    lo_side: Literal["low", "high"] = Field(
        "low", description="low: LO below the RF (down) or below the output (up); high: above")
    if_frequency: Frequency | None = Field(
        None, description="wanted output frequency; when given, the LO follows the RF so the "
        "output stays here (studies without an lo_frequency axis)")


class AdaptiveSoak(Frozen):
    """End a soak once the part is thermally settled by a measured criterion.

    Every ``every`` the criterion is read (the wanted output's gain at the condition's first
    point, or the supply current); the soak ends when the readings of the last ``window``
    spread by no more than the drift given, and at least ``minimum`` has passed; it never
    lasts longer than ``maximum`` (default: ``conditions.soak``).
    """

    gain_drift: LevelDb | None = Field(
        None, description="settled when the wanted output's gain varies by no more than this "
        "over the window, dB (give this or current_drift)")
    current_drift: Current | None = Field(
        None, description="settled when the supply current varies by no more than this over "
        "the window, A (give this or gain_drift)")
    window: Time = Field(60.0, description="time over which the drift is judged")
    minimum: Time = Field(60.0, description="shortest soak, whatever the readings say")
    maximum: Time | None = Field(
        None, description="longest soak; the run goes on (with a warning) when the part has "
        "not settled by then. Default: conditions.soak")
    every: Time = Field(15.0, description="time between two readings of the criterion")

    @property
    def by(self) -> str:
        """``gain`` or ``supply_current``: what the criterion reads."""
        return "gain" if self.gain_drift is not None else "supply_current"

    @property
    def drift(self) -> float:
        """The allowed spread over the window (dB or A)."""
        value = self.gain_drift if self.gain_drift is not None else self.current_drift
        return float(value or 0.0)


class Conditions(Frozen):
    """Outer conditions shared by every study: temperature and supply, and waiting times."""

    temperature: axis("temperature") | None = Field(  # type: ignore[valid-type]
        None, description="chamber set points (value, list or range). Left out: no chamber, "
        "ambient temperature")
    supply: axis("voltage") | None = Field(  # type: ignore[valid-type]
        None, description="DUT supply voltages (value, list or range). Left out: the supply "
        "is not controlled")
    soak: Time = Field(600.0, description="wait after the DUT probe reaches a set point "
                       "(with adaptive_soak: the longest soak unless it gives maximum)")
    adaptive_soak: AdaptiveSoak | None = Field(
        None, description="end each soak when the part is settled by a measured criterion "
        "(see [conditions.adaptive_soak])")
    temperature_tolerance: Temperature = Field(
        1.0, description="the probe counts as at the set point within ± this many degC "
        "(write it in degC: it is a difference)")
    settle: Time = Field(0.05, description="wait after any source or supply change")
    temperature_order: Literal["least_travel", "as_written"] = Field(
        "least_travel", description="order of the chamber set points: least_travel (from "
        "ambient, the nearer side first, each side in turn: e.g. 25, 85, -40 degC for "
        "-40, 25, 85) or as_written")


class Recovery(Frozen):
    """What the engine does when an instrument misbehaves during the run."""

    on_error: Literal["retry", "skip", "stop"] = Field(
        "retry", description="an error in an instrument's queue: retry the point, skip it "
        "(recorded) once the attempts are spent, or stop the run")
    point_attempts: Annotated[int, Field(strict=True, ge=1, le=20)] = Field(
        3, description="measurements of one point before giving up (or skipping)")
    reconnect_attempts: Annotated[int, Field(strict=True, ge=0, le=20)] = Field(
        4, description="reconnections of an instrument that stopped answering")
    backoff: Time = Field(0.5, description="wait before the first reconnection (doubles)")
    reset_check: StrictBool = Field(
        True, description="read every instrument's event status before storing a point, so "
        "an instrument that reset itself is caught and the point measured again")


# -- studies -----------------------------------------------------------------------------------


class ReadingSpec(Frozen):
    """One thing to read at every point of a study (the table form of a ``read`` item)."""

    kind: ReadingKind = Field(description="what to read (see the vocabulary in the format doc)")
    name: str | None = Field(None, pattern=_NAME_PATTERN,
                             description="name of the result (default: the kind)")
    order: StrictInt | None = Field(
        None, description="mxn only: highest order m + |n| of the products read (default 3)")
    min_frequency: Frequency | None = Field(None, description="mxn only: skip products below")
    max_frequency: Frequency | None = Field(None, description="mxn only: skip products above")
    output_band: tuple[Frequency, Frequency] | None = Field(
        None, description="mxn only: [start, stop] of the output band; the worst-spur figure "
        "counts only products inside it (all are still read and charted). Left out: every "
        "product counts")
    expected: tuple[str, ...] = Field(
        (), description='mxn only: products the worst-spur figure leaves out, as "<m>x<n>" '
        'like the reading names, e.g. ["1x1"] for a downconverter\'s sum product')
    analyzer: AnalyzerField | None = Field(None, description="analyzer settings for this reading")
    attenuation_check: StrictBool | None = Field(
        None, description="distortion readings: repeat with 10 dB more input attenuation")
    sideband: Literal["dsb", "ssb"] | None = Field(
        None, description="noise_figure only: report the double-sideband figure (what the "
        "Y-factor method measures, default) or the single-sideband one (converted with the "
        "image gain the same study reads, else equal gains)")


def _read_item_shape(value: Any) -> str:
    return f"{TAG_PREFIX}kind" if isinstance(value, str) else f"{TAG_PREFIX}table"


ReadItem = Annotated[
    Annotated[ReadingKind, Tag(f"{TAG_PREFIX}kind")]
    | Annotated[ReadingSpec, Tag(f"{TAG_PREFIX}table")],
    Discriminator(_read_item_shape),
]


class Study(Frozen):
    """One sweep: its axes, their nesting, and what to read at each point."""

    name: str = Field(pattern=_NAME_PATTERN, description="unique name of the study")
    notes: str = Field("", description="free text")
    rf_frequency: axis("frequency") = Field(  # type: ignore[valid-type]
        description="RF (tone 1) frequency at the DUT RF port")
    rf_power: axis("power") = Field(  # type: ignore[valid-type]
        description="RF power at the DUT RF port (per tone in two-tone studies)")
    lo_power: axis("power") = Field(  # type: ignore[valid-type]
        description="LO power at the DUT LO port")
    lo_frequency: axis("frequency") | None = Field(  # type: ignore[valid-type]
        None, description="explicit LO frequencies (instead of following the RF)")
    tone_spacing: axis("frequency") | None = Field(  # type: ignore[valid-type]
        None, description="two-tone study: tone 2 sits this far above tone 1 (uses rf2)")
    if_frequency: Frequency | None = Field(
        None, description="wanted output frequency for this study (overrides [mixing])")
    nesting: tuple[AxisName, ...] = Field(
        (), description="axes from outermost to innermost loop; unlisted axes follow in the "
        "default order lo_frequency, lo_power, tone_spacing, rf_frequency, rf_power")
    read: tuple[ReadItem, ...] = Field(
        min_length=1, description="what to read at each point: kinds, or tables for options")
    analyzer: AnalyzerField | None = Field(None, description="analyzer settings for this study")
    attenuation_check: StrictBool | None = Field(
        None, description="repeat this study's distortion readings (mxn, im3, im2) with 10 dB "
        "more input attenuation: true (always), false (never), or left out (automatic: where "
        "the analyzer's own distortion is predicted within distortion_margin of the product)")

    def axis_value(self, name: str) -> AxisValue | None:
        """The file value of axis ``name`` (None when the study does not give it)."""
        return getattr(self, name)

    #: ``read`` and its tables, kept: the planner asks at every point, and building the
    #: models costs more than the rest of the question (a copy with a new ``read`` recomputes).
    _read_tables: tuple[object, tuple[ReadingSpec, ...]] | None = PrivateAttr(None)

    def readings(self) -> tuple[ReadingSpec, ...]:
        """The ``read`` items as tables (a bare kind becomes ``{kind = ...}``)."""
        kept = self._read_tables
        if kept is not None and kept[0] is self.read:
            return kept[1]
        tables = tuple(ReadingSpec(kind=r) if isinstance(r, str) else r for r in self.read)
        self._read_tables = (self.read, tables)
        return tables

    @property
    def two_tone(self) -> bool:
        return self.tone_spacing is not None

    def nesting_order(self) -> tuple[str, ...]:
        """Every axis the study gives, outermost first (declared ones, then the default order)."""
        present = [a for a in STUDY_AXES if getattr(self, a) is not None]
        declared = [a for a in self.nesting if a in present]
        return tuple(declared + [a for a in present if a not in declared])

    def shape(self) -> tuple[int, ...]:
        """Axis lengths in nesting order."""
        return tuple(axis_len(getattr(self, a)) for a in self.nesting_order())

    def count(self) -> int:
        """Points of one pass of this study (one temperature, one supply voltage)."""
        n = 1
        for length in self.shape():
            n *= length
        return n


# -- spec limits -------------------------------------------------------------------------------


def _parse_spec_bounds(data: Any) -> Any:
    if not isinstance(data, dict):
        return data
    figure = data.get("figure")
    kind = FIGURES.get(figure) if isinstance(figure, str) else None
    if kind is None:
        return data
    out = dict(data)
    for key in ("min", "max"):
        if key in out:
            value = out[key]
            if isinstance(value, str) and kind == "level_db" and value.lower().endswith("dbc"):
                value = value[:-1]
            try:
                out[key] = parse_quantity(value, kind)
            except UnitError as exc:
                raise PydanticCustomError(
                    "quantity", "{what}",
                    {"what": f"{key}: {exc.what}", "fix": exc.fix or ""}) from None
    return out


_Bound = Annotated[float | None, WithJsonSchema(
    {"anyOf": [{"type": "number"}, {"type": "string"}],
     "description": "a number in the figure's unit, or a quantity such as \"10 dBm\""})]


class SpecLimit(Frozen):
    """A datasheet limit on one figure, optionally only under a condition.

    Carried as is; the analysis decides pass/fail. Values are in the figure's unit (the name's
    suffix: dB, dBm, dBc, A); strings with units are accepted.
    """

    figure: FigureName = Field(description="figure name, e.g. conversion_gain_db")
    min: _Bound = Field(None, description="lowest passing value")
    max: _Bound = Field(None, description="highest passing value")
    temperature: Temperature | None = Field(
        None, description="applies only at this temperature (degC)")
    supply: Voltage | None = Field(None, description="applies only at this supply voltage (V)")
    study: str | None = Field(None, description="applies only to this study's results")
    note: str = Field("", description="free text, e.g. the datasheet line")


SpecField = Annotated[SpecLimit, BeforeValidator(_parse_spec_bounds)]


# -- the sequence ------------------------------------------------------------------------------


class Sequence(LocatedFile):
    """A whole sequence file: header, part, frequency plan, conditions, studies, limits."""

    format: Literal[1] = Field(1, description="version of this file format")
    include: tuple[str, ...] = Field(
        (), description="fragments merged under this file (paths relative to it)")
    about: About = Field(default_factory=About)
    part: Part
    mixing: Mixing = Field(default_factory=Mixing)
    conditions: Conditions = Field(default_factory=Conditions)
    recovery: Recovery = Field(default_factory=Recovery)
    analyzer: AnalyzerDefaults = Field(default_factory=AnalyzerDefaults)
    study: tuple[Study, ...] = Field(min_length=1, description="the studies, run in order")
    spec: tuple[SpecField, ...] = Field((), description="datasheet limits on figures")


    def study_named(self, name: str) -> Study:
        for study in self.study:
            if study.name == name:
                return study
        raise KeyError(name)

    def temperature_count(self) -> int:
        t = self.conditions.temperature
        return 1 if t is None else axis_len(t)

    def supply_count(self) -> int:
        v = self.conditions.supply
        return 1 if v is None else axis_len(v)

    def count_points(self) -> int:
        """All points: studies × temperatures × supply voltages, computed without expanding."""
        per_pass = sum(s.count() for s in self.study)
        return per_pass * self.temperature_count() * self.supply_count()

    def if_frequency_of(self, study: Study) -> float | None:
        """The wanted output frequency a study tracks (None when its LO is explicit)."""
        if study.lo_frequency is not None:
            return None
        return study.if_frequency if study.if_frequency is not None else self.mixing.if_frequency

    def uses_two_tone(self) -> bool:
        return any(s.two_tone for s in self.study)

    def reading_kinds(self) -> set[str]:
        return {r.kind for s in self.study for r in s.readings()}


def required_roles(sequence: Sequence, noise_drive_role: str = "nsdc") -> dict[str, str]:
    """Bench roles the sequence needs, each with the reason (for bench checks).
    ``noise_drive_role``: the role switching the noise source (the bench's
    ``noise_source.drive``: a supply ``nsdc``, or the analyzer ``sa`` itself)."""
    kinds = sequence.reading_kinds()
    roles = {"rf": "every study drives the RF port", "lo": "every study drives the LO port"}
    if sequence.uses_two_tone():
        roles["rf2"] = "a two-tone study (tone_spacing) needs the second RF source"
    analyzer_kinds = kinds - {"supply_current", "input_power"}
    if analyzer_kinds:
        roles["sa"] = f"readings {', '.join(sorted(analyzer_kinds))} use the spectrum analyzer"
    if "input_power" in kinds:
        roles["pm"] = "the input_power reading uses the power meter"
    if sequence.conditions.supply is not None or "supply_current" in kinds:
        roles["dc"] = "the supply voltage or supply_current reading uses the DC supply"
    if sequence.conditions.temperature is not None:
        roles["chamber"] = "conditions.temperature uses the thermal chamber"
    if "lo_at_rf" in kinds:
        roles["switch"] = "the lo_at_rf reading routes the analyzer to the RF port"
    if "noise_figure" in kinds:
        roles.setdefault(noise_drive_role, "the noise_figure reading drives the noise source "
                         "([noise_source])")
        roles["switch"] = ("the noise_figure reading's system calibration fits the "
                           "calibration thru (switch channel thru)")
    return roles


# -- loading -----------------------------------------------------------------------------------


def load_sequence(path: str | os.PathLike[str], *, max_points: int = DEFAULT_MAX_POINTS
                  ) -> Sequence:
    """Read, merge includes, validate and check a sequence file.

    Raises :class:`~sweeprig.errors.InputError` (where = ``file:line: key.path``) for any
    problem, including a sequence that expands to more than ``max_points`` points (the count
    is computed arithmetically, never by expanding).
    """
    from sweeprig.formats.vocabulary import canonical_table

    doc = load_document(path)
    table, spelling = canonical_table(doc.data, doc.where)
    where = spelling.where(doc.where)
    try:
        sequence = Sequence.model_validate(table)
    except ValidationError as exc:
        raise validation_error(Sequence, exc, where) from None
    sequence = _with_sim_part_resolved(sequence, doc)
    sequence._where = where
    sequence._source = doc.display
    sequence._included = doc.included()
    sequence._merged = {k: v for k, v in doc.data.items() if k != "include"}
    check_sequence(sequence)
    check_size(sequence, max_points)
    return sequence


def _with_sim_part_resolved(sequence: Sequence, doc: Any) -> Sequence:
    """``[part] sim_part`` checked: a shipped part name, or a part file that exists (made
    absolute, relative to the sequence file). Raises :class:`InputError` otherwise."""
    from sweeprig.sim.names import PARTS_DIR, shipped_parts

    name = sequence.part.sim_part
    if name is None:
        return sequence
    where = doc.where(("part", "sim_part"))
    if name.lower().endswith(".toml") or "/" in name or "\\" in name:
        part_path = Path(doc.path).parent / name
        if not part_path.is_file():
            raise InputError(f"simulated part file {name!r} does not exist", where=where,
                             fix="give a part file path relative to the sequence file, or name "
                             f"a shipped part: {', '.join(shipped_parts())}")
        resolved = str(part_path.resolve())
    elif (PARTS_DIR / f"{name.lower()}.toml").is_file():
        resolved = name.lower()
    else:
        raise InputError(f"no shipped simulated part named {name!r}", where=where,
                         fix=f"name one of {', '.join(shipped_parts())}, or give a part file "
                         "path ending in .toml")
    return sequence.model_copy(
        update={"part": sequence.part.model_copy(update={"sim_part": resolved})})


def sequence_from_dict(data: dict[str, Any], *, max_points: int = DEFAULT_MAX_POINTS
                       ) -> Sequence:
    """Validate and check a sequence given as a plain table (errors name key paths only)."""
    from sweeprig.formats.vocabulary import canonical_table

    table, spelling = canonical_table(data, format_key_path)
    try:
        sequence = Sequence.model_validate(table)
    except ValidationError as exc:
        raise validation_error(Sequence, exc, spelling.where(format_key_path)) from None
    sequence._where = spelling.where(format_key_path)
    check_sequence(sequence)
    check_size(sequence, max_points)
    return sequence


def check_size(sequence: Sequence, max_points: int = DEFAULT_MAX_POINTS) -> int:
    """The point count; InputError when above ``max_points`` (counted, never expanded)."""
    total = sequence.count_points()
    if total > max_points:
        biggest = max(range(len(sequence.study)), key=lambda i: sequence.study[i].count())
        study = sequence.study[biggest]
        factor = sequence.temperature_count() * sequence.supply_count()
        alone = _count_text(study.count() * factor)
        raise InputError(
            f"the sequence expands to {_count_text(total)} points, above the maximum of "
            f"{max_points:,} (study {study.name!r} alone has {alone})",
            where=sequence.where(("study", biggest)),
            fix="use coarser steps or fewer points, split the sequence, or raise the maximum "
            "(--max-points)",
        )
    return total


def _count_text(count: int) -> str:
    """``1,000,000`` for counts below 10**30, else ``about 1.0e+310`` (no float overflow)."""
    if count < 10**30:
        return f"{count:,}"
    exponent = int(math.log10(count))  # exact enough for a message; str() fails past 4300 digits
    lead = count // 10 ** (exponent - 1)
    return f"about {lead // 10}.{lead % 10}e+{exponent}"


def _problem(sequence: Sequence, path: KeyPath, what: str, fix: str) -> InputError:
    return InputError(what, where=sequence.where(path), fix=fix)


def check_sequence(sequence: Sequence) -> None:
    """Checks across keys that the models alone cannot make; raises a located InputError,
    the first problem found, carrying the others of independent checks in ``also`` (a check
    that depends on an earlier key stops at that key's first problem)."""
    problems: list[InputError] = []

    def attempt(check: Callable[..., None], *args: Any) -> None:
        try:
            check(*args)
        except InputError as exc:
            problems.append(exc)

    attempt(_check_margins, sequence)
    cond = sequence.conditions
    attempt(_check_temperature_tolerance, sequence)
    for path, value in (
        (("conditions", "soak"), cond.soak),
        (("conditions", "settle"), cond.settle),
        (("recovery", "backoff"), sequence.recovery.backoff),
    ):
        attempt(_check_duration, sequence, path, value)
    if cond.adaptive_soak is not None:
        attempt(_check_adaptive_soak, sequence, cond.adaptive_soak)
    attempt(_check_supply, sequence)
    attempt(_check_expected_current, sequence)
    seen: dict[str, int] = {}
    for i, study in enumerate(sequence.study):
        if study.name in seen:
            problems.append(_problem(sequence, ("study", i, "name"),
                                     f"study name {study.name!r} is used twice",
                                     f"rename one of them (the first is "
                                     f"study[{seen[study.name]}])"))
            continue
        seen[study.name] = i
        attempt(_check_study, sequence, i, study)
    for path, settings in _analyzer_settings(sequence):  # once for the file: linear time
        attempt(_check_analyzer, sequence, path, settings)
    for j, limit in enumerate(sequence.spec):
        attempt(_check_spec, sequence, j, limit, set(seen))
    if problems:  # `sweeprig check` shows the first twenty and counts the rest
        first = problems[0]
        first.also = (*first.also, *problems[1:])
        raise first


def _check_temperature_tolerance(sequence: Sequence) -> None:
    if sequence.conditions.temperature_tolerance <= 0:
        raise _problem(sequence, ("conditions", "temperature_tolerance"),
                       "temperature_tolerance must be above 0 degC", "write e.g. 1.0")


def _check_supply(sequence: Sequence) -> None:
    """Supply voltages of 0 V or more, and one at all when the supply current is read."""
    cond = sequence.conditions
    if cond.supply is not None and _axis_min(cond.supply) < 0:
        raise _problem(sequence, ("conditions", "supply"), "a supply voltage is negative",
                       "give supply voltages of 0 V or more")
    if cond.supply is None and "supply_current" in sequence.reading_kinds():
        raise _problem(sequence, ("conditions",),
                       "the sequence reads supply_current but sets no supply voltage: sweeprig "
                       "would never set the supply or switch its output on, so the part would "
                       "be measured unpowered (every gain tens of dB below expected_gain)",
                       'add supply = "3.3 V" (the part\'s supply voltage; check its rating '
                       "first) under [conditions], or drop the supply_current reading")


def _check_expected_current(sequence: Sequence) -> None:
    current = sequence.part.expected_supply_current
    if current is not None and not (math.isfinite(current) and current > 0):
        raise _problem(sequence, ("part", "expected_supply_current"),
                       f"expected_supply_current {current:g} A is not above 0 A",
                       'give the part\'s typical supply current, e.g. "45 mA"')


def _check_spec(sequence: Sequence, j: int, limit: SpecField, names: set[str]) -> None:
    """One [[spec]] entry: a study that exists, at least one edge, min not above max."""
    if limit.study is not None and limit.study not in names:
        raise _problem(sequence, ("spec", j, "study"), f"no study is named {limit.study!r}",
                       f"use one of: {', '.join(sorted(names))}")
    if limit.min is None and limit.max is None:
        raise _problem(sequence, ("spec", j), f"the limit on {limit.figure} has neither "
                       "min nor max", "add min = ... and/or max = ...")
    if limit.min is not None and limit.max is not None and limit.min > limit.max:
        raise _problem(sequence, ("spec", j, "min"), f"min {limit.min:g} is above max "
                       f"{limit.max:g}", "swap min and max")


#: Longest wait each duration key accepts, s: a soak of a week, a settling or reconnection
#: wait of an hour. Longer is a typing slip (a unit), not a plan (common practice, no source).
MAX_DURATION_S: dict[str, float] = {
    "soak": 7 * 86400.0, "settle": 3600.0, "backoff": 3600.0, "window": 7 * 86400.0,
    "minimum": 7 * 86400.0, "maximum": 7 * 86400.0, "every": 3600.0,
}


def _check_adaptive_soak(sequence: Sequence, adaptive: AdaptiveSoak) -> None:
    """An adaptive soak needs one criterion the bench can read and times that fit together."""
    cond = sequence.conditions
    base: KeyPath = ("conditions", "adaptive_soak")
    if cond.temperature is None:
        raise _problem(sequence, base, "adaptive_soak is given but the sequence sets no "
                       "temperature, so there is no soak to end early",
                       "add conditions.temperature, or remove [conditions.adaptive_soak]")
    if (adaptive.gain_drift is None) == (adaptive.current_drift is None):
        raise _problem(sequence, base, "adaptive_soak needs exactly one criterion: "
                       "gain_drift or current_drift",
                       'give e.g. gain_drift = "0.02 dB" (or current_drift = "0.2 mA")')
    for key in ("gain_drift", "current_drift"):
        value = getattr(adaptive, key)
        if value is not None and not (math.isfinite(value) and value > 0):
            raise _problem(sequence, (*base, key), f"{key} must be above 0",
                           'give the largest spread that counts as settled, e.g. "0.02 dB"')
    for key in ("window", "minimum", "maximum", "every"):
        value = getattr(adaptive, key)
        if value is not None:
            _check_duration(sequence, (*base, key), value)
    if adaptive.every <= 0 or adaptive.window < adaptive.every:
        raise _problem(sequence, (*base, "window"),
                       f"window {_duration_text(adaptive.window)} must hold at least two "
                       f"readings taken every {_duration_text(adaptive.every)}",
                       "make window at least as long as every (and every above 0 s)")
    longest = cond.soak if adaptive.maximum is None else adaptive.maximum
    if adaptive.minimum > longest:
        raise _problem(sequence, (*base, "minimum"),
                       f"minimum {_duration_text(adaptive.minimum)} is longer than the longest "
                       f"soak {_duration_text(longest)}",
                       "shorten minimum, or raise maximum (or conditions.soak)")
    if adaptive.current_drift is not None and cond.supply is None:
        raise _problem(sequence, (*base, "current_drift"), "current_drift needs the supply "
                       "current, but the sequence sets no supply voltage",
                       "add conditions.supply, or judge by gain_drift")
    if adaptive.gain_drift is not None:
        first = sequence.study[0]
        if "wanted" not in {r.kind for r in first.readings()}:
            raise _problem(sequence, (*base, "gain_drift"),
                           f"gain_drift reads the wanted output at each condition's first "
                           f"point, but the first study ({first.name!r}) does not read wanted",
                           'add "wanted" to the first study\'s read list, or judge by '
                           "current_drift")


def _duration_text(seconds: float) -> str:
    for unit, size in (("days", 86400.0), ("h", 3600.0), ("min", 60.0)):
        if seconds >= size:
            return f"{seconds / size:.4g} {unit}"
    return f"{seconds:.4g} s"


def _check_duration(sequence: Sequence, path: KeyPath, value: float) -> None:
    """Refuse a negative or absurdly long wait, naming the range allowed."""
    key = str(path[-1])
    longest = MAX_DURATION_S[key]
    if 0 <= value <= longest:
        return
    raise _problem(sequence, path,
                   f"{key} {_duration_text(value) if value > 0 else f'{value:g} s'} is outside "
                   f"0 s to {_duration_text(longest)}",
                   f'write a time with its unit, e.g. "{"20 min" if key == "soak" else "50 ms"}"')


def _axis_min(value: AxisValue) -> float:
    if isinstance(value, RangeSpec):
        return value.start
    if isinstance(value, tuple):
        return min(value)
    return float(value)


def _axis_max(value: AxisValue) -> float:
    if isinstance(value, RangeSpec):
        return value.stop
    if isinstance(value, tuple):
        return max(value)
    return float(value)


def _check_study(sequence: Sequence, i: int, study: Study) -> None:
    here: KeyPath = ("study", i)
    if len(set(study.nesting)) != len(study.nesting):
        raise _problem(sequence, (*here, "nesting"), "an axis is listed twice in nesting",
                       "list each axis once, outermost first")
    for k, name in enumerate(study.nesting):
        if getattr(study, name) is None:
            raise _problem(sequence, (*here, "nesting", k),
                           f"{name!r} is not an axis of study {study.name!r}",
                           f"give {name} = ... in the study, or remove it from nesting")
    if _axis_min(study.rf_frequency) <= 0:
        raise _problem(sequence, (*here, "rf_frequency"), "RF frequencies must be above 0 Hz",
                       'use e.g. "2.4 GHz"')
    if study.tone_spacing is not None and _axis_min(study.tone_spacing) <= 0:
        raise _problem(sequence, (*here, "tone_spacing"), "tone spacing must be above 0 Hz",
                       'use e.g. "1 MHz"')
    if study.lo_frequency is not None:
        if study.if_frequency is not None:
            raise _problem(sequence, (*here, "if_frequency"),
                           "a study gives both lo_frequency and if_frequency",
                           "keep lo_frequency for a fixed LO, or if_frequency for an LO that "
                           "follows the RF")
        if _axis_min(study.lo_frequency) <= 0:
            raise _problem(sequence, (*here, "lo_frequency"), "LO frequencies must be above 0",
                           'use e.g. "2.33 GHz"')
    else:
        f_if = sequence.if_frequency_of(study)
        if f_if is None:
            raise _problem(sequence, here, f"study {study.name!r} has no LO frequency",
                           "give lo_frequency in the study, or if_frequency in the study or "
                           "in [mixing] so the LO follows the RF")
        if f_if <= 0:
            raise _problem(sequence, (*here, "if_frequency"), "the IF must be above 0 Hz",
                           'use e.g. "70 MHz"')
        from sweeprig.plan.frequencies import lo_for_if

        for f_rf in (_axis_min(study.rf_frequency), _axis_max(study.rf_frequency)):
            f_lo = lo_for_if(f_rf, f_if, sequence.mixing.conversion, sequence.mixing.lo_side)
            if f_lo <= 0:
                raise _problem(
                    sequence, (*here, "rf_frequency"),
                    f"RF {f_rf / 1e6:g} MHz with IF {f_if / 1e6:g} MHz needs an LO at "
                    f"{f_lo / 1e6:g} MHz, which is not above 0",
                    "check conversion, lo_side and if_frequency in [mixing]")
    names: set[str] = set()
    for k, spec in enumerate(study.readings()):
        at = (*here, "read", k)
        name = spec.name or spec.kind
        if name in names:
            raise _problem(sequence, at, f"reading name {name!r} is used twice in this study",
                           "give one of them name = \"...\"")
        names.add(name)
        if spec.kind in ("im3", "im2") and not study.two_tone:
            raise _problem(sequence, at, f"{spec.kind} needs two tones",
                           'give the study tone_spacing = "1 MHz" (uses the rf2 source)')
        if spec.kind == "image" and sequence.mixing.conversion != "down":
            raise _problem(sequence, at, "the image reading is for downconverters",
                           "for an upconverter read \"sideband\" (the unwanted sideband), "
                           "or set conversion = \"down\" in [mixing]")
        if spec.kind == "sideband" and sequence.mixing.conversion != "up":
            raise _problem(sequence, at, "the sideband reading is for upconverters",
                           "for a downconverter read \"image\" (image rejection), or set "
                           "conversion = \"up\" in [mixing]")
        if spec.kind != "mxn":
            for key in ("order", "min_frequency", "max_frequency", "output_band", "expected"):
                if getattr(spec, key) not in (None, ()):
                    raise _problem(sequence, (*at, key), f"{key} applies only to mxn readings",
                                   f"remove {key}")
        else:
            _check_spur_counting(sequence, at, spec)
            if spec.order is not None and not 1 <= spec.order <= 15:
                raise _problem(sequence, (*at, "order"), f"order {spec.order} is outside 1..15",
                               "use an order such as 3 or 5")
        if spec.attenuation_check and spec.kind not in DISTORTION_KINDS:
            raise _problem(sequence, (*at, "attenuation_check"),
                           "the attenuation check applies to distortion readings (mxn, im3, im2)",
                           "remove attenuation_check here")


#: A product named in an mxn reading's ``expected``: "<m>x<n>", n signed (as reading names).
EXPECTED_PRODUCT = re.compile(r"^(-?\d+)x(-?\d+)$")


def expected_products(spec: ReadingSpec) -> tuple[tuple[int, int], ...]:
    """The (m, n) pairs an mxn reading names in ``expected`` (checked at load)."""
    out = []
    for text in spec.expected:
        found = EXPECTED_PRODUCT.match(text.strip())
        if found:
            out.append((int(found.group(1)), int(found.group(2))))
    return tuple(out)


def _check_spur_counting(sequence: Sequence, at: KeyPath, spec: ReadingSpec) -> None:
    if spec.output_band is not None:
        start, stop = spec.output_band
        if not 0 < start < stop:
            raise _problem(sequence, (*at, "output_band"),
                           f"output_band [{start:g} Hz, {stop:g} Hz] is not a band above 0 Hz",
                           'give [start, stop] with start below stop, e.g. ["90 MHz", "110 MHz"]')
    for k, text in enumerate(spec.expected):
        if not EXPECTED_PRODUCT.match(text.strip()):
            raise _problem(sequence, (*at, "expected", k),
                           f"{text!r} is not a product name",
                           'name products as the readings do, "<m>x<n>", e.g. "1x1" or "2x-1"')


#: Margins accepted, dB: below 0 is no margin; above 60 dB no analyzer could keep them.
MARGIN_RANGE_DB = (0.0, 60.0)


def _check_margins(sequence: Sequence) -> None:
    a = sequence.analyzer
    low, high = MARGIN_RANGE_DB
    for key in ("noise_margin", "distortion_margin"):
        value = getattr(a, key)
        if not low <= value <= high:
            raise _problem(sequence, ("analyzer", key),
                           f"{key} {value:g} dB is outside {low:g} to {high:g} dB",
                           f'write e.g. "{10 if key == "noise_margin" else 20} dB"')
    if not 1e-3 <= a.max_sweep_time <= 3600.0:
        raise _problem(sequence, ("analyzer", "max_sweep_time"),
                       f"max_sweep_time {_duration_text(a.max_sweep_time)} is outside 1 ms to "
                       "1 h", 'write e.g. "2 s"')
    nf = sequence.part.expected_noise_figure
    if nf is not None and not 0.0 <= nf <= 60.0:
        raise _problem(sequence, ("part", "expected_noise_figure"),
                       f"a noise figure of {nf:g} dB is outside 0 to 60 dB",
                       'write the part\'s single-sideband noise figure, e.g. "12 dB"')


def _analyzer_settings(sequence: Sequence) -> list[tuple[KeyPath, AnalyzerSettings]]:
    found: list[tuple[KeyPath, AnalyzerSettings]] = [(("analyzer",), sequence.analyzer)]
    for i, study in enumerate(sequence.study):
        if study.analyzer is not None:
            found.append((("study", i, "analyzer"), study.analyzer))
        for k, spec in enumerate(study.readings()):
            if spec.analyzer is not None:
                found.append((("study", i, "read", k, "analyzer"), spec.analyzer))
    return found


def _check_analyzer(sequence: Sequence, path: KeyPath, s: AnalyzerSettings) -> None:
    def bad(key: str, what: str, fix: str) -> InputError:
        return _problem(sequence, (*path, key), what, fix)

    if isinstance(s.rbw, float) and s.rbw <= 0:
        raise bad("rbw", "rbw must be above 0 Hz", 'use e.g. "1 kHz" or "auto"')
    if isinstance(s.span, float) and s.span < 0:
        raise bad("span", "span must not be negative", 'use e.g. "100 kHz" or "auto"')
    if isinstance(s.attenuation, float) and not 0 <= s.attenuation <= 70:
        raise bad("attenuation", "attenuation must be within 0..70 dB", 'use e.g. "10 dB"')
    if isinstance(s.averages, int) and not isinstance(s.averages, bool) and s.averages < 1:
        raise bad("averages", "averages must be at least 1", "use 1 for no averaging")
