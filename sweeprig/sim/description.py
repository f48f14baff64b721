"""A sim-bench description: its file format, loading and validation (no simulator).

What ``sweeprig check`` and the bench figures need from a simulated bench, kept apart from
the simulator itself (:mod:`sweeprig.sim.bench` builds and serves the instruments): this
module imports no part model, world, instrument or server.

File format (every key is optional; the values shown are the defaults)::
optional; the values shown are the defaults)::

    part = "ideal"               # a shipped part name, or a part file relative to this file
    seed = 1

    [cables]                     # loss in dB; a table {loss, at} grows as sqrt(f)
    rf = "2.5 dB"                # rf source to the combiner
    rf2 = "8.5 dB"               # rf2 source to the combiner
    combiner = "0.5 dB"          # both RF tones pass it on the way to the DUT RF port
    lo = "2 dB"                  # lo source to the DUT LO port
    if = "1.5 dB"                # DUT IF port to the analyzer (switch channel 1)
    rf_port = "2.5 dB"           # DUT RF port to the analyzer (switch channel 2)
    lo_port = "2.5 dB"           # DUT LO port to the analyzer (switch channel 3)
    ripple = "0 dB"              # loss ripple of every connection, peak (seeded periods)
    combiner_imbalance = "0 dB"  # extra loss of the combiner's rf2 input over its rf input
    # e.g. lo = { loss = "1.5 dB", at = "2 GHz" }: 1.5 dB at 2 GHz, growing as sqrt(f)

    [references]                 # the 10 MHz references (errors in ppm; 0: perfect)
    house = "0 ppm"              # the house standard at every cabled reference input
    crystal = { rf = "0 ppm" }   # each instrument's own crystal (rf, rf2, lo, sa)
    ref_in = { rf = "house", rf2 = "house", lo = "house", sa = "house" }
    # what each reference input is cabled to: "house" or another role's 10 MHz output; a
    # role left out has nothing there (set to external, it reports FREQuency unlocked).
    # An instrument runs on its crystal until set to ROSC:SOUR EXT.

    [sources]
    level_error = true           # the level error of the simulated sources:
    level_ripple = "0.15 dB"     #   versus frequency (a smooth ripple), peak
    level_linearity = "0 dB"     #   versus level setting (0 at -10 dBm), towards this far off
    harmonics = ["-35 dBc", "-45 dBc"]
    # non-harmonic spurious lines at carrier + offset (an assumption: reference-related spurs)
    spurious = [{ offset = "10 MHz", level = "-72 dBc" }, { offset = "-10 MHz", level = "-72 dBc" }]
    family = "tarnwick"          # their command set: "tarnwick" (TW-SG6) or "farrowmere" (FR-SG8)

    [sources.lowpass]            # optional low-pass filter at a source output (none by default)
    # rf = { corner = "3 GHz", order = 7 }   # Butterworth, -3 dB at corner; also rf2, lo

    [sources.notch]              # optional band-stop in a source's path: a planted fault
    # rf = { center = "2.2 GHz", width = "20 MHz", depth = "110 dB" }   # also rf2, lo

    [sources.leveled_max]        # optional most a source delivers leveled: a planted fault
    # rf = "5 dBm"               # above it: 5 dBm out, STAT:QUES:COND? bit 3 set; also rf2, lo

    [sources.left_set]           # optional settings a previous user left: a planted fault
    # lo = { power_offset = "10 dB", frequency_offset = "0 Hz", modulation = false }

    [analyzer]
    noise_figure = "14 dB"       # at 0 dB attenuation
    toi = "15 dBm"               # first-mixer third-order intercept
    shi = "45 dBm"               # first-mixer second-harmonic intercept
    p1db = "3 dBm"               # first-mixer 1 dB compression
    overload = "0 dBm"           # first-mixer level that raises the overload flag
    amplitude_error = "0 dB"
    coherent_products = true     # its products add to lines at their frequency as voltages
    family = "tarnwick"          # its command set: "tarnwick" (TW-SA13) or "farrowmere" (FR-SA20)
    phase_noise = [              # its LO phase noise (an assumption for a mid-range analyzer)
      { offset = "100 Hz", level = "-84 dBc/Hz" }, { offset = "1 kHz", level = "-98 dBc/Hz" },
      { offset = "10 kHz", level = "-106 dBc/Hz" }, { offset = "100 kHz", level = "-116 dBc/Hz" },
      { offset = "1 MHz", level = "-135 dBc/Hz" }, { offset = "10 MHz", level = "-145 dBc/Hz" },
    ]

    [power_meter]
    cal_factor_error = "0 dB"    # what the sensor's calibration factor leaves, peak vs freq
    noise = 0.002                # relative reading noise of one average
    # zero_offset = "-40 dBm"    # a sensor not zeroed: this power is added to every reading
    zero_holds = true            # zeroing (CAL:ZERO) removes that offset (false: a faulty sensor)
    range_max = "20 dBm"         # above it a reading is not a number (a low-power sensor: lower)
    family = "tarnwick"          # its command set: "tarnwick" (TW-PM18) or "farrowmere" (FR-PM4)
    offset = "0 dB"              # a display offset left set in the meter, added to every reading
    # the sensor's calibration factor itself (sweeprig.sim.instruments.powermeter) is always
    # there, as on a real sensor: the bench file's [sensor] table corrects it

    [match]                      # |Γ| of each port (sweeprig.sim.mismatch); 0 = matched
    source_rf = 0.0              # the bench's RF feed at the DUT RF plane
    source_lo = 0.0              # the bench's LO feed at the DUT LO plane
    load_if = 0.0                # the bench's output paths at the DUT ports
    load_rf_port = 0.0
    load_lo_port = 0.0
    sensor = 0.0                 # the power sensor
    part_rf = 0.0                # the part's own ports
    part_lo = 0.0
    part_if = 0.0
    delay = "5 ns"               # the longest electrical delay behind a port (phase vs f)

    [chamber]
    ambient = "23 degC"
    probe_lag = "120 s"          # DUT probe time constant behind the air
    drift = "600 s"              # time constant of the air back to ambient, control off

    [dut]
    self_heating_c_per_w = 0.0   # die temperature rise per watt of supply power
    unpowered = { rf_to_if = "45 dB", lo_to_if = "40 dB", lo_to_rf = "35 dB", below = "0.5 V" }
    leakage_phase = true         # each leakage path gets a seeded phase φ0 − 2π·f·τ
    leakage_delay = "1.5 ns"     # the longest τ of those paths

    [[faults]]                   # planned faults, see sweeprig.sim.faults
    role = "sa"
    kind = "timeout"
    at_command = 40

Realism (each key above has a realistic default; docs/sim-bench.md explains them):
``[sources] spurious`` (non-harmonic lines at carrier + offset, dBc) and
``[sources.lowpass]`` (a Butterworth low-pass per source: ``corner``, ``order``) and
``[sources.notch]`` (a flat band-stop per source path, a planted fault: ``center``,
``width``, ``depth``) and ``[sources.leveled_max]`` (the most a source delivers leveled,
dBm, per role: above it the output stays there and the source sets its questionable
POWer bit, bit 3, as an unleveled generator does: a planted fault) and
``[sources.left_set]`` (what a previous user left set on a source, per role: a level offset,
a frequency offset, modulation on; a planted fault);
``[analyzer] phase_noise`` ((offset, dBc/Hz) points: reciprocal mixing) and
``coherent_products`` (its first-mixer products add to lines as voltages with a seeded
phase); ``[dut] leakage_phase`` and ``leakage_delay`` (each leakage path of the part turns
its line by φ0 − 2π·f·τ, seeded from ``seed``). What is truly at each port:
:mod:`sweeprig.sim.truth`.

Roles served: ``rf``, ``rf2``, ``lo`` (sources), ``sa`` (analyzer), ``pm`` (power meter),
``dc`` (supply), ``chamber``, ``switch``, ``simctl``, ``nsdc`` (the supply driving the
noise source of ``[noise_source]``: ``enr`` points (frequency, enr) of its true ENR,
``drive_on`` volts, ``drive = "sa"`` to wire it to the analyzer's own noise-source output
instead; ``[[interferers]]`` frequency and level plant a line on the IF path).
"""

from __future__ import annotations

import itertools
import math
import os
from collections.abc import Callable
from dataclasses import replace
from pathlib import Path
from typing import TYPE_CHECKING, Annotated, Any, Literal

import numpy as np
from pydantic import BeforeValidator, Discriminator, Field, Tag, field_validator
from pydantic_core import PydanticCustomError

from sweeprig.errors import InputError
from sweeprig.formats.fields import (
    Frequency,
    Frozen,
    LevelDb,
    Power,
    Ppm,
    StrictBool,
    Temperature,
    Time,
    Voltage,
)
from sweeprig.formats.loading import Document, display_path, load_document, validate
from sweeprig.sim.fault_plan import FaultPlan, FaultSpec
from sweeprig.sim.names import BENCHES_DIR, DEFAULT_BENCH_NAME, ROLES, shipped_parts
from sweeprig.units import short_repr, shorten

if TYPE_CHECKING:
    from sweeprig.sim.analyzer_display import AnalyzerParams
    from sweeprig.sim.mixer.realism import LeakagePhases
    from sweeprig.sim.world import CableLoss, WorldConfig

# The simulated analyzer's own LO phase noise, single-sideband, as (offset Hz, dBc/Hz): an
# assumption for a mid-range swept analyzer near 1 GHz (invented figures in the range such
# analyzers state; no source). Between points it is interpolated linearly in dB versus
# log10(offset); below the first offset it holds the first value, above the last the last.
DEFAULT_PHASE_NOISE: tuple[tuple[float, float], ...] = (
    (100.0, -84.0), (1e3, -98.0), (1e4, -106.0), (1e5, -116.0), (1e6, -135.0), (1e7, -145.0),
)

#: The page a sim-bench description error points to.
SIM_BENCH_DOCS = "docs/sim-bench.md"

NonNegativeDb = Annotated[LevelDb, Field(ge=0.0)]


class SqrtCableSpec(Frozen):
    """A cable whose loss grows as sqrt(f): ``loss`` dB at frequency ``at``."""

    loss: NonNegativeDb
    at: Annotated[Frequency, Field(gt=0.0)]


def _cable_shape(value: Any) -> str:
    return "~table" if isinstance(value, dict | SqrtCableSpec) else "~value"


#: A cable loss: a level in dB, or a table {loss, at} growing as sqrt(f).
CableSpec = Annotated[
    Annotated[NonNegativeDb, Tag("~value")] | Annotated[SqrtCableSpec, Tag("~table")],
    Discriminator(_cable_shape),
]


def _cable(spec: CableSpec) -> CableLoss:
    from sweeprig.sim.world import CableLoss

    if isinstance(spec, SqrtCableSpec):
        return CableLoss(spec.loss, spec.at)
    return CableLoss(float(spec))


class CablesSpec(Frozen):
    """Loss of each connection (dB, positive = loss); see the module docstring."""

    rf: CableSpec = 2.5
    rf2: CableSpec = 8.5
    lo: CableSpec = 2.0
    if_: CableSpec = Field(default=1.5, alias="if")
    combiner: CableSpec = 0.5
    rf_port: CableSpec = 2.5
    lo_port: CableSpec = 2.5
    #: Loss ripple of every connection (standing waves between its connectors), peak dB;
    #: each connection gets its own seeded period (150 to 600 MHz) and phase.
    ripple: NonNegativeDb = 0.0
    #: Extra loss of the combiner's rf2 input over its rf input, dB.
    combiner_imbalance: NonNegativeDb = 0.0


def _dbc_per_hz(value: Any) -> float:
    """A phase-noise level: a number (dBc/Hz) or text such as "-100 dBc/Hz"."""
    if isinstance(value, bool):
        raise PydanticCustomError("semantic", "{what}", {
            "what": f"{value!r} is not a phase-noise level",
            "fix": 'write a level such as "-100 dBc/Hz"'})
    if isinstance(value, int | float):
        number = float(value)
    elif isinstance(value, str) and value.strip().lower().endswith("dbc/hz"):
        try:
            number = float(value.strip()[:-6])
        except ValueError:
            number = math.nan
    else:
        number = math.nan
    if not math.isfinite(number) or number >= 0.0:
        raise PydanticCustomError("semantic", "{what}", {
            "what": f"{value!r} is not a phase-noise level below 0 dBc/Hz",
            "fix": 'write a negative level such as "-100 dBc/Hz"'})
    return number


DbcPerHz = Annotated[float, BeforeValidator(_dbc_per_hz)]


class SpurSpec(Frozen):
    """A source's non-harmonic spurious line: at carrier + ``offset`` (may be negative),
    ``level`` dBc."""

    offset: Frequency
    level: Annotated[LevelDb, Field(lt=0.0)]


class LowPassSpec(Frozen):
    """A low-pass filter at a source's output: Butterworth ``order``, −3 dB at ``corner``."""

    corner: Annotated[Frequency, Field(gt=0.0)]
    order: Annotated[int, Field(strict=True, ge=1, le=15)] = 5


class SourceFiltersSpec(Frozen):
    """An optional low-pass filter per source (absent: none)."""

    rf: LowPassSpec | None = None
    rf2: LowPassSpec | None = None
    lo: LowPassSpec | None = None


class NotchSpec(Frozen):
    """A band-stop in a source's output path (a planted fault): ``depth`` of loss over
    ``center`` ± ``width``/2, none outside."""

    center: Annotated[Frequency, Field(gt=0.0)]
    width: Annotated[Frequency, Field(gt=0.0)]
    depth: Annotated[LevelDb, Field(gt=0.0)]


class SourceNotchesSpec(Frozen):
    """An optional band-stop per source path (absent: none)."""

    rf: NotchSpec | None = None
    rf2: NotchSpec | None = None
    lo: NotchSpec | None = None


class SourceLeveledMaxSpec(Frozen):
    """An optional maximum leveled output per source, dBm (absent: leveled at every
    setting): above it the source delivers this much and reports itself unleveled."""

    rf: Power | None = None
    rf2: Power | None = None
    lo: Power | None = None


class LeftSettingsSpec(Frozen):
    """What a previous user left set on one source (SCPI-99 semantics: the output is the
    setting less each offset)."""

    power_offset: LevelDb = 0.0
    frequency_offset: Frequency = 0.0
    modulation: StrictBool = False


class SourceLeftSetSpec(Frozen):
    """Settings left on each source by a previous user (absent: none)."""

    rf: LeftSettingsSpec | None = None
    rf2: LeftSettingsSpec | None = None
    lo: LeftSettingsSpec | None = None


#: Every simulated source's non-harmonic spurs unless the description says otherwise:
#: −72 dBc at ±10 MHz from the carrier (reference-related spurs; an assumption, invented
#: figures in the range signal sources state).
DEFAULT_SPURIOUS: tuple[SpurSpec, ...] = (
    SpurSpec(offset=10e6, level=-72.0), SpurSpec(offset=-10e6, level=-72.0),
)


class SourcesSpec(Frozen):
    """Properties shared by the three simulated sources."""

    level_error: StrictBool = True
    #: Peak of the sources' level error versus frequency (a smooth ripple), dB.
    level_ripple: NonNegativeDb = 0.15
    #: The sources' level error versus level setting, dB (0 at a −10 dBm setting, towards
    #: ±this far from it).
    level_linearity: NonNegativeDb = 0.0
    harmonics: tuple[LevelDb, ...] = (-35.0, -45.0)
    spurious: tuple[SpurSpec, ...] = DEFAULT_SPURIOUS
    lowpass: SourceFiltersSpec = SourceFiltersSpec()
    #: Band-stops planted in their output paths (none by default).
    notch: SourceNotchesSpec = SourceNotchesSpec()
    #: The most each can deliver leveled, dBm (none by default: leveled at every setting).
    leveled_max: SourceLeveledMaxSpec = SourceLeveledMaxSpec()
    #: Settings a previous user left on them (none by default).
    left_set: SourceLeftSetSpec = SourceLeftSetSpec()
    #: Their command set: "tarnwick" (TW-SG6) or "farrowmere" (FR-SG8: settings applied late
    #: unless synchronised, on its own crystal unless the bench locks it; docs/instruments.md).
    family: Literal["tarnwick", "farrowmere"] = "tarnwick"


class PhaseNoisePointSpec(Frozen):
    """One point of the analyzer's LO phase-noise profile."""

    offset: Annotated[Frequency, Field(gt=0.0)]
    level: DbcPerHz


class AnalyzerLeftSetSpec(Frozen):
    """What a previous user left set on the analyzer: a reference level offset (every level
    it shows is the input's plus it), amplitude corrections (their state only), the
    trace's mode (``view``: frozen) and its detector."""

    ref_level_offset: LevelDb = 0.0
    corrections: StrictBool = False
    trace_mode: Literal["write", "view", "maxhold", "minhold"] = "write"
    #: Its trace detector (``rms``: the power detector).
    detector: Literal["sample", "rms"] = "sample"


class AnalyzerSpec(Frozen):
    """The analyzer's own figures (see :class:`sweeprig.sim.analyzer_display.AnalyzerParams`)."""

    noise_figure: NonNegativeDb = 14.0
    toi: Power = 15.0
    shi: Power = 45.0
    p1db: Power = 3.0
    overload: Power = 0.0
    amplitude_error: LevelDb = 0.0
    phase_noise: tuple[PhaseNoisePointSpec, ...] = tuple(
        PhaseNoisePointSpec(offset=o, level=v) for o, v in DEFAULT_PHASE_NOISE)
    coherent_products: StrictBool = True
    #: Its command set: "tarnwick" (the TW-SA13) or "farrowmere" (the FR-SA20, the second
    #: family: another SCPI dialect around the same receiver; docs/instruments.md).
    family: Literal["tarnwick", "farrowmere"] = "tarnwick"
    #: Settings a previous user left on it (a planted fault; none by default).
    left_set: AnalyzerLeftSetSpec = AnalyzerLeftSetSpec()

    @field_validator("phase_noise")
    @classmethod
    def _rising(cls, points: tuple[PhaseNoisePointSpec, ...]) -> tuple[PhaseNoisePointSpec, ...]:
        offsets = [p.offset for p in points]
        if any(b <= a for a, b in itertools.pairwise(offsets)):
            raise PydanticCustomError("semantic", "{what}", {
                "what": "phase-noise offsets do not rise from one point to the next",
                "fix": "list the points from the smallest offset to the largest"})
        return points

    def params(self, seed: int = 0) -> AnalyzerParams:
        from sweeprig.sim.analyzer_display import AnalyzerParams

        return AnalyzerParams(
            noise_figure_db=self.noise_figure, toi_dbm=self.toi, shi_dbm=self.shi,
            p1db_dbm=self.p1db, overload_dbm=self.overload,
            amplitude_error_db=self.amplitude_error,
            phase_noise=tuple((p.offset, p.level) for p in self.phase_noise),
            coherent_products=self.coherent_products, product_phase_seed=seed,
        )


class PowerMeterSpec(Frozen):
    """The power meter and its sensor."""

    #: What the sensor's calibration factor leaves uncorrected versus frequency, peak dB.
    cal_factor_error: NonNegativeDb = 0.0
    #: Relative reading noise of one average (a fraction of the power).
    noise: Annotated[float, Field(ge=0.0, le=0.1)] = 0.002
    #: A sensor that was not zeroed: this power is added to every reading (absent: zeroed).
    zero_offset: Power | None = None
    #: Whether zeroing removes that offset (false: a faulty sensor whose zeroing does not take).
    zero_holds: StrictBool = True
    #: The sensor's top of range: above it a reading is not a number (a low-power sensor).
    range_max: Power = 20.0
    #: A display offset left set in the meter: added to every reading.
    offset: LevelDb = 0.0
    #: A duty-cycle correction left on in the meter, percent (absent: off): every reading
    #: is raised by 10·log10(100 / duty), as for a pulsed signal's average power.
    duty_cycle: Annotated[float, Field(gt=0.0, le=100.0)] | None = None
    #: Its command set: "tarnwick" (TW-PM18) or "farrowmere" (FR-PM4: refuses readings until
    #: zeroed; docs/instruments.md).
    family: Literal["tarnwick", "farrowmere"] = "tarnwick"


class ChamberSpec(Frozen):
    """Thermal chamber figures."""

    ambient: Temperature = 23.0
    probe_lag: Annotated[Time, Field(gt=0.0)] = 120.0
    drift: Annotated[Time, Field(gt=0.0)] = 600.0


class UnpoweredSpec(Frozen):
    """Passive leakage of the mixer without supply (dB of isolation) and the threshold."""

    rf_to_if: NonNegativeDb = 45.0
    lo_to_if: NonNegativeDb = 40.0
    lo_to_rf: NonNegativeDb = 35.0
    below: Annotated[Voltage, Field(ge=0.0)] = 0.5


class EnrPointSpec(Frozen):
    """One point of the simulated noise source's true ENR curve."""

    frequency: Annotated[Frequency, Field(gt=0.0)]
    enr: LevelDb


class NoiseSourceSpec(Frozen):
    """The simulated noise source at the DUT RF input plane, driven by the ``nsdc`` supply
    (see :mod:`sweeprig.sim.noise_source`). ``enr``: its true ENR curve (default: the
    shipped demo source's); ``drive_on``: the drive voltage above which it is hot; ``drive``:
    what its drive input is wired to, the ``nsdc`` supply or the analyzer's own noise-source
    output (``sa``)."""

    enr: tuple[EnrPointSpec, ...] | None = None
    drive_on: Annotated[Voltage, Field(gt=0.0)] = 20.0
    drive: Literal["nsdc", "sa"] = "nsdc"

    @field_validator("enr")
    @classmethod
    def _rising(cls, points: tuple[EnrPointSpec, ...] | None) -> tuple[EnrPointSpec, ...] | None:
        if points is not None and (len(points) < 1 or any(
                b.frequency <= a.frequency for a, b in itertools.pairwise(points))):
            raise PydanticCustomError("semantic", "{what}", {
                "what": "the ENR points are empty or their frequencies do not rise",
                "fix": "list at least one point, from the lowest frequency to the highest"})
        return points


class InterfererSpec(Frozen):
    """A line picked up on the IF path ahead of the analyzer (a planted interferer)."""

    frequency: Annotated[Frequency, Field(gt=0.0)]
    level: Power


class DutSpec(Frozen):
    """How the part sits on the bench."""

    self_heating_c_per_w: Annotated[float, Field(ge=0.0)] = 0.0
    unpowered: UnpoweredSpec = UnpoweredSpec()
    leakage_phase: StrictBool = True
    leakage_delay: Annotated[Time, Field(ge=0.0)] = 1.5e-9


#: Instruments with a 10 MHz reference that moves a product (sources and the analyzer).
REFERENCE_ROLES = ("rf", "rf2", "lo", "sa")


class ReferencesSpec(Frozen):
    """The bench's 10 MHz references: each instrument's own crystal error, the house
    standard's error, and what each instrument's reference input is cabled to."""

    house: Ppm = 0.0
    crystal: dict[Literal["rf", "rf2", "lo", "sa"], Ppm] = Field(default_factory=dict)
    ref_in: dict[Literal["rf", "rf2", "lo", "sa"], str] = Field(
        default_factory=lambda: {r: "house" for r in REFERENCE_ROLES})

    @field_validator("ref_in")
    @classmethod
    def _known_feeds(cls, ref_in: dict[str, str]) -> dict[str, str]:
        for role, feed in ref_in.items():
            if (feed != "house" and feed not in REFERENCE_ROLES) or feed == role:
                raise PydanticCustomError(
                    "semantic", "{what}",
                    {"what": f"the reference input of {role!r} is cabled to {feed!r}",
                     "fix": 'write "house" (the bench\'s 10 MHz standard) or another role: '
                     + ", ".join(r for r in REFERENCE_ROLES if r != role)})
        return ref_in

    def oscillators(self) -> dict[str, Any]:
        """A :class:`~sweeprig.sim.instruments.reference.ReferenceOscillator` per role, each
        reference input fed from the house standard or another role's 10 MHz output."""
        from sweeprig.sim.instruments.reference import ReferenceOscillator

        out: dict[str, ReferenceOscillator] = {}

        def feed(role: str) -> Callable[[], float | None]:
            source = self.ref_in.get(role)
            if source is None:
                return lambda: None
            if source == "house":
                return lambda: float(self.house)
            # another instrument's 10 MHz output: the reference that one runs on (a
            # chain back to the same role would be a loop of cables; it reads as unlocked)
            return lambda: out[source].error_ppm() if not _loops(self.ref_in, role) else None

        for role in REFERENCE_ROLES:
            out[role] = ReferenceOscillator(float(self.crystal.get(role, 0.0)), feed(role))
        return out


def _loops(ref_in: dict[str, str], start: str) -> bool:
    seen, role = {start}, ref_in.get(start)
    while role is not None and role != "house":
        if role in seen:
            return True
        seen.add(role)
        role = ref_in.get(role)
    return False


Gamma = Annotated[float, Field(ge=0.0, lt=1.0)]


class MatchSpec(Frozen):
    """Reflection coefficients |Γ| of the bench's and the part's ports (see
    :mod:`sweeprig.sim.mismatch`); 0: a perfect match (the default: no mismatch error)."""

    source_rf: Gamma = 0.0
    source_lo: Gamma = 0.0
    load_if: Gamma = 0.0
    load_rf_port: Gamma = 0.0
    load_lo_port: Gamma = 0.0
    sensor: Gamma = 0.0
    part_rf: Gamma = 0.0
    part_lo: Gamma = 0.0
    part_if: Gamma = 0.0
    #: The longest electrical delay behind a port (its Γ turns with frequency).
    delay: Annotated[Time, Field(ge=0.0)] = 5e-9


class SimBenchDescription(Frozen):
    """A whole sim-bench description file (see the module docstring)."""

    include: tuple[str, ...] = ()
    part: Annotated[str, Field(min_length=1)] = "ideal"
    seed: Annotated[int, Field(strict=True, ge=0)] = 1
    cables: CablesSpec = CablesSpec()
    sources: SourcesSpec = SourcesSpec()
    analyzer: AnalyzerSpec = AnalyzerSpec()
    power_meter: PowerMeterSpec = PowerMeterSpec()
    chamber: ChamberSpec = ChamberSpec()
    dut: DutSpec = DutSpec()
    match: MatchSpec = MatchSpec()
    noise_source: NoiseSourceSpec | None = None
    interferers: tuple[InterfererSpec, ...] = ()
    references: ReferencesSpec = ReferencesSpec()
    faults: tuple[FaultSpec, ...] = ()

    @field_validator("faults")
    @classmethod
    def _fault_roles(cls, faults: tuple[FaultSpec, ...]) -> tuple[FaultSpec, ...]:
        for fault in faults:
            if fault.role not in ROLES:
                raise PydanticCustomError(
                    "semantic", "{what}",
                    {"what": f"a fault is planned for unknown role {fault.role!r}",
                     "fix": f"use one of the roles {', '.join(ROLES)}"},
                )
        return faults

    def world_config(self) -> WorldConfig:
        from sweeprig.sim.world import (
            Cabling,
            DeadMixer,
            LowPassFilter,
            NotchFilter,
            WorldConfig,
        )

        c, u = self.cables, self.dut.unpowered

        def cable(name: str, spec: CableSpec, k: int) -> CableLoss:
            loss = _cable(spec)
            if not c.ripple:
                return loss
            period, phase = _ripple_law(self.seed, k)
            return replace(loss, ripple_db=c.ripple, ripple_period_hz=period,
                           ripple_phase_rad=phase)

        return WorldConfig(
            cabling=Cabling(rf=cable("rf", c.rf, 0), rf2=cable("rf2", c.rf2, 1),
                            lo=cable("lo", c.lo, 2), if_=cable("if", c.if_, 3),
                            combiner=cable("combiner", c.combiner, 4),
                            rf_port=cable("rf_port", c.rf_port, 5),
                            lo_port=cable("lo_port", c.lo_port, 6),
                            combiner_imbalance_db=c.combiner_imbalance),
            dead_mixer=DeadMixer(rf_to_if_db=u.rf_to_if, lo_to_if_db=u.lo_to_if,
                                 lo_to_rf_db=u.lo_to_rf, min_supply_v=u.below),
            self_heating_c_per_w=self.dut.self_heating_c_per_w,
            ambient_c=self.chamber.ambient,
            source_filters=tuple(
                (role, LowPassFilter(spec.corner, spec.order))
                for role in ("rf", "rf2", "lo")
                if (spec := getattr(self.sources.lowpass, role)) is not None
            ),
            source_notches=tuple(
                (role, NotchFilter(spec.center, spec.width, spec.depth))
                for role in ("rf", "rf2", "lo")
                if (spec := getattr(self.sources.notch, role)) is not None
            ),
            spur_phase_seed=self.seed,
            noise_source=self._noise_source_model(),
            interferers=tuple((i.frequency, i.level) for i in self.interferers),
            match=self._port_match(),
        )

    def _port_match(self) -> Any:
        from sweeprig.sim.mismatch import PORTS, PortMatch

        m = self.match
        values = tuple((name, float(getattr(m, name))) for name in PORTS)
        if not any(v for _n, v in values):
            return None
        return PortMatch(values, seed=self.seed, delay_s=m.delay)

    def _noise_source_model(self) -> Any:
        from sweeprig.sim.noise_source import DEFAULT_ENR_POINTS, NoiseSourceModel

        spec = self.noise_source
        if spec is None:
            return None
        points = (DEFAULT_ENR_POINTS if spec.enr is None
                  else tuple((p.frequency, p.enr) for p in spec.enr))
        return NoiseSourceModel(enr_points=points, drive_on_v=spec.drive_on,
                                ambient_c=self.chamber.ambient, driven_by=spec.drive)

    def analyzer_params(self) -> AnalyzerParams:
        """The analyzer's own figures, its product phases seeded by ``seed``."""
        return self.analyzer.params(seed=self.seed)

    def leakage_phases(self) -> LeakagePhases:
        """The part's leakage-path phases: seeded by ``seed`` (``dut.leakage_phase``), or
        every path in phase with its source."""
        from sweeprig.sim.mixer.realism import LeakagePhases, seeded_leakage_phases

        if not self.dut.leakage_phase:
            return LeakagePhases()
        return seeded_leakage_phases(self.seed, self.dut.leakage_delay)

    def fault_plan(self) -> FaultPlan:
        return FaultPlan(faults=self.faults)


def _ripple_law(seed: int, index: int) -> tuple[float, float]:
    """(period Hz, phase rad) of one connection's loss ripple, from
    ``numpy.random.default_rng([seed, 47, index])``: period 150 to 600 MHz (an electrical
    length of about 0.25 to 1 m between two mismatched connectors), phase uniform."""
    rng = np.random.default_rng([int(seed), 47, index])
    return float(rng.uniform(150e6, 600e6)), float(rng.uniform(0.0, 2.0 * math.pi))


def load_sim_bench_description(path: str | os.PathLike[str]) -> SimBenchDescription:
    """Read and validate a sim-bench description file.

    A part given as a path is resolved relative to the file. Every problem raises
    :class:`~sweeprig.errors.InputError` naming the file, line and key.
    """
    doc = load_document(path)
    description = validate(SimBenchDescription, doc, docs=SIM_BENCH_DOCS)
    if _looks_like_path(description.part):
        part_path = Path(doc.path).parent / description.part
        try:
            # anything there (a FIFO, a link loop) is refused by name when the part is read
            exists = os.path.lexists(part_path)
        except (OSError, ValueError):  # a name too long for the file system, a NUL character
            exists = False
        if not exists:
            raise InputError(
                f"part file {short_repr(description.part)} does not exist "
                f"(looked for {shorten(display_path(part_path))})",
                where=doc.where(("part",)),
                fix="part paths are relative to the description file; or name a shipped "
                f"part: {', '.join(shipped_parts())}",
            )
        description = description.model_copy(update={"part": str(part_path)})
    elif description.part.lower() not in shipped_parts():
        raise _unknown_part(description.part, doc)
    return description


def resolve_description(
    description: SimBenchDescription | str | os.PathLike[str] | None,
) -> SimBenchDescription:
    """A description from a model, a file path, a shipped bench name or None (the default)."""
    if isinstance(description, SimBenchDescription):
        return description
    if description is None:
        return load_sim_bench_description(BENCHES_DIR / f"{DEFAULT_BENCH_NAME}.toml")
    text = os.fspath(description)
    if not _looks_like_path(text) and not _exists(Path(text)) \
            and _exists(BENCHES_DIR / f"{text}.toml"):
        return load_sim_bench_description(BENCHES_DIR / f"{text}.toml")
    return load_sim_bench_description(text)


def _exists(path: Path) -> bool:
    """``path.is_file()``, False for a name no file can have (NUL, too long)."""
    try:
        return path.is_file()
    except (OSError, ValueError):
        return False


def _looks_like_path(text: str) -> bool:
    return text.lower().endswith(".toml") or any(sep in text for sep in ("/", "\\"))


def _unknown_part(name: str, doc: Document) -> InputError:
    return InputError(
        f"no shipped part named {name!r}",
        where=doc.where(("part",)),
        fix=f"name one of {', '.join(shipped_parts())}, or give a part file path ending in .toml",
    )
