"""The abstract operations a driver profile maps to SCPI, per instrument kind.

This table is the contract between the profile files (``drivers/*.toml``, which give each
operation its SCPI) and the driver classes (which call the operations by these names). Each
operation has a *shape*:

``setting``
    a value the driver sets (``command`` templates with ``{value}``), remembers and never
    re-sends unchanged; optionally read back (``query``).
``action``
    commands sent for their effect (``command``), possibly with a ``{value}`` and a
    completion wait.
``query``
    queries whose replies are parsed (``query``), possibly after ``command`` commands.

The words follow IEEE 488.2-1992 (from memory, 6.1 and 8.1): a *command* is a program
message unit sent for its effect, a *query* one whose header ends in ``?`` and that asks for a
response.

``unit`` is the :mod:`sweeprig.units` kind of the value (used to parse limits such as
``max = "6 GHz"`` in a profile, and to print values). ``safety`` marks values whose limits
guard the part or the bench: exceeding them raises :class:`~sweeprig.errors.SafetyLimitError`.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

from sweeprig.instruments.status_bits import (
    FREQUENCY_MASK,
    OVERLOAD_MASK,
    TRIPPED_MASK,
    UNCALIBRATED_MASK,
    UNLEVELED_MASK,
)

Shape = Literal["setting", "action", "query"]
ValueType = Literal["none", "float", "int", "bool", "choice"]
ReplyFormat = Literal["float", "int", "bool", "csv_floats", "real32", "error", "text"]

REPLY_FORMATS: tuple[str, ...] = ("float", "int", "bool", "csv_floats", "real32", "error", "text")

KINDS: tuple[str, ...] = (
    "source", "analyzer", "powermeter", "supply", "chamber", "switch", "simctl",
)

UNIT_SYMBOL: dict[str | None, str] = {
    "frequency": "Hz",
    "power": "dBm",
    "level_db": "dB",
    "voltage": "V",
    "current": "A",
    "time": "s",
    "temperature": "°C",
    "count": "",
    None: "",
}


@dataclass(frozen=True)
class OpSpec:
    """What the driver expects of one abstract operation."""

    name: str
    shape: Shape
    summary: str
    value: ValueType = "none"
    unit: str | None = None
    reply: ReplyFormat | None = None
    required: bool = True
    safety: bool = False
    choices: tuple[str, ...] = ()
    default_mask: int | None = None
    """The ``mask`` a profile gets when it states none (SCPI-99 status bit meanings)."""


def _setting(name: str, value: ValueType, unit: str | None, summary: str, **kw: object) -> OpSpec:
    reply = {"float": "float", "int": "int", "bool": "bool", "choice": "text"}[value]
    return OpSpec(name, "setting", summary, value=value, unit=unit, reply=reply, **kw)  # type: ignore[arg-type]


COMMON_OPS: dict[str, OpSpec] = {
    spec.name: spec
    for spec in (
        OpSpec("identify", "query", "identity string (*IDN?)", reply="text"),
        OpSpec("reset", "action", "settings to power-on defaults (*RST)"),
        OpSpec("clear", "action", "clear the error queue and event registers (*CLS)"),
        OpSpec("next_error", "query", "oldest error-queue entry (SYST:ERR?)", reply="error"),
        OpSpec("event_status", "query", "event status register (*ESR?)", reply="int"),
        OpSpec("operation_complete", "query", "wait for pending operations (*OPC? → 1)",
               reply="bool"),
        OpSpec("prepare", "action", "put the instrument in the mode sweeprig expects",
               required=False),
    )
}
"""Operations every kind has. Profiles inherit the IEEE 488.2 / SCPI-99 defaults below."""

COMMON_DEFAULTS: dict[str, dict[str, object]] = {
    "identify": {"query": "*IDN?"},
    "reset": {"command": "*RST", "complete": "opc"},
    "clear": {"command": "*CLS"},
    "next_error": {"query": "SYST:ERR?"},
    "event_status": {"query": "*ESR?"},
    "operation_complete": {"query": "*OPC?"},
}
"""The TOML a profile gets for the common operations unless it gives its own."""

#: The 10 MHz reference of a source or an analyzer (the bench file's ``[timebase]``).
REFERENCE_OPS: tuple[OpSpec, ...] = (
    _setting("reference", "choice", None, "10 MHz reference: its own crystal (internal) or "
             "its reference input (external)", required=False,
             choices=("internal", "external")),
    OpSpec("reference_unlocked", "query", "its reference is not locked (flag)", reply="int",
           required=False, default_mask=FREQUENCY_MASK),
)

#: A source's or supply's output protection tripped (it switched its own output off): read
#: with the status read after every point; the run stops at once when it is set.
OUTPUT_TRIPPED_OP = OpSpec("output_tripped", "query",
                           "its output protection has tripped, output off (flag)", reply="int",
                           required=False, default_mask=TRIPPED_MASK)

KIND_OPS: dict[str, dict[str, OpSpec]] = {
    "source": {
        s.name: s
        for s in (
            _setting("frequency", "float", "frequency", "CW frequency, Hz"),
            _setting("power", "float", "power", "output level, dBm", safety=True),
            _setting("output", "bool", None, "RF output on/off"),
            OpSpec("unleveled", "query", "its output is not leveled (flag)", reply="int",
                   required=False, default_mask=UNLEVELED_MASK),
            OUTPUT_TRIPPED_OP,
            # what a previous user may have left set: read at connect, refused unless neutral
            OpSpec("power_offset", "query", "its level offset: the level set and shown less "
                   "the level at its output, dB (0: none)", unit="level_db", reply="float",
                   required=False),
            OpSpec("frequency_offset", "query", "its frequency offset: the frequency set "
                   "less the frequency at its output, Hz (0: none)", unit="frequency",
                   reply="float", required=False),
            OpSpec("modulation", "query", "any modulation on its output (flag)", reply="int",
                   required=False, default_mask=1),
            *REFERENCE_OPS,
        )
    },
    "analyzer": {
        s.name: s
        for s in (
            _setting("centre", "float", "frequency", "centre frequency, Hz"),
            _setting("span", "float", "frequency", "span, Hz (0 = zero span)"),
            _setting("rbw", "float", "frequency", "resolution bandwidth, Hz"),
            _setting("vbw", "float", "frequency", "video bandwidth, Hz", required=False),
            _setting("ref_level", "float", "power", "reference level, dBm"),
            _setting("attenuation", "float", "level_db", "input attenuation, dB"),
            _setting("averages", "int", "count", "trace averages (1 = none)"),
            _setting("points", "int", "count", "trace points", required=False),
            _setting("continuous", "bool", None, "continuous sweep (sweeprig sets it off)"),
            _setting("rbw_auto", "bool", None, "RBW coupled to span", required=False),
            _setting("attenuation_auto", "bool", None, "attenuation coupled to ref level",
                     required=False),
            _setting("trace_format", "choice", None, "trace data format",
                     required=False, choices=("ascii", "real32")),
            _setting("marker_on", "bool", None, "marker 1 on", required=False),
            _setting("detector", "choice", None, "trace detector: sample (log envelope) or "
                     "rms (power; for noise readings)", required=False,
                     choices=("sample", "rms")),
            _setting("noise_source", "bool", None, "the analyzer's own noise-source drive "
                     "output on/off (hot/cold, for noise-figure readings)", required=False),
            OpSpec("sweep", "action", "start one sweep (all averages) and wait for it"),
            OpSpec("sweep_time", "query", "time of one sweep, s", reply="float", required=False),
            OpSpec("marker_level", "query", "level at a frequency, dBm (value: Hz)",
                   value="float", unit="frequency", reply="float"),
            OpSpec("noise_marker", "query", "the marker's noise function: noise power "
                   "density around a frequency, dBm/Hz (value: Hz; for noise readings on an "
                   "analyzer without a power detector)", value="float", unit="frequency",
                   reply="float", required=False),
            OpSpec("peak", "query", "marker to the highest point → frequency Hz, level dBm",
                   reply="float"),
            OpSpec("trace_ascii", "query", "trace as ASCII numbers, dBm", reply="csv_floats",
                   required=False),
            OpSpec("trace_real32", "query", "trace as a REAL,32 block, dBm", reply="real32",
                   required=False),
            OpSpec("overload", "query", "input overload in the last sweep (flag)", reply="int",
                   default_mask=OVERLOAD_MASK),
            OpSpec("uncalibrated", "query", "reading uncalibrated (flag)", reply="int",
                   required=False, default_mask=UNCALIBRATED_MASK),
            # what a previous user may have left set: read at connect, refused unless neutral
            OpSpec("ref_level_offset", "query", "its reference level offset: the levels it "
                   "shows less the levels at its input, dB (0: none)", unit="level_db",
                   reply="float", required=False),
            OpSpec("corrections", "query", "amplitude corrections (transducer factors) "
                   "applied to its levels (flag)", reply="int", required=False,
                   default_mask=1),
            OpSpec("status_enable", "action", "enable the questionable bits that feed the "
                   "status byte's summary (value: the overload and uncalibrated masks)",
                   value="int", unit="count", required=False),
            *REFERENCE_OPS,
        )
    },
    "powermeter": {
        s.name: s
        for s in (
            _setting("frequency", "float", "frequency", "calibration-factor frequency, Hz"),
            _setting("averages", "int", "count", "averages", required=False),
            OpSpec("power", "query", "average power, dBm", reply="float"),
            OpSpec("zero", "action", "zero the sensor (every RF source off first)",
                   required=False),
            OpSpec("zeroed", "query", "the sensor's last zeroing succeeded (flag)",
                   reply="bool", required=False),
            # what a previous user may have left set: read at connect, refused when on
            OpSpec("duty_cycle", "query", "a duty-cycle correction raising every reading to a "
                   "pulse power (flag)", reply="int", required=False, default_mask=1),
            OpSpec("display_offset", "query", "a display offset added to every reading (flag)",
                   reply="int", required=False, default_mask=1),
        )
    },
    "supply": {
        s.name: s
        for s in (
            _setting("voltage", "float", "voltage", "set voltage, V", safety=True),
            _setting("current_limit", "float", "current", "current limit, A", safety=True),
            _setting("output", "bool", None, "output on/off"),
            OpSpec("measure_voltage", "query", "measured voltage, V", reply="float"),
            OpSpec("measure_current", "query", "measured current, A", reply="float"),
            OpSpec("current_limited", "query", "in current limit (flag)", reply="int",
                   required=False),
            OUTPUT_TRIPPED_OP,
        )
    },
    "chamber": {
        s.name: s
        for s in (
            _setting("setpoint", "float", "temperature", "set point, °C", safety=True),
            _setting("control", "bool", None, "conditioning on/off"),
            _setting("ramp", "float", None, "air ramp rate, °C/min", required=False),
            OpSpec("probe", "query", "DUT probe temperature, °C", reply="float"),
            OpSpec("air", "query", "air temperature, °C", reply="float"),
        )
    },
    "switch": {
        s.name: s
        for s in (
            _setting("channel", "int", "count", "closed channel (one at a time)"),
            OpSpec("closed", "query", "is a channel closed (value: channel)", value="int",
                   unit="count", reply="bool", required=False),
        )
    },
    "simctl": {
        s.name: s
        for s in (
            OpSpec("time", "query", "simulated time, s", reply="float"),
            OpSpec("advance", "action", "let simulated time pass (value: s)", value="float",
                   unit="time"),
            OpSpec("mode", "query", "VIRT or REAL", reply="text", required=False),
        )
    },
}
"""Per kind: the operations its driver calls (besides :data:`COMMON_OPS`)."""


def ops_for(kind: str) -> dict[str, OpSpec]:
    """All operations of ``kind``: the common ones, then the kind's own."""
    return {**COMMON_OPS, **KIND_OPS[kind]}
