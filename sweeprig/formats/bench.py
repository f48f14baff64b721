"""Bench files: what is on the bench, how it is wired, and the safety limits.

Roles map to a VISA resource string and a driver profile name (a file in ``drivers/``).
Path losses are per connection (see :mod:`sweeprig.formats.pathloss`). Limits are enforced by
the pre-flight check before any output is enabled. :func:`load_bench` is the entry point.
"""

from __future__ import annotations

import os
import re
from collections.abc import Callable, Collection
from pathlib import Path
from typing import TYPE_CHECKING, Annotated, Any, Literal

from pydantic import BeforeValidator, Discriminator, Field, PrivateAttr, Tag, WithJsonSchema
from pydantic_core import PydanticCustomError

from sweeprig.errors import InputError
from sweeprig.formats.enr import EnrTable
from sweeprig.formats.fields import (
    TAG_PREFIX,
    Current,
    Frequency,
    Frozen,
    LevelDb,
    LocatedFile,
    Power,
    StrictBool,
    StrictInt,
    Temperature,
    Time,
    Voltage,
    quantity_parser,
)
from sweeprig.formats.loading import display_path, load_document, validate
from sweeprig.formats.noise_bench import NoiseSourceBench, check_noise_source, load_enr_for
from sweeprig.formats.pathloss import (
    ConstantLoss,
    PathLoss,
    read_csv_loss,
    read_touchstone_loss,
)
from sweeprig.formats.sensor import SensorSpec
from sweeprig.formats.timebase import ResolvedTimebase, Timebase, resolve_timebase
from sweeprig.formats.toml_locate import KeyPath
from sweeprig.transport.backend import bench_file_fix, bench_file_problem
from sweeprig.transport.resources import ResourceNameError, parse_resource
from sweeprig.units import parse_quantity

if TYPE_CHECKING:
    from sweeprig.plan.margins import AnalyzerSpecs

#: Every role a bench may fill.
ROLES: tuple[str, ...] = (
    "rf", "rf2", "lo", "sa", "pm", "dc", "chamber", "switch", "simctl", "nsdc",
)
#: Source roles (their output power is limited by ``limits.source_max_power``).
SOURCE_ROLES: tuple[str, ...] = ("rf", "rf2", "lo")
#: Connections with a path loss: source → DUT port, and DUT port → analyzer.
CONNECTIONS: tuple[str, ...] = ("rf", "rf2", "lo", "if", "rf_port", "lo_port")
#: Placeholder resource of a role on the simulated bench (filled in at run time).
SIM_RESOURCE = "sim"

_PROFILE_PATTERN = r"^[a-z0-9-]+$"
_RESOURCE = re.compile(r"^(TCPIP|GPIB|USB|ASRL|VXI|PXI|VICP)[^:]*::.+", re.IGNORECASE)
#: A serial resource: a port number, a COM port, or a serial device file (pyvisa-py opens the
#: file it names, and opening some device files has effects of its own, so only serial ports).
_SERIAL = re.compile(r"^ASRL(\d+|COM\d+|/dev/(tty|cu\.|rfcomm|serial/)[A-Za-z0-9_.:/-]*?)"
                     r"(::INSTR)?$", re.IGNORECASE)


class Role(Frozen):
    """One instrument on the bench."""

    resource: str = Field(description='VISA resource string, e.g. '
                          '"TCPIP0::192.0.2.10::5025::SOCKET", or "sim" on the simulated bench')
    profile: str = Field(pattern=_PROFILE_PATTERN,
                         description="driver profile name (a file in drivers/), e.g. scpi-source")
    noise_figure: LevelDb | None = Field(
        None, description="sa only: the analyzer's noise figure, for auto RBW (default 24 dB)")
    channels: dict[Literal["if", "rf", "lo", "pm_rf", "pm_lo", "part", "thru"],
                   StrictInt] | None = Field(
        None, description="switch only: channel that routes the analyzer to each DUT port "
        "(default if = 1, rf = 2, lo = 3); for calibration, optional: the power-meter sensor "
        "to the DUT RF or LO input plane (pm_rf, pm_lo) and the DUT position to the part or a "
        "calibration thru (part, thru); without them the calibration asks the operator")


class Roles(Frozen):
    """The instruments by role. Only the roles a sequence needs must be present."""

    rf: Role | None = Field(None, description="RF source (tone 1)")
    rf2: Role | None = Field(None, description="second RF source through the combiner (tone 2)")
    lo: Role | None = Field(None, description="LO source")
    sa: Role | None = Field(None, description="spectrum analyzer (on the IF port, or via the "
                            "switch on the RF or LO port)")
    pm: Role | None = Field(None, description="power meter (sensor at the DUT RF port plane)")
    dc: Role | None = Field(None, description="DC supply of the DUT")
    chamber: Role | None = Field(None, description="thermal chamber")
    switch: Role | None = Field(None, description="RF switch routing the analyzer input")
    simctl: Role | None = Field(
        None, description="simulated bench only: its clock control, so waits pass in "
        "simulated time (written by `sweeprig sim serve --bench-file`)")
    nsdc: Role | None = Field(None, description="DC supply output driving the noise source "
                              "(see [noise_source])")


class BenchInfo(Frozen):
    """Name and connection defaults of the bench."""

    name: str = Field(description="name of the bench")
    location: str = Field("", description="where it stands")
    visa_library: str = Field("@py", description='pyvisa backend by name: "@py" (pyvisa-py) or '
                              '"@ivi" (the system VISA); never a library path (give that with '
                              '--visa-library or SWEEPRIG_VISA_LIBRARY)')
    timeout: Time = Field(5.0, description="I/O timeout per instrument command")


class LossFile(Frozen):
    """A path loss given as a table: read from a file (paths relative to the bench file), or
    a constant gain (an amplifier in the path, stated as such)."""

    csv: str | None = Field(None, description="CSV table with columns freq_hz, loss_db")
    touchstone: str | None = Field(None, description="two-port Touchstone file (.s2p); "
                                   "loss = −20·log10|S21|")
    gain: LevelDb | None = Field(None, description="a constant gain instead of a loss (an "
                                 "amplifier in the path), e.g. \"20 dB\"")
    amplifier: StrictBool = Field(False, description="with csv or touchstone: the connection "
                                  "holds an amplifier, so the table may show gain (negative "
                                  "loss); without it, gain in a table is refused")
    cascade: tuple[str, ...] | None = Field(
        None, description="two-port Touchstone files (.s2p) in signal order, cascaded into "
        "one network (e.g. a cable, then a test board's input trace); loss = −20·log10|S21|")
    deembed_start: tuple[str, ...] = Field(
        (), description="with cascade: two-ports removed from the start of the chain (parts "
        "a measurement included that the bench does not have)")
    deembed_end: tuple[str, ...] = Field(
        (), description="with cascade: two-ports removed from the end of the chain")


def _loss_shape(value: Any) -> str:
    return f"{TAG_PREFIX}file" if isinstance(value, dict | LossFile) else f"{TAG_PREFIX}constant"


LossValue = Annotated[
    Annotated[LevelDb, Tag(f"{TAG_PREFIX}constant")]
    | Annotated[LossFile, Tag(f"{TAG_PREFIX}file")],
    Discriminator(_loss_shape),
]


class PathLosses(Frozen):
    """Loss of each connection, dB (positive = attenuation). Left out: 0 dB."""

    rf: LossValue = Field(0.0, description="rf source → DUT RF port")
    rf2: LossValue = Field(0.0, description="rf2 source → DUT RF port (incl. the combiner)")
    lo: LossValue = Field(0.0, description="lo source → DUT LO port")
    if_: LossValue = Field(0.0, alias="if", description="DUT IF port → analyzer")
    rf_port: LossValue = Field(0.0, description="DUT RF port → analyzer (via the switch)")
    lo_port: LossValue = Field(0.0, description="DUT LO port → analyzer (via the switch)")


class SourceLimits(Frozen):
    """Highest output setting allowed for each source, dBm (at the source's connector)."""

    rf: Power | None = None
    rf2: Power | None = None
    lo: Power | None = None


class PartRatings(Frozen):
    """The part's absolute maximum ratings (never exceeded, at the DUT's port planes)."""

    rf_input_max: Power | None = Field(None, description="RF port, total input power")
    lo_input_max: Power | None = Field(None, description="LO port input power")
    supply_max: Voltage | None = Field(None, description="supply voltage")


class Limits(Frozen):
    """Safety limits, enforced before any output is enabled."""

    source_max_power: SourceLimits = Field(default_factory=SourceLimits)
    analyzer_max_input: Power | None = Field(None, description="spectrum analyzer input")
    power_meter_max_input: Power | None = Field(None, description="power meter sensor input")
    supply_max_voltage: Voltage | None = Field(None, description="highest supply setting")
    supply_max_current: Current | None = Field(
        None, description="supply current limit (also set as the supply's current limit)")
    chamber_min: Temperature | None = Field(None, description="lowest chamber set point")
    chamber_max: Temperature | None = Field(None, description="highest chamber set point")
    part: PartRatings = Field(default_factory=PartRatings)


def _off_or(kind_parser: Callable[[Any], float]) -> Callable[[Any], Any]:
    def parse(value: Any) -> Any:
        if isinstance(value, str) and value.strip().lower() == "off":
            return "off"
        return kind_parser(value)

    return parse


_voltage = quantity_parser("voltage")
_temperature = quantity_parser("temperature")


_OFF_SCHEMA = {"anyOf": [{"type": "number"}, {"type": "string"}]}


class SafeState(Frozen):
    """Where the bench is left at the end of a run and on any failure (RF is always off)."""

    supply: Annotated[Any, BeforeValidator(_off_or(_voltage)), WithJsonSchema(
        {**_OFF_SCHEMA, "description": '"off", or a safe voltage such as "0 V"'})] = "off"
    chamber: Annotated[Any, BeforeValidator(_off_or(_temperature)), WithJsonSchema(
        {**_OFF_SCHEMA, "description": '"off" (conditioning off), or an idle set point '
         'such as "25 degC"'})] = 25.0


#: Said wherever a stated figure is missing and its conservative default is used.
ASSUMED = "assumed, not stated by the bench file"


def _dbc_per_hz(value: Any) -> float:
    """A phase-noise density: "-100 dBc/Hz" (or a bare number in dBc/Hz)."""
    text = value
    if isinstance(value, str):
        low = value.strip().lower()
        for suffix in ("dbc/hz", "dbc"):
            if low.endswith(suffix):
                text = value.strip()[: -len(suffix)] + "dB"
                break
    try:
        return parse_quantity(text, "level_db")
    except Exception:
        raise PydanticCustomError(
            "quantity", "{what}",
            {"what": f"{value!r} is not a phase-noise density",
             "fix": 'write it in dBc/Hz, e.g. "-100 dBc/Hz"'}) from None


DbcPerHz = Annotated[float, BeforeValidator(_dbc_per_hz), WithJsonSchema(
    {"anyOf": [{"type": "number"}, {"type": "string"}],
     "description": 'a phase-noise density, e.g. "-100 dBc/Hz"'})]


class PhaseNoisePoint(Frozen):
    """The analyzer's LO phase noise at one offset from a line."""

    offset: Frequency = Field(description='offset from the carrier, e.g. "10 kHz"')
    level: DbcPerHz = Field(description='single-sideband phase noise there, e.g. "-100 dBc/Hz"')


class AnalyzerFigures(Frozen):
    """What the bench's spectrum analyzer can do, from its data sheet (for the planner's
    predictions). Every figure left out takes a conservative default, and `sweeprig plan`
    says it is assumed, not stated by the bench file. Levels are at the first mixer, i.e. at
    the input with 0 dB input attenuation. The noise figure is ``roles.sa.noise_figure``."""

    toi: Power | None = Field(None, description="third-order intercept at the first mixer "
                              "(default +10 dBm, assumed)")
    soi: Power | None = Field(None, description="two-tone second-order intercept at the first "
                              "mixer (the second-harmonic intercept minus 6.02 dB; default "
                              "+35 dBm, assumed)")
    p1db: Power | None = Field(None, description="first-mixer 1 dB compression point "
                               "(default 0 dBm, assumed)")
    overload: Power | None = Field(None, description="first-mixer total level above which the "
                                   "analyzer reports overload (default -3 dBm, assumed)")
    phase_noise: tuple[PhaseNoisePoint, ...] | None = Field(
        None, description="LO phase noise at one or more offsets, e.g. [{ offset = "
        "\"10 kHz\", level = \"-100 dBc/Hz\" }] (default -85/-95/-105/-125 dBc/Hz at "
        "1 kHz/10 kHz/100 kHz/1 MHz, assumed)")


class SourceFigures(Frozen):
    """What a source puts out besides its carrier, from its data sheet (after any filter)."""

    harmonics: tuple[LevelDb, ...] | None = Field(
        None, description='harmonic levels relative to the carrier from the 2nd up, e.g. '
        '["-35 dBc", "-45 dBc"] (orders not listed: negligible; key left out: -30 dBc for '
        "the 2nd to 5th, assumed)")


class SourcesFigures(Frozen):
    """The sources' stated harmonics, per source role."""

    rf: SourceFigures | None = Field(None, description="RF source (tone 1)")
    rf2: SourceFigures | None = Field(None, description="second RF source (tone 2)")
    lo: SourceFigures | None = Field(None, description="LO source")


#: Conservative defaults of the analyzer's figures (a mid-range swept analyzer without
#: preamplifier, pessimistic side; from memory, no single source).
DEFAULT_TOI_DBM = 10.0
DEFAULT_SOI_DBM = 35.0
DEFAULT_P1DB_DBM = 0.0
DEFAULT_OVERLOAD_DBM = -3.0
DEFAULT_PHASE_NOISE: tuple[tuple[float, float], ...] = (
    (1e3, -85.0), (1e4, -95.0), (1e5, -105.0), (1e6, -125.0))
#: A signal generator's harmonics without filtering (typical data-sheet figure: -30 dBc;
#: common practice, no source), 2nd to 5th.
DEFAULT_HARMONICS_DBC: tuple[float, ...] = (-30.0, -30.0, -30.0, -30.0)
#: Bounds of stated figures (outside: a typing slip, not an instrument).
FIGURE_RANGE_DBM = (-60.0, 100.0)


class SpecLimit(Frozen):
    """A specification given with its distribution."""

    value: LevelDb = Field(description='the ± limit, e.g. "0.3 dB"')
    shape: Literal["rectangular", "triangular", "u-shaped", "normal-k2"] = Field(
        "rectangular", description="how the limit is read: rectangular (a ± limit, GUM "
        "4.3.7), triangular, u-shaped, or normal-k2 (stated at 95 %, k = 2)")


SpecValue = Annotated[
    Annotated[LevelDb, Tag(f"{TAG_PREFIX}constant")]
    | Annotated[SpecLimit, Tag(f"{TAG_PREFIX}table")],
    Discriminator(lambda v: f"{TAG_PREFIX}table" if isinstance(v, dict | SpecLimit)
                  else f"{TAG_PREFIX}constant"),
]


class UncertaintySpecs(Frozen):
    """Instrument specifications for the figures' uncertainty budgets (± limits, read as
    rectangular unless a table says otherwise). Left out: a typical value, marked in every
    budget as an assumption."""

    input_level: SpecValue | None = Field(
        None, description="level at the DUT inputs without a calibration: source level "
        "accuracy and the typed path loss together (default 1 dB)")
    output_path: SpecValue | None = Field(
        None, description="typed output path loss without a calibration (default 0.3 dB)")
    analyzer_absolute: SpecValue | None = Field(
        None, description="analyzer absolute amplitude accuracy (default 0.5 dB)")
    analyzer_linearity: SpecValue | None = Field(
        None, description="analyzer display (scale) linearity (default 0.1 dB)")
    power_meter: SpecValue | None = Field(
        None, description="power meter and sensor accuracy, calibration factor included "
        "(default 0.15 dB)")
    bench_match: float | None = Field(
        None, description="|Γ| of the bench's connections at the DUT planes (default 0.05)")
    part_match: float | None = Field(
        None, description="|Γ| of the part's ports (default 0.2)")
    guard_band: StrictBool = Field(
        False, description="judge limits with the expanded uncertainty as a guard band: "
        "pass only when value ± U is inside, fail only when it is outside")


class Bench(LocatedFile):
    """A whole bench file."""

    format: Literal[1] = Field(1, description="version of this file format")
    include: tuple[str, ...] = Field((), description="fragments merged under this file")
    bench: BenchInfo
    roles: Roles = Field(default_factory=Roles)
    path_loss: PathLosses = Field(default_factory=PathLosses)
    limits: Limits = Field(default_factory=Limits)
    safe_state: SafeState = Field(default_factory=SafeState)
    analyzer: AnalyzerFigures = Field(
        default_factory=AnalyzerFigures,
        description="the analyzer's stated figures, for the planner's predictions")
    sources: SourcesFigures = Field(
        default_factory=SourcesFigures,
        description="the sources' stated harmonics, for the planner's predictions")
    uncertainty: UncertaintySpecs = Field(default_factory=UncertaintySpecs)
    noise_source: NoiseSourceBench | None = Field(
        None, description="the noise source for noise-figure readings and its ENR table")

    sensor: SensorSpec = Field(default_factory=SensorSpec,
                               description="the power-meter sensor: calibration factor, "
                               "zeroing, averages (see sweeprig.formats.sensor)")
    timebase: Timebase | None = Field(
        None, description="which 10 MHz reference each source and the analyzer runs on "
        "(see sweeprig.formats.timebase); left out: products are read at their computed "
        "frequency")

    _losses: dict[str, PathLoss] = PrivateAttr(default_factory=dict)
    _enr: EnrTable | None = PrivateAttr(None)

    @property
    def enr_table(self) -> EnrTable | None:
        """The noise source's ENR table (None without a ``[noise_source]``)."""
        return self._enr

    def role(self, name: str) -> Role | None:
        return getattr(self.roles, name)

    @property
    def noise_drive_role(self) -> str:
        """The role whose output switches the noise source ("nsdc" or "sa")."""
        return self.noise_source.drive if self.noise_source is not None else "nsdc"

    def references(self) -> ResolvedTimebase | None:
        """The ``[timebase]`` resolved to each role's reference and tolerance (None without
        the section); raises a located error for a lock to nothing or a cycle."""
        if self.timebase is None:
            return None
        return resolve_timebase(self.timebase, lambda r: self.role(r) is not None, self.where)

    def loss(self, connection: str) -> PathLoss:
        """Path loss of ``connection`` (one of :data:`CONNECTIONS`)."""
        if connection not in CONNECTIONS:
            raise KeyError(connection)
        if connection not in self._losses:
            value = getattr(self.path_loss, "if_" if connection == "if" else connection)
            if isinstance(value, LossFile) and value.gain is not None and \
                    value.csv is None and value.touchstone is None:
                value = -value.gain  # an amplifier: a gain is a negative loss
            if isinstance(value, LossFile):
                raise InputError(f"path loss {connection} comes from a file but the bench was "
                                 "not loaded from disk", where=self.where(("path_loss",
                                                                           connection)))
            self._losses[connection] = ConstantLoss(float(value), self.where(("path_loss",
                                                                             connection)))
        return self._losses[connection]

    def switch_channel(self, port: str) -> int:
        """Switch channel that routes the analyzer to DUT ``port`` ("if", "rf", "lo")."""
        defaults = {"if": 1, "rf": 2, "lo": 3}
        role = self.roles.switch
        if role is not None and role.channels and port in role.channels:
            return role.channels[port]  # type: ignore[index]
        return defaults[port]

    def switch_route(self, name: str) -> int | None:
        """The switch channel of a calibration route (``pm_rf``, ``pm_lo``, ``part``,
        ``thru``), or None when the bench's switch has none (the operator moves the cable)."""
        role = self.roles.switch
        if role is None or not role.channels:
            return None
        return role.channels.get(name)  # type: ignore[call-overload]

    def analyzer_noise_figure_db(self) -> float:
        """The analyzer's noise figure for auto RBW (24 dB when the bench does not say).

        24 dB: a typical swept analyzer without preamplifier; from memory, no single source.
        """
        sa = self.roles.sa
        return sa.noise_figure if sa is not None and sa.noise_figure is not None else 24.0

    def analyzer_specs(self) -> AnalyzerSpecs:
        """The analyzer's figures for the planner, defaults filled in and named as assumed."""
        from sweeprig.plan.margins import AnalyzerSpecs  # plan sits above formats

        a = self.analyzer
        assumed = {name for name in ("toi", "soi", "p1db", "overload", "phase_noise")
                   if getattr(a, name) is None}
        sa = self.roles.sa
        if sa is None or sa.noise_figure is None:
            assumed.add("noise_figure")
        return AnalyzerSpecs(
            noise_figure_db=self.analyzer_noise_figure_db(),
            toi_dbm=DEFAULT_TOI_DBM if a.toi is None else a.toi,
            soi_dbm=DEFAULT_SOI_DBM if a.soi is None else a.soi,
            p1db_dbm=DEFAULT_P1DB_DBM if a.p1db is None else a.p1db,
            overload_dbm=DEFAULT_OVERLOAD_DBM if a.overload is None else a.overload,
            phase_noise=DEFAULT_PHASE_NOISE if a.phase_noise is None else tuple(
                sorted((p.offset, p.level) for p in a.phase_noise)),
            assumed=frozenset(assumed))

    def source_harmonics_dbc(self, role: str) -> tuple[tuple[float, ...], bool]:
        """Harmonic levels (dBc, 2nd up) of source ``role`` and whether they are assumed."""
        figures = getattr(self.sources, role)
        if figures is None or figures.harmonics is None:
            return DEFAULT_HARMONICS_DBC, True
        return tuple(figures.harmonics), False

    def is_simulated(self) -> bool:
        """True when every present role has the placeholder resource ``"sim"``."""
        present = [self.role(r) for r in ROLES if self.role(r) is not None]
        return bool(present) and all(r.resource == SIM_RESOURCE for r in present)


def load_bench(path: str | os.PathLike[str], *, known_profiles: Collection[str] | None = None
               ) -> Bench:
    """Read, validate and check a bench file; load its loss tables.

    ``known_profiles``: names of the driver profiles that exist (the caller lists
    ``drivers/``); when given, a role naming another profile is an error. Raises a located
    :class:`~sweeprig.errors.InputError` for any problem.
    """
    doc = load_document(path)
    bench = validate(Bench, doc)
    bench._where = doc.where
    bench._source = doc.display
    check_bench(bench, known_profiles=known_profiles)
    for name in CONNECTIONS:
        value = getattr(bench.path_loss, "if_" if name == "if" else name)
        key = ("path_loss", name)
        if isinstance(value, LossFile) and value.gain is None:
            origin = doc.root.origin(key).path.parent
            bench._losses[name] = _load_loss_file(bench, key, value, origin)
    if bench.noise_source is not None:
        where = bench.where(("noise_source",))
        check_noise_source(bench.noise_source,
                           has_drive_role=bench.role(bench.noise_source.drive) is not None,
                           where=where)
        origin = doc.root.origin(("noise_source", "enr_file")).path.parent
        bench._enr = load_enr_for(bench.noise_source, origin,
                                  where=bench.where(("noise_source", "enr_file")))
    return bench


def _load_loss_file(bench: Bench, key: KeyPath, value: LossFile, base: Path) -> PathLoss:
    where = bench.where(key)
    if value.cascade is not None:
        from sweeprig.formats.networks import chain_loss

        return chain_loss([base / f for f in value.cascade],
                          deembed_start=[base / f for f in value.deembed_start],
                          deembed_end=[base / f for f in value.deembed_end], where=where,
                          display=f"path_loss.{key[-1]}", allow_gain=value.amplifier)
    if value.csv is not None:
        path = base / value.csv
        return read_csv_loss(path, display=display_path(path), where=where,
                             allow_gain=value.amplifier)
    assert value.touchstone is not None
    path = base / value.touchstone
    return read_touchstone_loss(path, display=display_path(path), where=where,
                                allow_gain=value.amplifier)


def check_bench(bench: Bench, *, known_profiles: Collection[str] | None = None) -> None:
    """Checks across keys: resource strings, profile names, role-specific options, limits."""
    problem = bench_file_problem(bench.bench.visa_library)
    if problem is not None:  # checked first: nothing else matters if the file names code
        raise InputError(problem, where=bench.where(("bench", "visa_library")),
                         fix=bench_file_fix())
    for name in ROLES:
        role = bench.role(name)
        if role is None:
            continue
        here = ("roles", name)
        res = role.resource.strip()
        if res != SIM_RESOURCE and not _RESOURCE.match(res):
            raise InputError(f"{role.resource!r} is not a VISA resource string",
                             where=bench.where((*here, "resource")),
                             fix='write e.g. "TCPIP0::192.0.2.10::5025::SOCKET", '
                             '"GPIB0::18::INSTR", or "sim" on the simulated bench')
        if res.upper().startswith("ASRL") and (not _SERIAL.match(res) or ".." in res):
            raise InputError(f"{role.resource!r} is not a serial port",
                             where=bench.where((*here, "resource")),
                             fix='write "ASRL1::INSTR" or "ASRL/dev/ttyUSB0::INSTR" (a serial '
                             "port's device: /dev/tty*, /dev/cu.*, /dev/serial/...; no other "
                             "file may be named)")
        if res != SIM_RESOURCE:
            try:
                parse_resource(role.resource)
            except ResourceNameError as exc:
                raise InputError(f"{role.resource!r} is not a VISA resource string: {exc}",
                                 where=bench.where((*here, "resource")),
                                 fix='write e.g. "TCPIP0::192.0.2.10::5025::SOCKET" or '
                                 '"GPIB0::18::INSTR"') from None
        if known_profiles is not None and role.profile not in known_profiles:
            import difflib

            close = difflib.get_close_matches(role.profile, list(known_profiles), n=1)
            hint = f"did you mean {close[0]!r}? " if close else ""
            raise InputError(f"no driver profile named {role.profile!r}",
                             where=bench.where((*here, "profile")),
                             fix=f"{hint}known profiles: {', '.join(sorted(known_profiles))}")
        if role.noise_figure is not None and name != "sa":
            raise InputError("noise_figure applies only to the sa role",
                             where=bench.where((*here, "noise_figure")), fix="remove it")
        if role.channels is not None and name != "switch":
            raise InputError("channels applies only to the switch role",
                             where=bench.where((*here, "channels")), fix="remove it")
    lim = bench.limits
    if lim.chamber_min is not None and lim.chamber_max is not None and \
            lim.chamber_min > lim.chamber_max:
        raise InputError("chamber_min is above chamber_max",
                         where=bench.where(("limits", "chamber_min")), fix="swap them")
    if lim.supply_max_current is not None and lim.supply_max_current <= 0:
        raise InputError("supply_max_current must be above 0 A",
                         where=bench.where(("limits", "supply_max_current")),
                         fix='write e.g. "150 mA"')
    if isinstance(bench.safe_state.supply, float) and lim.supply_max_voltage is not None and \
            bench.safe_state.supply > lim.supply_max_voltage:
        raise InputError("the safe-state supply voltage is above limits.supply_max_voltage",
                         where=bench.where(("safe_state", "supply")),
                         fix='use "off" or a lower voltage')
    _check_safe_state(bench)
    timeout = bench.bench.timeout
    if not MIN_TIMEOUT_S <= timeout <= MAX_TIMEOUT_S:
        low = "not above 0 s" if timeout <= 0 else "too short" if timeout < MIN_TIMEOUT_S \
            else "too long"
        raise InputError(f"the I/O timeout {timeout:g} s is {low}: it must be within 1 ms "
                         f"to {MAX_TIMEOUT_S / 60:g} min",
                         where=bench.where(("bench", "timeout")),
                         fix='write a time such as "5 s", or leave the key out (5 s)')
    _check_losses(bench)
    bench.references()  # [timebase]: every lock resolves
    _check_figures(bench)
    _check_uncertainty(bench)
    sa = bench.roles.sa
    if sa is not None and sa.noise_figure is not None and \
            not 0 <= sa.noise_figure <= MAX_NOISE_FIGURE_DB:
        raise InputError(f"a noise figure of {sa.noise_figure:g} dB is impossible here: it must "
                         f"be within 0 to {MAX_NOISE_FIGURE_DB:g} dB (a noise figure is never "
                         "negative)",
                         where=bench.where(("roles", "sa", "noise_figure")),
                         fix='write the analyzer\'s noise figure from its data sheet, e.g. '
                         '"24 dB", or leave the key out')


#: I/O timeouts: pyvisa counts whole milliseconds, so 1 ms is the shortest it can honour;
#: above 10 min a lost reply would stall the run for longer than any command takes.
MIN_TIMEOUT_S = 1e-3
MAX_TIMEOUT_S = 600.0
#: Highest analyzer noise figure accepted (a swept analyzer without preamplifier is about
#: 20 to 30 dB; common practice, no source).
MAX_NOISE_FIGURE_DB = 60.0


def _check_losses(bench: Bench) -> None:
    """Refuse negative constant losses (a gain must be written as one) and malformed tables."""
    for name in CONNECTIONS:
        value = getattr(bench.path_loss, "if_" if name == "if" else name)
        key = ("path_loss", name)  # located only for a message: a locator costs a parse
        if isinstance(value, float) and value < 0:
            raise InputError(
                f"a path loss of {value:g} dB is negative: a cable, attenuator or switch "
                "loses power (0 dB or more)",
                where=bench.where(key),
                fix=f'write the loss as 0 dB or more; for an amplifier in the path state the '
                f'gain: {name} = {{ gain = "{-value:g} dB" }}')
        if not isinstance(value, LossFile):
            continue
        given = [k for k in ("csv", "touchstone", "gain", "cascade")
                 if getattr(value, k) is not None]
        if len(given) != 1:
            raise InputError("a path loss table needs exactly one of csv, touchstone, cascade "
                             "or gain",
                             where=bench.where(key), fix='write { csv = "cal/rf.csv" }, '
                             '{ touchstone = "cal/rf.s2p" }, { cascade = ["cable.s2p", '
                             '"board.s2p"] } or { gain = "20 dB" }')
        if (value.deembed_start or value.deembed_end) and value.cascade is None:
            raise InputError("deembed_start and deembed_end go with cascade",
                             where=bench.where(key),
                             fix='write { cascade = ["cable.s2p"], deembed_end = '
                             '["adapter.s2p"] }')
        if value.cascade is not None and not value.cascade:
            raise InputError("cascade lists no file", where=bench.where(key),
                             fix='name the two-port files in signal order, e.g. '
                             '["cable.s2p", "board.s2p"]')
        if value.gain is not None:
            if value.gain < 0:
                raise InputError(
                    f"a gain of {value.gain:g} dB is negative: that is a loss",
                    where=bench.where(key),
                    fix=f'write it as a loss: {name} = "{-value.gain:g} dB"')
            if value.amplifier:
                raise InputError("amplifier = true goes with a csv or touchstone table",
                                 where=bench.where(key),
                                 fix="remove amplifier (a gain is already one)")


def _check_figures(bench: Bench) -> None:
    """Refuse stated analyzer and source figures no instrument has (located, with a fix)."""
    a = bench.analyzer
    low, high = FIGURE_RANGE_DBM
    for key in ("toi", "soi", "p1db", "overload"):
        value = getattr(a, key)
        if value is not None and not low <= value <= high:
            raise InputError(f"analyzer {key} {value:g} dBm is outside {low:g} to {high:g} dBm",
                             where=bench.where(("analyzer", key)),
                             fix="write the figure from the analyzer's data sheet, e.g. "
                             '"15 dBm", or leave the key out (a conservative default is '
                             "assumed)")
    if a.toi is not None and a.p1db is not None and a.p1db > a.toi:
        raise InputError(f"analyzer p1db {a.p1db:g} dBm is above its toi {a.toi:g} dBm: a "
                         "compression point lies below the third-order intercept (typically "
                         "about 10 dB)", where=bench.where(("analyzer", "p1db")),
                         fix="check both figures against the data sheet (both at the first "
                         "mixer, 0 dB attenuation)")
    if a.phase_noise is not None:
        if not a.phase_noise:
            raise InputError("phase_noise is empty", where=bench.where(("analyzer",
                                                                        "phase_noise")),
                             fix='give at least one point, e.g. [{ offset = "10 kHz", '
                             'level = "-100 dBc/Hz" }], or leave the key out')
        seen: set[float] = set()
        for i, point in enumerate(a.phase_noise):
            here = ("analyzer", "phase_noise", i)
            if point.offset <= 0:
                raise InputError("a phase-noise offset must be above 0 Hz",
                                 where=bench.where((*here, "offset")), fix='e.g. "10 kHz"')
            if point.offset in seen:
                raise InputError(f"the offset {point.offset:g} Hz is given twice",
                                 where=bench.where((*here, "offset")),
                                 fix="give each offset once")
            seen.add(point.offset)
            if not -200.0 <= point.level <= -20.0:
                raise InputError(f"a phase noise of {point.level:g} dBc/Hz is outside -200 to "
                                 "-20 dBc/Hz", where=bench.where((*here, "level")),
                                 fix='write the single-sideband density in dBc/Hz, e.g. '
                                 '"-100 dBc/Hz" (negative)')
    for role in SOURCE_ROLES:
        figures = getattr(bench.sources, role)
        if figures is None or figures.harmonics is None:
            continue
        for i, level in enumerate(figures.harmonics):
            if not -200.0 <= level <= 0.0:
                raise InputError(f"a harmonic at {level:g} dBc is not below the carrier",
                                 where=bench.where(("sources", role, "harmonics", i)),
                                 fix='write each harmonic relative to the carrier, negative, '
                                 'e.g. "-35 dBc" (the first entry is the 2nd harmonic)')


#: Said with every safe-state refusal: the safe state is what protects the DUT after a run.
SAFE_STATE_CAUTION = ("Caution: the safe state is where the bench is left after a run and on "
                      "any failure; it must be within every limit.")


def _check_safe_state(bench: Bench) -> None:
    """Refuse a safe state the limits themselves forbid (the run would end unsafe)."""
    lim = bench.limits
    supply = bench.safe_state.supply
    part_max = lim.part.supply_max
    if isinstance(supply, float) and part_max is not None and supply > part_max:
        raise InputError(
            f"the safe-state supply voltage {supply:g} V is above the part's rating "
            f"limits.part.supply_max ({part_max:g} V)",
            where=bench.where(("safe_state", "supply")),
            fix=f'use "off" or a voltage at most {part_max:g} V. {SAFE_STATE_CAUTION}')
    chamber = bench.safe_state.chamber
    if not isinstance(chamber, float):
        return
    if lim.chamber_max is not None and chamber > lim.chamber_max:
        raise InputError(
            f"the safe-state chamber set point {chamber:g} degC is above limits.chamber_max "
            f"({lim.chamber_max:g} degC)",
            where=bench.where(("safe_state", "chamber")),
            fix=f'use "off" or a set point between the chamber_min and chamber_max limits. '
            f"{SAFE_STATE_CAUTION}")
    if lim.chamber_min is not None and chamber < lim.chamber_min:
        raise InputError(
            f"the safe-state chamber set point {chamber:g} degC is below limits.chamber_min "
            f"({lim.chamber_min:g} degC)",
            where=bench.where(("safe_state", "chamber")),
            fix=f'use "off" or a set point between the chamber_min and chamber_max limits. '
            f"{SAFE_STATE_CAUTION}")


def _check_uncertainty(bench: Bench) -> None:
    """Refuse impossible specifications: a negative limit, a |Γ| outside 0 to 1."""
    table = bench.uncertainty
    for key in ("input_level", "output_path", "analyzer_absolute", "analyzer_linearity",
                "power_meter"):
        value = getattr(table, key)
        number = value.value if isinstance(value, SpecLimit) else value
        if number is not None and number < 0:
            raise InputError(f"a specification of {number:g} dB is negative: it is a ± limit",
                             where=bench.where(("uncertainty", key)),
                             fix='write its size, e.g. "0.3 dB"')
    for key in ("bench_match", "part_match"):
        gamma = getattr(table, key)
        if gamma is not None and not 0.0 <= gamma < 1.0:
            raise InputError(f"|Γ| = {gamma:g} is impossible for a passive port: it must be "
                             "at least 0 and below 1",
                             where=bench.where(("uncertainty", key)),
                             fix="write the reflection coefficient's magnitude, e.g. 0.05 "
                             "(VSWR 1.1)")
