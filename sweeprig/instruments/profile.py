"""Driver profiles: TOML files that map abstract operations to SCPI, and their lookup.

A profile (``drivers/<name>.toml``) says which instrument kind it drives, which ``*IDN?``
replies it accepts, and for each abstract operation (:mod:`sweeprig.instruments.ops`) the SCPI
to send, the reply format, the value limits and how to wait for completion. The schema is
documented in ``docs/driver-profiles.md``.

Lookup order for a profile name: folders given by the caller, then the profiles shipped in the
installed package (``sweeprig/_drivers``), then the top-level ``drivers/`` of a source checkout.

Errors in a profile file are :class:`~sweeprig.errors.InputError` naming ``file:line: key``.
"""

from __future__ import annotations

import difflib
import functools
import math
import re
import tomllib
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from stat import S_ISREG
from typing import Annotated, Literal

from pydantic import BaseModel, ConfigDict, Field, ValidationError

import sweeprig
from sweeprig.errors import InputError, SweeprigError
from sweeprig.files import read_file_bytes
from sweeprig.formats.toml_depth import check_toml_depth, check_value_count
from sweeprig.instruments.ops import (
    COMMON_DEFAULTS,
    KINDS,
    REPLY_FORMATS,
    OpSpec,
    ReplyFormat,
    ops_for,
)
from sweeprig.instruments.scpi_text import wire_text_problem
from sweeprig.units import parse_quantity, shorten

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


# -- the file schema (pydantic) ---------------------------------------------------------------

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
    interval_s: Annotated[float, Field(gt=0, le=60)] = 0.05
    timeout_s: _TimeoutS = 60.0


class _OpcModel(_Strict):
    method: Literal["opc"]
    timeout_s: _TimeoutS = 60.0


class _OpModel(_Strict):
    set: Templates | None = None
    get: str | None = None
    do: Templates | None = None
    ask: Templates | None = None
    reply: str | None = None
    min: float | int | str | None = None
    max: float | int | str | None = None
    map: dict[str, str] | None = None
    mask: Annotated[int, Field(ge=1)] | None = None
    complete: Literal["opc", "none"] | _OpcModel | _PollModel | None = None
    timeout_s: _TimeoutS | None = None
    note: str | None = None


class _HeaderModel(_Strict):
    name: str
    kind: str
    description: str = ""
    idn_pattern: str
    scan_hint: str | None = None
    generic: bool = False


class _FileModel(_Strict):
    profile: _HeaderModel
    ops: dict[str, _OpModel] = Field(default_factory=dict)


# -- the runtime model ------------------------------------------------------------------------


@dataclass(frozen=True)
class Completion:
    """How to wait after an operation's commands.

    ``method``: ``"opc"`` (query the profile's ``operation_complete``, expect 1) or ``"poll"``
    (send ``query`` every ``interval_s`` until the reply full-matches ``until`` or, read as an
    integer, has none of the ``until_bits_clear`` bits set). ``timeout_s``: give up after this.
    """

    method: Literal["opc", "poll"]
    timeout_s: float = 60.0
    query: str | None = None
    until: re.Pattern[str] | None = None
    until_bits_clear: int | None = None
    interval_s: float = 0.05


@dataclass(frozen=True)
class Operation:
    """One abstract operation as a profile renders it (templates use ``{value}``)."""

    name: str
    spec: OpSpec
    set: tuple[str, ...] = ()
    get: str | None = None
    do: tuple[str, ...] = ()
    ask: tuple[str, ...] = ()
    reply: ReplyFormat | None = None
    min: float | None = None
    max: float | None = None
    map: Mapping[str, str] = field(default_factory=dict)
    mask: int | None = None
    completion: Completion | None = None
    timeout_s: float | None = None
    min_line: int | None = None
    """Line of ``min`` in the profile file (for messages naming where a limit comes from)."""
    max_line: int | None = None
    """Line of ``max`` in the profile file."""

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
            text = format(float(value), ".12g")  # type: ignore[arg-type]
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
    the common IEEE 488.2 ones included. ``path``: the file it came from.
    """

    name: str
    kind: str
    description: str
    idn_pattern: re.Pattern[str]
    scan_hint: re.Pattern[str] | None
    generic: bool
    ops: Mapping[str, Operation]
    path: Path | None = None

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


# -- locating keys in the file (for error messages) -------------------------------------------


def _split_header(text: str) -> tuple[str, ...]:
    parts = [p.strip().strip('"').strip("'") for p in text.split(".")]
    return tuple(p for p in parts if p)


def key_line(text: str, path: Sequence[str]) -> int:
    """1-based line of the TOML key ``path`` (e.g. ``("ops", "power", "max")``) in ``text``.

    A simple scan of table headers and ``key =`` lines; falls back to the nearest parent found,
    then to line 1. Good enough to point a person at the right place.
    """
    want = tuple(str(p) for p in path)
    best_line, best_depth = 1, 0
    table: tuple[str, ...] = ()
    for number, raw in enumerate(text.splitlines(), start=1):
        line = raw.strip()
        if not line or line.startswith("#"):
            continue
        if line.startswith("["):
            inner = line.strip("[]").split("#")[0].strip().rstrip("]").strip()
            table = _split_header(inner)
            full = table
        else:
            key = line.split("=", 1)[0].strip() if "=" in line else ""
            if not key:
                continue
            full = table + _split_header(key)
        depth = 0
        for a, b in zip(full, want, strict=False):
            if a != b:
                break
            depth += 1
        if depth == len(want) and len(full) >= len(want):
            return number
        if depth > best_depth and depth == len(full):
            best_line, best_depth = number, depth
    return best_line


_DOCS_LIST = "docs/driver-profiles.md lists every key"
_LONG_DIGITS = re.compile(r"[0-9_]{1000,}")


def _allowed_keys(parent: Sequence[str]) -> list[str]:
    """Keys the profile table at ``parent`` may hold (for "did you mean" suggestions)."""
    models: tuple[type[BaseModel], ...] = ()
    if not parent:
        models = (_FileModel,)
    elif list(parent) == ["profile"]:
        models = (_HeaderModel,)
    elif len(parent) == 2 and parent[0] == "ops":
        models = (_OpModel,)
    elif len(parent) == 3 and parent[0] == "ops" and parent[2] == "complete":
        models = (_PollModel, _OpcModel)
    return sorted({name for model in models for name in model.model_fields})


def _where(path: Path | str, text: str, keys: Sequence[str]) -> str:
    dotted = ".".join(shorten(str(k)) for k in keys)
    line = key_line(text, keys)
    return f"{path}:{line}: {dotted}" if dotted else f"{path}:{line}"


_TYPE_NAMES = frozenset({"str", "int", "float", "bool", "list", "dict"})


def _pydantic_location(data: object, loc: Sequence[object]) -> list[str]:
    """Keep the part of a pydantic error location that exists in the TOML data."""
    keys: list[str] = []
    node = data
    for item in loc:
        if isinstance(node, dict) and item in node:
            keys.append(str(item))
            node = node[item]
        elif isinstance(node, list) and isinstance(item, int) and 0 <= item < len(node):
            node = node[item]
        elif isinstance(item, str) and (
            item.startswith("_") or "[" in item or item in _TYPE_NAMES
        ):
            continue  # a union member's name, not a key of the file
        else:
            # a missing key: name it (its name ends the pydantic location)
            if isinstance(item, str) and isinstance(node, dict):
                keys.append(item)
            break
    return keys


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
    name: str, spec: OpSpec, model: _OpModel, path: Path | str, text: str, explicit: bool
) -> Operation:
    def at(*keys: str) -> str:
        return _where(path, text, ("ops", name, *keys)) if explicit else f"{path}: ops.{name}"

    if spec.shape == "setting":
        if model.set is None:
            raise InputError(
                f"setting {name!r} needs 'set' (the command that sets it)",
                where=at(),
                fix="add set = \"<SCPI> {value}\"",
            )
        if model.do is not None or model.ask is not None:
            raise InputError(
                f"setting {name!r} takes 'set' and 'get', not 'do'/'ask'",
                where=at("do" if model.do is not None else "ask"),
                fix="use set/get",
            )
    elif spec.shape == "action":
        if model.do is None:
            raise InputError(
                f"action {name!r} needs 'do' (the commands to send)",
                where=at(),
                fix="add do = \"<SCPI>\"",
            )
        if model.set is not None or model.get is not None or model.ask is not None:
            raise InputError(
                f"action {name!r} takes 'do' only (with 'complete' to wait)",
                where=at(),
                fix="remove set/get/ask",
            )
    else:
        if model.ask is None:
            raise InputError(
                f"query {name!r} needs 'ask' (the query whose reply is read)",
                where=at(),
                fix="add ask = \"<SCPI>?\"",
            )
        if model.set is not None or model.get is not None:
            raise InputError(
                f"query {name!r} takes 'do' and 'ask', not 'set'/'get'",
                where=at(),
                fix="remove set/get",
            )
    set_t, do_t, ask_t = _templates(model.set), _templates(model.do), _templates(model.ask)
    _check_templates(set_t, spec, at("set"), needs_value=True)
    if model.get is not None:
        _check_templates([model.get], spec if spec.shape != "setting" else _NO_VALUE, at("get"),
                         needs_value=False)
    _check_templates(do_t, spec, at("do"), needs_value=spec.shape == "action" and not ask_t)
    _check_templates(ask_t, spec, at("ask"), needs_value=False)
    if (
        spec.shape == "query"
        and spec.value != "none"
        and not any(VALUE_PLACEHOLDER in t for t in (*do_t, *ask_t))
    ):
        raise InputError(
            f"query {name!r} needs its value ({spec.summary}) in 'do' or 'ask'",
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
    if spec.name == "peak" and len(ask_t) != 2:
        raise InputError(
            "'peak' needs two queries in 'ask': the marker frequency, then its level",
            where=at("ask"),
            fix='write ask = ["CALC:MARK1:X?", "CALC:MARK1:Y?"]',
        )
    if spec.name != "peak" and len(ask_t) > 1:
        raise InputError(
            f"query {name!r} takes one query in 'ask'",
            where=at("ask"),
            fix="send the other commands with 'do' before it",
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
    if isinstance(model.complete, _PollModel):
        _check_templates([model.complete.query], _NO_VALUE, at("complete", "query"),
                         needs_value=False)
    if model.mask is not None and reply != "int":
        raise InputError(
            "'mask' needs an integer reply",
            where=at("mask"),
            fix="set reply = \"int\" or remove mask",
        )

    completion: Completion | None = None
    raw = model.complete
    if raw == "opc":
        completion = Completion("opc", timeout_s=model.timeout_s or 60.0)
    elif isinstance(raw, _OpcModel):
        completion = Completion("opc", timeout_s=raw.timeout_s)
    elif isinstance(raw, _PollModel):
        if raw.until is None and raw.until_bits_clear is None:
            raise InputError(
                "a poll needs 'until' (a pattern for the reply) or 'until_bits_clear' (a mask)",
                where=at("complete"),
                fix='add until = "0" or until_bits_clear = 8',
            )
        completion = Completion(
            "poll",
            timeout_s=raw.timeout_s,
            query=raw.query,
            until=_compile(raw.until, at("complete", "until"), "'until' pattern")
            if raw.until is not None
            else None,
            until_bits_clear=raw.until_bits_clear,
            interval_s=raw.interval_s,
        )
    if completion is not None and spec.shape == "query":
        raise InputError(
            f"query {name!r} cannot have 'complete'",
            where=at("complete"),
            fix="put the waiting on the action before it",
        )

    return Operation(
        name=name,
        spec=spec,
        set=set_t,
        get=model.get,
        do=do_t,
        ask=ask_t,
        reply=reply,  # type: ignore[arg-type]
        min=low,
        max=high,
        map=mapping,
        mask=model.mask,
        completion=completion,
        timeout_s=model.timeout_s,
        min_line=key_line(text, ("ops", name, "min")) if explicit and low is not None else None,
        max_line=key_line(text, ("ops", name, "max")) if explicit and high is not None else None,
    )


_NO_VALUE = OpSpec("get", "query", "read-back")


def parse_profile(text: str, path: Path | str = "<profile>") -> Profile:
    """Validate the TOML ``text`` of a profile. ``path`` names it in error messages.

    Raises :class:`InputError` naming ``file:line: key`` for any problem.
    """
    check_toml_depth(text, str(path))
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        match = re.search(r"line (\d+)", str(exc))
        where = f"{path}:{match[1]}" if match else str(path)
        raise InputError(
            f"not valid TOML: {exc}",
            where=where,
            fix="fix the TOML syntax (strings in quotes, one key per line)",
        ) from None
    except ValueError:  # an integer of more than 4300 digits (Python's int-from-text limit)
        match = _LONG_DIGITS.search(text)
        line = text.count("\n", 0, match.start()) + 1 if match else None
        raise InputError(
            "not valid TOML: a number too long to read",
            where=f"{path}:{line}" if line else str(path),
            fix="write the number with at most a few digits (and an exponent, e.g. 2.4e9)",
        ) from None
    check_value_count(data, str(path))
    try:
        model = _FileModel.model_validate(data)
    except ValidationError as exc:
        first = exc.errors()[0]
        keys = _pydantic_location(data, first["loc"])
        more = len(exc.errors()) - 1
        extra = f" (and {more} more problem{'s' if more > 1 else ''})" if more else ""
        msg = first["msg"]
        fix = f"correct this key ({_DOCS_LIST})"
        if first["type"] == "extra_forbidden":
            msg = "unknown key"
            close = difflib.get_close_matches(keys[-1] if keys else "", _allowed_keys(keys[:-1]),
                                              n=1, cutoff=0.6)
            if close:
                fix = f"did you mean {close[0]!r}? ({_DOCS_LIST})"
        elif first["type"] == "missing":
            msg = "missing key"
        raise InputError(
            f"{msg}{extra}",
            where=_where(path, text, keys),
            fix=fix,
        ) from None
    header = model.profile
    if PROFILE_NAME_RE.fullmatch(header.name) is None:
        raise InputError(
            f"profile name {header.name!r} is not lower-case letters, digits and '-'",
            where=_where(path, text, ("profile", "name")),
            fix="rename it, e.g. 'tarnwick-sg6'",
        )
    if isinstance(path, Path) and path.stem != header.name:
        raise InputError(
            f"profile name {header.name!r} differs from the file name {path.name!r}",
            where=_where(path, text, ("profile", "name")),
            fix=f"name the file {header.name}.toml or the profile {path.stem!r}",
        )
    if header.kind not in KINDS:
        raise InputError(
            f"kind {header.kind!r} is not one of {', '.join(KINDS)}",
            where=_where(path, text, ("profile", "kind")),
            fix="pick the kind of instrument this profile drives",
        )
    idn_pattern = _compile(header.idn_pattern, _where(path, text, ("profile", "idn_pattern")),
                           "idn_pattern")
    scan_hint = (
        _compile(header.scan_hint, _where(path, text, ("profile", "scan_hint")), "scan_hint")
        if header.scan_hint is not None
        else None
    )
    specs = ops_for(header.kind)
    for name in model.ops:
        if name not in specs:
            raise InputError(
                f"{header.kind} profiles have no operation {name!r}",
                where=_where(path, text, ("ops", name)),
                fix=f"use one of: {', '.join(specs)}",
            )
    ops: dict[str, Operation] = {}
    for name, spec in specs.items():
        if name in model.ops:
            ops[name] = _build_op(name, spec, model.ops[name], path, text, explicit=True)
        elif name in COMMON_DEFAULTS:
            default = _OpModel.model_validate(COMMON_DEFAULTS[name])
            ops[name] = _build_op(name, spec, default, path, text, explicit=False)
        elif spec.required:
            raise InputError(
                f"{header.kind} profiles need the operation {name!r} ({spec.summary})",
                where=_where(path, text, ("ops",)),
                fix=f"add [ops.{name}] ({DOCS_HINT})",
            )
    if header.kind == "analyzer" and not (
        "trace_ascii" in ops or "trace_real32" in ops
    ):
        raise InputError(
            "analyzer profiles need 'trace_ascii' or 'trace_real32'",
            where=_where(path, text, ("ops",)),
            fix="add [ops.trace_ascii] with ask = \"TRAC? TRACE1\"",
        )
    return Profile(
        name=header.name,
        kind=header.kind,
        description=header.description,
        idn_pattern=idn_pattern,
        scan_hint=scan_hint,
        generic=header.generic,
        ops=ops,
        path=path if isinstance(path, Path) else None,
    )


def _read(path: Path) -> str:
    raw = read_file_bytes(
        path, what="driver profile file", display=str(path),
        missing_fix="check the path, or name a profile listed by `available_profiles()`",
        expected="a .toml profile file", toml=True)
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = raw[: exc.start].count(b"\n") + 1
        raise InputError(
            "the file is not UTF-8 text",
            where=f"{path}:{line}",
            fix="save it as UTF-8",
        ) from None


@functools.lru_cache(maxsize=128)
def _load_cached(path: Path, mtime_ns: int, size: int) -> Profile:
    return parse_profile(_read(path), path)


def load_profile_file(path: Path | str) -> Profile:
    """Load and validate the profile file at ``path`` (cached while the file is unchanged)."""
    path = Path(path)
    try:
        stat = path.stat()
    except OSError:
        return parse_profile(_read(path), path)
    if not S_ISREG(stat.st_mode):  # refused by _read, under the name given
        return parse_profile(_read(path), path)
    return _load_cached(path.resolve(), stat.st_mtime_ns, stat.st_size)


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
        return load_profile_file(name_or_path)
    search_dirs = list(search_dirs)
    known = available_profiles(search_dirs)
    if name_or_path not in known:
        names = ", ".join(known) or "none found"
        raise InputError(
            f"no driver profile named {name_or_path!r}",
            where="driver profile",
            fix=f"use one of: {names}; or give the path of a profile file ({DOCS_HINT})",
        )
    return load_profile_file(known[name_or_path])


def load_all_profiles(search_dirs: Iterable[Path | str] = ()) -> list[Profile]:
    """Every available profile that loads; files with errors are skipped (see ``check``)."""
    profiles = []
    for path in available_profiles(search_dirs).values():
        try:
            profiles.append(load_profile_file(path))
        except SweeprigError:
            continue
    return profiles


def matching_profiles(idn: str, profiles: Iterable[Profile]) -> list[Profile]:
    """The profiles ``sweeprig scan`` suggests for an ``*IDN?`` reply: model-specific
    profiles first, then generic ones, each group by name."""
    hits = [p for p in profiles if p.suggested_for(idn)]
    return sorted(hits, key=lambda p: (p.generic, p.name))
