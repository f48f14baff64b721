"""The file schema of a driver profile (pydantic models of ``drivers/*.toml``).

Validation beyond types (templates, limits, units, the connection's combinations) happens in
:mod:`sweeprig.instruments.profile`, which turns a validated file into a
:class:`~sweeprig.instruments.profile.Profile`. Keys are documented in docs/driver-profiles.md.
"""

from __future__ import annotations

from typing import Annotated, Any, Literal

from pydantic import BaseModel, ConfigDict, Discriminator, Field, Tag

from sweeprig.formats.fields import TAG_PREFIX

Templates = str | list[str]


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", strict=True, frozen=True)


#: A profile's waits: at least 1 ms (pyvisa counts whole milliseconds; a shorter timeout is a
#: slip of the unit), at most a day (a chamber ramp across its range takes hours).
_TimeoutS = Annotated[float, Field(ge=1e-3, le=86400)]


class _PollModel(_Strict):
    method: Literal["poll"]
    query: str
    until: str | None = None
    until_bits_clear: Annotated[int, Field(ge=1)] | None = None
    until_bits_set: Annotated[int, Field(ge=1)] | None = None
    interval_s: Annotated[float, Field(gt=0, le=60)] = 0.05
    timeout_s: _TimeoutS = 60.0


class _OpcModel(_Strict):
    method: Literal["opc"]
    timeout_s: _TimeoutS = 60.0


class _EventModel(_Strict):
    """``*OPC`` then poll ``*ESR?`` until its operation-complete bit (bit 0) is set
    (IEEE 488.2-1992, 10.18 and 11.5.1; from memory)."""

    method: Literal["event"]
    command: str = "*OPC"
    query: str = "*ESR?"
    bit: Annotated[int, Field(ge=1)] = 1
    interval_s: Annotated[float, Field(gt=0, le=60)] = 0.05
    timeout_s: _TimeoutS = 60.0


class _WaitModel(_Strict):
    method: Literal["wait"]
    wait_s: Annotated[float, Field(gt=0, le=3600)]


class _AnyMethod(BaseModel):
    """A completion table whose method is missing or unknown: only to report that."""

    model_config = ConfigDict(extra="ignore", strict=True, frozen=True)
    method: Literal["opc", "poll", "event", "wait"]


def _complete_shape(value: Any) -> str:
    if isinstance(value, str):
        return f"{TAG_PREFIX}word"
    if isinstance(value, dict) and value.get("method") in ("opc", "poll", "event", "wait"):
        return f"{TAG_PREFIX}{value['method']}"
    return f"{TAG_PREFIX}method"


_Complete = Annotated[
    Annotated[Literal["opc", "none"], Tag(f"{TAG_PREFIX}word")]
    | Annotated[_OpcModel, Tag(f"{TAG_PREFIX}opc")]
    | Annotated[_PollModel, Tag(f"{TAG_PREFIX}poll")]
    | Annotated[_EventModel, Tag(f"{TAG_PREFIX}event")]
    | Annotated[_WaitModel, Tag(f"{TAG_PREFIX}wait")]
    | Annotated[_AnyMethod, Tag(f"{TAG_PREFIX}method")],
    Discriminator(_complete_shape),
]


class _OpModel(_Strict):
    command: Templates | None = None
    query: Templates | None = None
    reply: str | None = None
    min: float | int | str | None = None
    max: float | int | str | None = None
    unit: str | None = None
    map: dict[str, str] | None = None
    mask: Annotated[int, Field(ge=1)] | None = None
    complete: _Complete | None = None
    timeout_s: _TimeoutS | None = None
    note: str | None = None


class _HeaderModel(_Strict):
    name: str
    kind: str
    description: str = ""
    idn_pattern: str
    scan_hint: str | None = None
    generic: bool = False
    extends: str | None = None
    compound_messages: bool = False


class _SerialModel(_Strict):
    baud_rate: Annotated[int, Field(ge=50, le=4_000_000)] = 9600
    data_bits: Literal[5, 6, 7, 8] = 8
    parity: Literal["none", "odd", "even", "mark", "space"] = "none"
    stop_bits: float | int = 1
    flow_control: Literal["none", "xon_xoff", "rts_cts", "dtr_dsr"] = "none"


class _ConnectionModel(_Strict):
    write_termination: str = "\n"
    read_termination: str | None = None
    byte_order: Literal["big", "little"] = "big"
    datatype: Literal["real32", "real64"] = "real32"
    serial: _SerialModel | None = None


class _FileModel(_Strict):
    profile: _HeaderModel
    connection: _ConnectionModel = Field(default_factory=_ConnectionModel)
    ops: dict[str, _OpModel] = Field(default_factory=dict)
