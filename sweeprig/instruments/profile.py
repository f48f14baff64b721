"""Driver profiles: TOML files that map abstract operations to SCPI, and their lookup.

A profile (``drivers/<name>.toml``) says which instrument kind it drives, which ``*IDN?``
replies it accepts, and for each abstract operation (:mod:`sweeprig.instruments.ops`) the SCPI
to send (its *command* and *query*, IEEE 488.2's words), the reply format, the value limits and
unit, and how to wait for completion; its ``[connection]`` says how to talk to the resource
(terminations, binary byte order, serial line). A profile may ``extends`` another and state
only what differs. Files are read by the one TOML loader (:mod:`sweeprig.formats.loading`);
the file schema is :mod:`sweeprig.instruments.profile_schema`; the keys are documented in
``docs/driver-profiles.md``.

Lookup order for a profile name: folders given by the caller, then the profiles shipped in the
installed package (``sweeprig/_drivers``), then the top-level ``drivers/`` of a source checkout.

Errors in a profile file are :class:`~sweeprig.errors.InputError` naming ``file:line: key``.
"""

from __future__ import annotations

import difflib
import functools
import math
import re
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from stat import S_ISREG
from typing import Any, Literal

from pydantic import ValidationError

import sweeprig
from sweeprig.errors import InputError, SweeprigError
from sweeprig.formats.loading import (
    Document,
    SourceFile,
    deep_merge,
    display_path,
    parse_toml,
    read_text,
    validation_error,
)
from sweeprig.formats.toml_locate import KeyLocator
from sweeprig.instruments.ops import (
    COMMON_DEFAULTS,
    KINDS,
    REPLY_FORMATS,
    UNIT_SYMBOL,
    OpSpec,
    ReplyFormat,
    ops_for,
)
from sweeprig.instruments.profile_schema import (
    _ConnectionModel,
    _EventModel,
    _FileModel,
    _OpcModel,
    _OpModel,
    _PollModel,
    _WaitModel,
)
from sweeprig.instruments.scpi_text import wire_text_problem
from sweeprig.transport.settings import (
    DEFAULT_CONNECTION,
    TERMINATIONS,
    ConnectionSettings,
    SerialSettings,
)
from sweeprig.units import parse_quantity, short_repr

PROFILE_NAME_RE = re.compile(r"[a-z0-9][a-z0-9-]*")
_PLACEHOLDER_RE = re.compile(r"\{[^{}]*\}|[{}]")
VALUE_PLACEHOLDER = "{value}"

DEFAULT_PROFILE_FOR_KIND: dict[str, str] = {
    "source": "scpi-source",
    "analyzer": "scpi-analyzer",
    "powermeter": "scpi-powermeter",
    "supply": "scpi-supply",
    "chamber": "thermal-chamber",
    "switch": "scpi-switch",
    "simctl": "sim-control",
}
"""The generic profile used when a kind is named instead of a profile."""

DOCS_HINT = "see docs/driver-profiles.md"
DOCS_PAGE = "docs/driver-profiles.md"


# -- the runtime model ------------------------------------------------------------------------


@dataclass(frozen=True)
class Completion:
    """How to wait after an operation's commands.

    ``method``: ``"opc"`` (query the profile's ``operation_complete``, expect 1); ``"poll"``
    (send ``query`` every ``interval_s`` until the reply full-matches ``until`` or, read as an
    integer, has none of the ``until_bits_clear`` bits / all of the ``until_bits_set`` bits
    set); ``"event"`` (send ``command``, normally ``*OPC``, then poll ``query``, normally
    ``*ESR?``, until the ``until_bits_set`` bit is set); ``"wait"`` (sleep ``timeout_s``).
    ``timeout_s``: give up after this (for ``"wait"``: the time waited).
    """

    method: Literal["opc", "poll", "event", "wait"]
    timeout_s: float = 60.0
    query: str | None = None
    until: re.Pattern[str] | None = None
    until_bits_clear: int | None = None
    until_bits_set: int | None = None
    interval_s: float = 0.05
    command: str | None = None


@dataclass(frozen=True)
class Operation:
    """One abstract operation as a profile renders it (templates use ``{value}``).

    ``commands``: sent for their effect (a setting's value, an action, what a query sends
    first). ``queries``: sent for their replies (a setting's read-back, a query's reply).
    ``scale``: the value is sent (and read back) in units of ``scale`` times the operation's
    SI unit (``1000`` for an instrument that takes kHz).
    """

    name: str
    spec: OpSpec
    commands: tuple[str, ...] = ()
    queries: tuple[str, ...] = ()
    reply: ReplyFormat | None = None
    min: float | None = None
    max: float | None = None
    map: Mapping[str, str] = field(default_factory=dict)
    mask: int | None = None
    completion: Completion | None = None
    timeout_s: float | None = None
    scale: float = 1.0
    min_line: int | None = None
    """Line of ``min`` in the profile file (for messages naming where a limit comes from)."""
    max_line: int | None = None
    """Line of ``max`` in the profile file."""
    min_place: str | None = None
    """``file:line`` of ``min`` when it comes from another file (a profile it extends)."""
    max_place: str | None = None
    """``file:line`` of ``max`` when it comes from another file."""

    @property
    def read_back(self) -> str | None:
        """A setting's read-back query (its ``query``), if any."""
        return self.queries[0] if self.spec.shape == "setting" and self.queries else None

    def render_value(self, value: object) -> str:
        """The SCPI token for an already validated ``value`` (floats as ``%.12g``)."""
        kind = self.spec.value
        if kind == "bool":
            key = "on" if value else "off"
            return self.map.get(key, key.upper())
        if kind == "choice":
            return self.map[str(value)]
        if kind == "int":
            return str(int(value))  # type: ignore[call-overload]
        if kind == "float":
            text = format(float(value) / self.scale, ".12g")  # type: ignore[arg-type]
            return "0" if text == "-0" else text
        return str(value)

    @staticmethod
    def fill(template: str, token: str | None) -> str:
        """``template`` with ``{value}`` replaced by ``token``."""
        return template if token is None else template.replace(VALUE_PLACEHOLDER, token)


@dataclass(frozen=True)
class Profile:
    """A validated driver profile.

    ``name``: the profile name (the file's stem). ``kind``: instrument kind. ``idn_pattern``:
    regular expression searched in the ``*IDN?`` reply. ``scan_hint``: optional second pattern
    that ``sweeprig scan`` also requires before suggesting this profile. ``generic``: True for
    profiles meant for any instrument of the kind speaking SCPI-99. ``ops``: every operation,
    the common IEEE 488.2 ones included. ``path``: the file it came from. ``connection``:
    terminations, byte order and serial settings the transport applies. ``extends``: the
    chain of profiles it builds on (nearest first). ``sources``: every file read.
    ``compound_messages``: the instrument accepts IEEE 488.2 compound program messages
    (units joined by ``;``, several queries answered in one reply), so the driver may join
    settings and queries into one message; False (the default, never inherited through
    ``extends``) sends one unit per message.
    """

    name: str
    kind: str
    description: str
    idn_pattern: re.Pattern[str]
    scan_hint: re.Pattern[str] | None
    generic: bool
    ops: Mapping[str, Operation]
    path: Path | None = None
    connection: ConnectionSettings = DEFAULT_CONNECTION
    extends: tuple[str, ...] = ()
    sources: tuple[Path, ...] = ()
    compound_messages: bool = False

    def op(self, name: str) -> Operation:
        """The operation ``name``; :class:`InputError` if this profile lacks it."""
        try:
            return self.ops[name]
        except KeyError:
            raise InputError(
                f"driver profile {self.name!r} has no operation {name!r}",
                where=str(self.path) if self.path else self.name,
                fix=f"add [ops.{name}] to the profile ({DOCS_HINT})",
            ) from None

    def has(self, name: str) -> bool:
        """Whether the profile defines operation ``name``."""
        return name in self.ops

    def matches_idn(self, idn: str) -> bool:
        """Whether ``idn`` (a ``*IDN?`` reply) is accepted by this profile."""
        return self.idn_pattern.search(idn) is not None

    def suggested_for(self, idn: str) -> bool:
        """Whether ``sweeprig scan`` should suggest this profile for ``idn``."""
        if not self.matches_idn(idn):
            return False
        return self.scan_hint is None or self.scan_hint.search(idn) is not None


def key_line(text: str, path: Sequence[str]) -> int:
    """1-based line of the TOML key ``path`` (e.g. ``("ops", "power", "max")``) in ``text``,
    or of its nearest parent present (line 1 if none): the loader's own key locator."""
    return KeyLocator(text).line(tuple(path)) or 1


# -- loading ---------------------------------------------------------------------------------


def _templates(value: str | list[str] | None) -> tuple[str, ...]:
    if value is None:
        return ()
    return (value,) if isinstance(value, str) else tuple(value)


def _compile(pattern: str, where: str, what: str) -> re.Pattern[str]:
    try:
        return re.compile(pattern)
    except re.error as exc:
        raise InputError(
            f"{what} {pattern!r} is not a valid regular expression: {exc}",
            where=where,
            fix="write a Python regular expression, e.g. '^Tarnwick Labs,TW-SG6,'",
        ) from None


def _limit(raw: object, spec: OpSpec, where: str) -> float | None:
    if raw is None:
        return None
    if spec.value not in ("float", "int"):
        raise InputError(
            f"operation {spec.name!r} takes no numeric value, so it cannot have limits",
            where=where,
            fix="remove min/max here",
        )
    if spec.unit is None:
        if isinstance(raw, bool) or not isinstance(raw, int | float) or not math.isfinite(raw):
            raise InputError(f"limit {raw!r} is not a number", where=where, fix="write a number")
        return float(raw)
    return parse_quantity(raw, spec.unit, where=where)


def _check_templates(
    templates: Iterable[str], spec: OpSpec, where: str, *, needs_value: bool
) -> None:
    templates = list(templates)
    uses_value = False
    for template in templates:
        if not template.strip():
            raise InputError("an empty SCPI command", where=where, fix="remove it or fill it in")
        problem = wire_text_problem(template, what="SCPI command")
        if problem is not None:
            raise InputError(
                problem,
                where=where,
                fix="put each command in its own string of the list, with no control "
                "characters (a quoted string may hold ';')",
            )
        for token in _PLACEHOLDER_RE.findall(template):
            if token != VALUE_PLACEHOLDER:
                raise InputError(
                    f"SCPI command {template!r} contains {token!r}; the only placeholder is "
                    f"{VALUE_PLACEHOLDER}",
                    where=where,
                    fix="write the value's place as {value} and nothing else in braces",
                )
            uses_value = True
    if uses_value and spec.value == "none":
        raise InputError(
            f"operation {spec.name!r} takes no value, but its command uses {VALUE_PLACEHOLDER}",
            where=where,
            fix="remove {value} from the command",
        )
    if needs_value and spec.value != "none" and not uses_value and templates:
        raise InputError(
            f"operation {spec.name!r} needs its value in the command, but no command has "
            f"{VALUE_PLACEHOLDER}",
            where=where,
            fix="put {value} where the number goes, e.g. 'FREQ {value}'",
        )


def _check_token(token: str, where: str) -> None:
    """A value token (a map entry) is sent inside a command: the rules of a template, and no
    placeholder."""
    if not token.strip():
        raise InputError("an empty SCPI value", where=where,
                         fix='write the token the instrument expects, e.g. "ON"')
    problem = wire_text_problem(token, what="SCPI value")
    if problem is not None:
        raise InputError(
            problem,
            where=where,
            fix="write only the value's token (e.g. \"ON\"); a value cannot end its command "
            "or start another, so no ';', line breaks or control characters",
        )
    if _PLACEHOLDER_RE.search(token):
        raise InputError(f"SCPI value {token!r} contains a brace", where=where,
                         fix="write only the value's token, without { or }")


def _build_op(
    name: str, spec: OpSpec, model: _OpModel, doc: Document | None, display: str
) -> Operation:
    def at(*keys: str) -> str:
        return doc.where(("ops", name, *keys)) if doc is not None else f"{display}: ops.{name}"

    cmd_t, query_t = _templates(model.command), _templates(model.query)
    if spec.shape == "setting":
        if model.command is None:
            raise InputError(
                f"setting {name!r} needs 'command' (the command that sets it)",
                where=at(),
                fix="add command = \"<SCPI> {value}\"",
            )
        if len(query_t) > 1:
            raise InputError(
                f"setting {name!r} takes one read-back query",
                where=at("query"),
                fix="write query = \"<SCPI>?\"",
            )
    elif spec.shape == "action":
        if model.command is None:
            raise InputError(
                f"action {name!r} needs 'command' (the commands to send)",
                where=at(),
                fix="add command = \"<SCPI>\"",
            )
        if model.query is not None:
            raise InputError(
                f"action {name!r} takes 'command' only (with 'complete' to wait)",
                where=at("query"),
                fix="remove query",
            )
    elif model.query is None:
        raise InputError(
            f"query {name!r} needs 'query' (the query whose reply is read)",
            where=at(),
            fix="add query = \"<SCPI>?\"",
        )
    if spec.shape == "setting":
        _check_templates(cmd_t, spec, at("command"), needs_value=True)
        _check_templates(query_t, _NO_VALUE, at("query"), needs_value=False)
    else:
        _check_templates(cmd_t, spec, at("command"),
                         needs_value=spec.shape == "action" and not query_t)
        _check_templates(query_t, spec, at("query"), needs_value=False)
    if (
        spec.shape == "query"
        and spec.value != "none"
        and not any(VALUE_PLACEHOLDER in t for t in (*cmd_t, *query_t))
    ):
        raise InputError(
            f"query {name!r} needs its value ({spec.summary}) in 'command' or 'query'",
            where=at(),
            fix="put {value} where the number goes",
        )

    reply = model.reply if model.reply is not None else spec.reply
    if model.reply is not None and model.reply not in REPLY_FORMATS:
        raise InputError(
            f"reply format {model.reply!r} is not one of {', '.join(REPLY_FORMATS)}",
            where=at("reply"),
            fix="pick one of those",
        )
    if spec.shape == "query" and spec.name == "peak" and len(query_t) != 2:
        raise InputError(
            "'peak' needs two queries in 'query': the marker frequency, then its level",
            where=at("query"),
            fix='write query = ["CALC:MARK1:X?", "CALC:MARK1:Y?"]',
        )
    if spec.shape == "query" and spec.name != "peak" and len(query_t) > 1:
        raise InputError(
            f"query {name!r} takes one query in 'query'",
            where=at("query"),
            fix="send the other commands with 'command' before it",
        )

    mapping = dict(model.map or {})
    if mapping:
        if spec.value == "bool":
            allowed: tuple[str, ...] = ("on", "off")
        elif spec.value == "choice":
            allowed = spec.choices
        else:
            raise InputError(
                f"operation {name!r} takes a {spec.value} value, which has no 'map'",
                where=at("map"),
                fix="remove map (it is for on/off and named choices)",
            )
        for key in mapping:
            if key not in allowed:
                raise InputError(
                    f"map key {key!r} is not one of {', '.join(allowed)}",
                    where=at("map", key),
                    fix=f"use the keys {', '.join(allowed)}",
                )
        for key, token in mapping.items():
            _check_token(token, at("map", key))
    if spec.value == "choice":
        missing = [c for c in spec.choices if c not in mapping]
        if missing:
            raise InputError(
                f"operation {name!r} needs a map entry for {', '.join(missing)}",
                where=at("map"),
                fix="map each choice to its SCPI token, e.g. map = { ascii = \"ASC\" }",
            )

    low = _limit(model.min, spec, at("min"))
    high = _limit(model.max, spec, at("max"))
    if low is not None and high is not None and low > high:
        raise InputError(
            f"min {model.min!r} is above max {model.max!r}",
            where=at("min"),
            fix="swap them",
        )
    scale = _scale(model.unit, spec, at("unit"))
    if isinstance(model.complete, _PollModel):
        _check_templates([model.complete.query], _NO_VALUE, at("complete", "query"),
                         needs_value=False)
    if isinstance(model.complete, _EventModel):
        _check_templates([model.complete.command], _NO_VALUE, at("complete", "command"),
                         needs_value=False)
        _check_templates([model.complete.query], _NO_VALUE, at("complete", "query"),
                         needs_value=False)
    if model.mask is not None and reply != "int":
        raise InputError(
            "'mask' needs an integer reply",
            where=at("mask"),
            fix="set reply = \"int\" or remove mask",
        )

    completion = _completion(model, at)
    if completion is not None and spec.shape == "query":
        raise InputError(
            f"query {name!r} cannot have 'complete'",
            where=at("complete"),
            fix="put the waiting on the action before it",
        )

    def place(side: str) -> tuple[int | None, str | None]:
        if doc is None or getattr(model, side) is None:
            return None, None
        key = ("ops", name, side)
        source = doc.root.origin(key)
        line = source.locator.line(key)
        if source is doc.root:
            return line, None
        return None, f"{source.display}:{line}" if line else source.display

    min_line, min_place = place("min")
    max_line, max_place = place("max")
    return Operation(
        name=name,
        spec=spec,
        commands=cmd_t,
        queries=query_t,
        reply=reply,  # type: ignore[arg-type]
        min=low,
        max=high,
        map=mapping,
        mask=model.mask if model.mask is not None else spec.default_mask,
        completion=completion,
        timeout_s=model.timeout_s,
        scale=scale,
        min_line=min_line,
        max_line=max_line,
        min_place=min_place,
        max_place=max_place,
    )


def _scale(unit: str | None, spec: OpSpec, where: str) -> float:
    """SI units per unit sent, for ``unit = "kHz"`` (1000); 1 without a unit."""
    if unit is None:
        return 1.0
    if spec.value != "float" or spec.unit is None:
        raise InputError(
            f"operation {spec.name!r} takes no quantity, so it cannot have a unit",
            where=where, fix="remove unit here")
    if spec.safety:
        raise InputError(
            f"operation {spec.name!r} sets a level that the last-step guard reads in "
            f"{UNIT_SYMBOL[spec.unit]}; it cannot be scaled",
            where=where,
            fix=f"remove unit and write the instrument's unit suffix into the command "
            f"instead, e.g. \"LEVEL {{value}} {UNIT_SYMBOL[spec.unit].upper()}\"")
    try:
        one = parse_quantity(f"1 {unit}", spec.unit, where=where)
        two = parse_quantity(f"2 {unit}", spec.unit, where=where)
    except SweeprigError as exc:
        raise InputError(
            f"unit {unit!r} is not a unit of {spec.summary.split(',')[0]}: {exc.what}",
            where=where, fix=f"write a unit of the same kind as {UNIT_SYMBOL[spec.unit]!r}, "
            "e.g. \"kHz\" or \"MHz\"") from None
    if not (one > 0 and math.isclose(two, 2 * one)):
        raise InputError(f"unit {unit!r} is not a multiple of {UNIT_SYMBOL[spec.unit]}",
                         where=where, fix="use a scaled unit such as \"kHz\", \"mV\", \"ms\"")
    return one


def _completion(model: _OpModel, at: Callable[..., str]) -> Completion | None:
    raw = model.complete
    if raw is None or raw == "none":
        return None
    if raw == "opc":
        return Completion("opc", timeout_s=model.timeout_s or 60.0)
    if isinstance(raw, _OpcModel):
        return Completion("opc", timeout_s=raw.timeout_s)
    if isinstance(raw, _WaitModel):
        return Completion("wait", timeout_s=raw.wait_s)
    if isinstance(raw, _EventModel):
        return Completion("event", timeout_s=raw.timeout_s, query=raw.query,
                          until_bits_set=raw.bit, interval_s=raw.interval_s,
                          command=raw.command)
    assert isinstance(raw, _PollModel)
    if raw.until is None and raw.until_bits_clear is None and raw.until_bits_set is None:
        raise InputError(
            "a poll needs 'until' (a pattern for the reply), 'until_bits_clear' or "
            "'until_bits_set' (a mask)",
            where=at("complete"),
            fix='add until = "0" or until_bits_clear = 8',
        )
    return Completion(
        "poll",
        timeout_s=raw.timeout_s,
        query=raw.query,
        until=_compile(raw.until, at("complete", "until"), "'until' pattern")
        if raw.until is not None
        else None,
        until_bits_clear=raw.until_bits_clear,
        until_bits_set=raw.until_bits_set,
        interval_s=raw.interval_s,
    )


_NO_VALUE = OpSpec("read_back", "query", "read-back")


def _connection(model: _ConnectionModel, doc: Document) -> ConnectionSettings:
    for key in ("write_termination", "read_termination"):
        value = getattr(model, key)
        if value is not None and value not in TERMINATIONS:
            raise InputError(
                f"{key} {value!r} is not LF, CR, CR LF or empty",
                where=doc.where(("connection", key)),
                fix='write "\\n" (LF), "\\r" (CR), "\\r\\n" or "" (the bus\'s end indicator)')
    serial = None
    if model.serial is not None:
        raw = model.serial
        if isinstance(raw.stop_bits, bool) or raw.stop_bits not in (1, 1.5, 2):
            raise InputError(
                f"stop_bits {raw.stop_bits!r} is not 1, 1.5 or 2",
                where=doc.where(("connection", "serial", "stop_bits")),
                fix="write 1, 1.5 or 2 (most instruments: 1)")
        if raw.stop_bits == 1.5 and raw.data_bits != 5:
            # common practice, no source: 16550-type UARTs give 1.5 stop bits only with 5
            # data bits
            raise InputError(
                f"1.5 stop bits with {raw.data_bits} data bits is not a setting a serial port "
                "can make (1.5 goes with 5 data bits only)",
                where=doc.where(("connection", "serial", "stop_bits")),
                fix="write stop_bits = 1 or 2, as the instrument's manual says")
        serial = SerialSettings(baud_rate=raw.baud_rate, data_bits=raw.data_bits,
                                parity=raw.parity, stop_bits=float(raw.stop_bits),
                                flow_control=raw.flow_control)
    return ConnectionSettings(
        write_termination=model.write_termination,
        read_termination=model.read_termination,
        byte_order=model.byte_order,
        datatype=model.datatype,
        serial=serial,
    )


#: Header keys a profile does not take from the profile it extends.
_NOT_INHERITED = ("name", "generic", "extends", "compound_messages")


def parse_profile(text: str, path: Path | str = "<profile>") -> Profile:
    """Validate the TOML ``text`` of a profile. ``path`` names it in error messages.

    A profile given as text cannot extend another (``load_profile`` resolves ``extends``).
    Raises :class:`InputError` naming ``file:line: key`` for any problem.
    """
    display = str(path)
    source = SourceFile(path=Path(display), display=display, text=text,
                        data=parse_toml(text, display))
    if "extends" in _header(source):
        raise InputError(
            "a profile given as text cannot extend another (its base is found beside its file)",
            where=source.where(("profile", "extends")),
            fix="save it as a file and load it with load_profile(path)")
    return _build_profile(source, path if isinstance(path, Path) else None, ())


def _header(source: SourceFile) -> dict[str, Any]:
    header = source.data.get("profile")
    return header if isinstance(header, dict) else {}


def _merged(source: SourceFile) -> dict[str, Any]:
    """``source`` over the profile it extends: tables merge key by key, except an operation's
    ``complete``, which is replaced whole (a wait of another method shares no keys)."""
    data = source.data
    for parent in source.includes:
        base = _merged(parent)
        merged = deep_merge(base, data)
        ops, base_ops = data.get("ops"), base.get("ops")
        if isinstance(ops, dict) and isinstance(base_ops, dict):
            for name, op in ops.items():
                if isinstance(op, dict) and "complete" in op and isinstance(
                        merged["ops"].get(name), dict):
                    merged["ops"][name] = {**merged["ops"][name], "complete": op["complete"]}
        data = merged
    return data


#: Keys of the earlier profile format and the words that replaced them.
_OLD_KEYS = {"set": "command", "do": "command", "get": "query", "ask": "query"}


def _refuse_old_keys(doc: Document) -> None:
    """A profile written with the earlier key names gets the new name in its fix."""
    ops = doc.data.get("ops")
    if not isinstance(ops, dict):
        return
    for name, op in ops.items():
        if isinstance(op, dict):
            for key in op:
                if key in _OLD_KEYS:
                    raise InputError(
                        f"unknown key {key!r} (a key of the earlier profile format)",
                        where=doc.where(("ops", name, key)),
                        fix=f"rename it to {_OLD_KEYS[key]!r}: profiles now say 'command' for "
                        "what is sent for its effect and 'query' for what is read "
                        f"({DOCS_HINT})")


def _build_profile(root: SourceFile, path: Path | None, chain: tuple[str, ...]) -> Profile:
    doc = Document(root=root, data=_merged(root))
    data = doc.data
    _refuse_old_keys(doc)
    try:
        model = _FileModel.model_validate(data)
    except ValidationError as exc:
        raise validation_error(_FileModel, exc, doc.where, docs=DOCS_PAGE) from None
    header = model.profile
    if PROFILE_NAME_RE.fullmatch(header.name) is None:
        raise InputError(
            f"profile name {header.name!r} is not lower-case letters, digits and '-'",
            where=doc.where(("profile", "name")),
            fix="rename it, e.g. 'tarnwick-sg6'",
        )
    if path is not None and path.stem != header.name:
        raise InputError(
            f"profile name {header.name!r} differs from the file name {path.name!r}",
            where=doc.where(("profile", "name")),
            fix=f"name the file {header.name}.toml or the profile {path.stem!r}",
        )
    if header.kind not in KINDS:
        raise InputError(
            f"kind {header.kind!r} is not one of {', '.join(KINDS)}",
            where=doc.where(("profile", "kind")),
            fix="pick the kind of instrument this profile drives",
        )
    idn_pattern = _compile(header.idn_pattern, doc.where(("profile", "idn_pattern")),
                           "idn_pattern")
    scan_hint = (
        _compile(header.scan_hint, doc.where(("profile", "scan_hint")), "scan_hint")
        if header.scan_hint is not None
        else None
    )
    specs = ops_for(header.kind)
    for name in model.ops:
        if name not in specs:
            close = difflib.get_close_matches(name, list(specs), n=1, cutoff=0.6)
            hint = f"did you mean {close[0]!r}? " if close else ""
            raise InputError(
                f"{header.kind} profiles have no operation {name!r}",
                where=doc.where(("ops", name)),
                fix=f"{hint}use one of: {', '.join(specs)}",
            )
    ops: dict[str, Operation] = {}
    for name, spec in specs.items():
        if name in model.ops:
            ops[name] = _build_op(name, spec, model.ops[name], doc, root.display)
        elif name in COMMON_DEFAULTS:
            default = _OpModel.model_validate(COMMON_DEFAULTS[name])
            ops[name] = _build_op(name, spec, default, None, root.display)
        elif spec.required:
            raise InputError(
                f"{header.kind} profiles need the operation {name!r} ({spec.summary})",
                where=doc.where(("ops",)),
                fix=f"add [ops.{name}] ({DOCS_HINT})",
            )
    if header.kind == "analyzer" and not (
        "trace_ascii" in ops or "trace_real32" in ops
    ):
        raise InputError(
            "analyzer profiles need 'trace_ascii' or 'trace_real32'",
            where=doc.where(("ops",)),
            fix="add [ops.trace_ascii] with query = \"TRAC? TRACE1\"",
        )
    sources: list[Path] = []

    def walk(source: SourceFile) -> None:
        sources.append(source.path)
        for parent in source.includes:
            walk(parent)

    walk(root)
    return Profile(
        name=header.name,
        kind=header.kind,
        description=header.description,
        idn_pattern=idn_pattern,
        scan_hint=scan_hint,
        generic=header.generic,
        ops=ops,
        path=path,
        connection=_connection(model.connection, doc),
        extends=chain,
        sources=tuple(sources),
        compound_messages=header.compound_messages,
    )


def _read_source(path: Path) -> SourceFile:
    display = display_path(path)
    text = read_text(path, display, what="driver profile file")
    return SourceFile(path=path, display=display, text=text, data=parse_toml(text, display))


def _parent_path(name: object, child: SourceFile, search_dirs: Sequence[Path]) -> Path:
    where = child.where(("profile", "extends"))
    if not isinstance(name, str) or PROFILE_NAME_RE.fullmatch(name) is None:
        raise InputError(
            f"extends {short_repr(name)} is not a profile name",
            where=where,
            fix='name the profile it builds on, e.g. extends = "scpi-analyzer"')
    known = available_profiles([child.path.parent, *search_dirs])
    if name not in known:
        close = difflib.get_close_matches(name, list(known), n=1, cutoff=0.6)
        raise InputError(
            f"extends {name!r}, but there is no profile of that name",
            where=where,
            fix=f"did you mean {close[0]!r}?" if close else
            f"name one of: {', '.join(known) or 'none found'} (this file's folder and the "
            "profile folders are searched)")
    return known[name]


def _load_chain(path: Path, search_dirs: Sequence[Path]) -> tuple[SourceFile, tuple[str, ...]]:
    """Read ``path`` and every profile it extends; each file's ``includes`` holds its parent
    (so that every key is reported at the file that gives it)."""
    root = _read_source(path)
    chain_paths = [_resolved(path)]
    chain_names = [path.stem]
    child = root
    parent_name = _header(root).get("extends")
    while parent_name is not None:
        parent_path = _parent_path(parent_name, child, search_dirs)
        if _resolved(parent_path) in chain_paths:
            shown = " → ".join([*chain_names, str(parent_name)])
            raise InputError(
                f"profile inheritance cycle: {shown}",
                where=child.where(("profile", "extends")),
                fix="remove one 'extends' so that no profile builds on itself")
        if len(chain_paths) > MAX_EXTENDS:
            raise InputError(
                f"more than {MAX_EXTENDS} profiles extend one another",
                where=child.where(("profile", "extends")),
                fix="extend a profile closer to the generic one")
        parent = _read_source(parent_path)
        next_name = _header(parent).get("extends")
        header = parent.data.get("profile")
        if isinstance(header, dict):
            parent.data = {**parent.data,
                           "profile": {k: v for k, v in header.items()
                                       if k not in _NOT_INHERITED}}
        child.includes.append(parent)
        chain_paths.append(_resolved(parent_path))
        chain_names.append(str(parent_name))
        child, parent_name = parent, next_name
    return root, tuple(chain_names[1:])


MAX_EXTENDS = 16
"""How deep profiles may build on one another."""


def _load(path: Path, search_dirs: tuple[Path, ...]) -> Profile:
    root, chain = _load_chain(path, search_dirs)
    return _build_profile(root, path, chain)


@functools.lru_cache(maxsize=128)
def _load_cached(path: Path, stamps: tuple[tuple[int, int], ...],
                 search_dirs: tuple[Path, ...]) -> Profile:
    return _load(path, search_dirs)


def _stamp(path: Path) -> tuple[int, int]:
    stat = path.stat()
    return stat.st_mtime_ns, stat.st_size


def load_profile_file(path: Path | str, *, search_dirs: Iterable[Path | str] = ()) -> Profile:
    """Load and validate the profile file at ``path`` (cached while it and the profiles it
    extends are unchanged). ``search_dirs``: where profiles it extends are looked up (after
    its own folder)."""
    path = Path(path)
    dirs = tuple(Path(d) for d in search_dirs)
    try:
        stat = path.stat()
    except OSError:
        return _load(path, dirs)
    if not S_ISREG(stat.st_mode):  # refused by read_text, under the name given
        return _load(path, dirs)
    resolved = path.resolve()
    profile = _load_cached(resolved, (_stamp(resolved),), dirs)
    try:
        stamps = tuple(_stamp(p) for p in profile.sources)
    except OSError:
        return _load(path, dirs)
    if len(stamps) > 1:
        profile = _load_cached(resolved, stamps, dirs)
        if tuple(_stamp(p) for p in profile.sources) != stamps:  # pragma: no cover - a race
            return _load(path, dirs)
    return profile


def builtin_profile_dirs() -> list[Path]:
    """Folders with the shipped profiles: the installed package's, then a source checkout's."""
    package = Path(sweeprig.__file__).resolve().parent
    dirs = [package / "_drivers", package.parent / "drivers"]
    return [d for d in dirs if d.is_dir()]


def profile_dirs(search_dirs: Iterable[Path | str] = ()) -> list[Path]:
    """The folders searched for profiles: ``search_dirs`` first, then the built-in ones."""
    seen: list[Path] = []
    for folder in [*(Path(d) for d in search_dirs), *builtin_profile_dirs()]:
        if folder not in seen:
            seen.append(folder)
    return seen


def available_profiles(search_dirs: Iterable[Path | str] = ()) -> dict[str, Path]:
    """Profile name → file, for every ``*.toml`` in the search folders (first one wins),
    sorted by name. The keys are what a bench file may name."""
    found: dict[str, Path] = {}
    for folder in profile_dirs(search_dirs):
        if not folder.is_dir():
            continue
        for file in sorted(folder.glob("*.toml")):
            if PROFILE_NAME_RE.fullmatch(file.stem) and file.stem not in found:
                found[file.stem] = file
    return dict(sorted(found.items()))


def _looks_like_path(name: str) -> bool:
    return name.endswith(".toml") or "/" in name or "\\" in name


def load_profile(
    name_or_path: str | Path, *, search_dirs: Iterable[Path | str] = ()
) -> Profile:
    """Load a profile by name (``"scpi-source"``) or by path (``"lab/tw-sg6.toml"``).

    Names are looked up in ``search_dirs`` first, then in the shipped profiles.
    Raises :class:`InputError` for an unknown name or a bad file.
    """
    if isinstance(name_or_path, Path) or _looks_like_path(name_or_path):
        return load_profile_file(name_or_path, search_dirs=search_dirs)
    search_dirs = list(search_dirs)
    known = available_profiles(search_dirs)
    if name_or_path not in known:
        names = ", ".join(known) or "none found"
        raise InputError(
            f"no driver profile named {name_or_path!r}",
            where="driver profile",
            fix=f"use one of: {names}; or give the path of a profile file ({DOCS_HINT})",
        )
    return load_profile_file(known[name_or_path], search_dirs=search_dirs)


def load_all_profiles(search_dirs: Iterable[Path | str] = ()) -> list[Profile]:
    """Every available profile that loads; files with errors are skipped (see ``check``)."""
    search_dirs = list(search_dirs)
    profiles = []
    for path in available_profiles(search_dirs).values():
        try:
            profiles.append(load_profile_file(path, search_dirs=search_dirs))
        except SweeprigError:
            continue
    return profiles


def matching_profiles(idn: str, profiles: Iterable[Profile]) -> list[Profile]:
    """The profiles ``sweeprig scan`` suggests for an ``*IDN?`` reply: model-specific
    profiles first, then generic ones, each group by name."""
    hits = [p for p in profiles if p.suggested_for(idn)]
    return sorted(hits, key=lambda p: (p.generic, p.name))


def _resolved(path: Path) -> Path:
    try:
        return path.resolve()
    except (OSError, RuntimeError, ValueError):
        return path
