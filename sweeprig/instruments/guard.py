"""The last-step guard: every message to a source, supply or chamber is read back into SCPI
commands just before the transport sends it, and a command that sets a level beyond the
limits in force is refused, whatever produced it.

The driver checks values before it renders them (:meth:`Driver._check_limits`); this guard
checks what the rendering produced, so a template, a value map or any other text that puts a
second level-setting command into a message cannot get past the limits. It wraps the
driver's transport (:func:`guard_transport`), so nothing reaches the wire around it.

Which commands set a level is read from the profile itself: the headers of the ``command``
templates of the guarded operations (:data:`GUARDED_OPS`). Headers are compared in a canonical
form (short forms, numeric suffixes and the SCPI-99 default nodes ``SOURce``, ``LEVel``,
``IMMediate``, ``AMPLitude`` removed), so ``:SOURce1:POWer:LEVel 19`` and ``POW 19`` are the
same command as the profile's ``SOUR:POW:LEV:IMM:AMPL {value}``. What the guard does with a
command, on a guarded instrument:

* one of the profile's level commands (or a spelling of its header with nodes left out or
  added): its value is read (the number with its unit suffix, e.g. ``19``, ``19 DBM``,
  ``10 MW``, ``2500 MV``) and checked against the driver's limits (the profile's range
  narrowed by the bench's); a keyword (``MAX``, ``DEF``, ``UP``...) or a form the guard
  cannot read is refused, since its level cannot be known;
* a command below a level header is refused unless it is known to leave the level alone
  (:data:`ALLOWED_UNDER_LEVEL`: ``:ALC``, ``:PROTection``, ``:MODE FIXed``), so offsets,
  references, steps and level sweeps or lists cannot move it; a ``UNIT`` command is allowed
  only with the unit sweeprig works in (DBM, V, A, CEL); the common commands that recall a
  stored state or define macros (:data:`REFUSED_COMMON`) are refused;
* a level-setting header that this profile does not use but another profile of the kind, or
  SCPI-99, does (:data:`KNOWN_LEVEL_HEADERS`) is refused: its value cannot be checked here.

The message is read twice, once with quoted strings respected and once with every ``;`` taken
as a separator, so an instrument that reads quotes differently cannot hide a command.
A refusal is a :class:`~sweeprig.errors.SafetyLimitError` (exit code 3) naming the role, the
command and the limit; nothing of the message is sent.
"""

from __future__ import annotations

import functools
import math
import re
from collections.abc import Callable, Iterable
from dataclasses import dataclass
from typing import Any, Protocol

import numpy as np

from sweeprig.errors import SafetyLimitError
from sweeprig.instruments.limits import OpLimits
from sweeprig.instruments.profile import VALUE_PLACEHOLDER, Profile, load_all_profiles
from sweeprig.instruments.scpi_text import Command, commands
from sweeprig.transport.base import PostedQuery, TransactionHook, Transport
from sweeprig.units import short_repr

GUARDED_OPS: dict[str, tuple[str, ...]] = {
    "source": ("power",),
    "supply": ("voltage", "current_limit"),
    "chamber": ("setpoint",),
}
"""Per instrument kind: the settings whose every command the guard checks."""

DEFAULT_NODES = frozenset({"SOUR", "LEV", "IMM", "AMPL"})
"""Nodes SCPI-99 lets a command leave out ([SOURce:]POWer[:LEVel][:IMMediate][:AMPLitude],
SCPI-99 vol. 2, SOURce subsystem); removed before headers are compared."""

KNOWN_LEVEL_HEADERS: dict[str, tuple[tuple[str, ...], ...]] = {
    "source": (("POW",),),  # SCPI-99 vol. 2: SOURce:POWer
    "supply": (("VOLT",), ("CURR",), ("APPL",)),  # SCPI-99: SOURce:VOLTage, SOURce:CURRent;
    # APPLy: common practice, no source
    "chamber": (("TEMP",), ("SETP",)),  # common practice, no source
}
"""Level headers (canonical) the guard knows for each kind besides the profiles' own."""

ALLOWED_UNDER_LEVEL: dict[str, frozenset[str] | None] = {
    "ALC": None,  # automatic level control on/off
    "PROT": None,  # over-voltage / over-current protection
    "MODE": frozenset({"FIX", "FIXED", "CW"}),  # fixed level only: no sweep, no list
}
"""Nodes allowed below a level header (``POW:ALC ON``), with the arguments allowed (None:
any). Anything else there — ``:OFFSet``, ``:REFerence``, ``:STEP``, ``:STARt``/``:STOP``
of a level sweep, ``:MODE LIST`` — may change the level in a way the guard cannot check."""

REFUSED_COMMON = frozenset({"*RCL", "*DMC", "*EMC", "*DDT"})
"""IEEE 488.2 common commands that recall a stored state or define or enable commands to run
later (macros, the device trigger): the levels they set cannot be read from the message
(IEEE 488.2-1992, section 10: *RCL, *DMC, *EMC, *DDT)."""

WORKING_UNITS = frozenset({"DBM", "V", "A", "CEL", "C"})
"""The only arguments a ``UNIT`` command may have on a guarded instrument."""

_KEYWORDS = frozenset({"MIN", "MINIMUM", "MAX", "MAXIMUM", "DEF", "DEFAULT", "UP", "DOWN",
                       "INF", "NINF", "NAN"})
_NUMBER = re.compile(r"([+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)\s*([A-Za-z/%]*)")

# Unit suffix → the readings of a number in the operation's unit. IEEE 488.2-1992, 7.7.3:
# suffix multipliers (M = milli, MA = mega, U = micro, K = kilo...), so "MA" after an
# ampere value may be milli-ampere or mega; every plausible reading is checked.
_POWER: dict[str, Callable[[float], tuple[float, ...]]] = {
    "": lambda x: (x,), "DBM": lambda x: (x,), "DBW": lambda x: (x + 30.0,),
}
_WATT_SCALE = {"W": 1.0, "KW": 1e3, "MW": 1e-3, "UW": 1e-6, "NW": 1e-9, "PW": 1e-12}
_SCALES: dict[str, dict[str, tuple[float, ...]]] = {
    "voltage": {"": (1.0,), "V": (1.0,), "MV": (1e-3,), "UV": (1e-6,), "KV": (1e3,)},
    "current": {"": (1.0,), "A": (1.0,), "MA": (1e-3, 1e6), "UA": (1e-6,), "NA": (1e-9,),
                "KA": (1e3,)},
}


def _readings(number: float, suffix: str, unit: str | None) -> tuple[float, ...] | None:
    """The values ``number suffix`` may mean in ``unit``; None when the suffix is unknown."""
    suffix = suffix.upper()
    if unit == "power":
        if suffix in _POWER:
            return _POWER[suffix](number)
        if suffix in _WATT_SCALE:
            watts = number * _WATT_SCALE[suffix]
            # P[dBm] = 10 log10(P / 1 mW) (IEC 60027-3 logarithmic quantities)
            return (10.0 * math.log10(watts / 1e-3),) if watts > 0 else (-math.inf,)
        return None
    if unit == "temperature":
        if suffix in ("", "C", "CEL"):
            return (number,)
        if suffix == "K":
            return (number - 273.15,)
        if suffix in ("F", "FAR"):
            return ((number - 32.0) * 5.0 / 9.0,)
        return None
    scales = _SCALES.get(unit or "", {"": (1.0,)})
    if suffix not in scales:
        return None
    return tuple(number * s for s in scales[suffix])


def canonical(path: Iterable[str]) -> tuple[str, ...]:
    """A header path without the SCPI-99 default nodes (see :data:`DEFAULT_NODES`)."""
    return tuple(m for m in path if m not in DEFAULT_NODES)


def rule_header(path: Iterable[str]) -> tuple[str, ...]:
    """The canonical header of a profile's level command; the whole path when it has only
    default nodes (``LEVel {value}`` stays ``("LEV",)``)."""
    path = tuple(path)
    return canonical(path) or path


def _same_header(rule: tuple[str, ...], sent: tuple[str, ...]) -> bool:
    """Whether a command with canonical header ``sent`` may be the level command ``rule``:
    equal, or one is the other with leading nodes left out or added. A command made only of
    default nodes (``SOUR 19``, ``:LEV 19``) may be any level command."""
    if not sent:
        return True
    return rule == sent or rule[-len(sent):] == sent or sent[-len(rule):] == rule


@dataclass(frozen=True)
class LevelRule:
    """One command that sets a guarded level, from a profile's ``command`` template.

    ``header``: canonical header path. ``args``: the template's parameters, ``{value}`` in
    ``value_index``."""

    op: str
    header: tuple[str, ...]
    args: tuple[str, ...]
    value_index: int


def level_rules(profile: Profile) -> tuple[LevelRule, ...]:
    """The level-setting commands of ``profile`` (empty for an unguarded kind)."""
    rules: list[LevelRule] = []
    for op in GUARDED_OPS.get(profile.kind, ()):
        operation = profile.ops.get(op)
        if operation is None:
            continue
        for template in operation.commands:
            for cmd in commands(template):
                for index, arg in enumerate(cmd.args):
                    if VALUE_PLACEHOLDER in arg:
                        rules.append(LevelRule(op, rule_header(cmd.path), cmd.args, index))
    return tuple(rules)


@functools.cache
def _shipped_level_headers(kind: str) -> frozenset[tuple[str, ...]]:
    headers: set[tuple[str, ...]] = set(KNOWN_LEVEL_HEADERS.get(kind, ()))
    for profile in load_all_profiles():
        if profile.kind == kind:
            headers.update(rule.header for rule in level_rules(profile))
    return frozenset(headers)


class GuardedDriver(Protocol):
    """What the guard needs of the driver it protects."""

    role: str
    profile: Profile

    def op_limits(self, op: str) -> OpLimits: ...


#: A message of bare queries only (``*ESR?``, ``:STAT:QUES:COND?;*ESR?``: headers ending in
#: ``?``, no parameters, no quotes): it sets nothing, so it needs no parsing (the status
#: reads of every point pass here).
_QUERIES_ONLY = re.compile(r"[:*A-Za-z0-9]+\?(?:;[:*A-Za-z0-9]+\?)*")


class LastStepGuard:
    """Checks outgoing messages for one driver (see the module docstring)."""

    def __init__(self, driver: GuardedDriver) -> None:
        self.driver = driver
        self.rules = level_rules(driver.profile)
        own = {rule.header for rule in self.rules}
        self.foreign = frozenset(_shipped_level_headers(driver.profile.kind) - own)
        self.level_nodes = frozenset(
            {h[-1] for h in own | self.foreign if h} | {"LEV", "AMPL"})
        self.checked = 0
        """Level-setting commands checked and let through so far."""

    @property
    def active(self) -> bool:
        """Whether this instrument has guarded levels."""
        return bool(GUARDED_OPS.get(self.driver.profile.kind))

    def check(self, message: str, resource: str) -> None:
        """Raise :class:`SafetyLimitError` if ``message`` would set a level beyond the limits
        or a level the guard cannot read."""
        if not self.active or _QUERIES_ONLY.fullmatch(message):
            return
        seen: set[tuple[str, tuple[str, ...]]] = set()
        # without quotes both readings are the same commands: read once
        readings = (True, False) if ("'" in message or '"' in message) else (True,)
        for respect in readings:
            for cmd in commands(message, respect_quotes=respect):
                if (cmd.text, cmd.path) in seen:
                    continue
                seen.add((cmd.text, cmd.path))
                self._check(cmd, message, resource)

    # -- one command ------------------------------------------------------------------------

    def _check(self, cmd: Command, message: str, resource: str) -> None:
        if cmd.common and cmd.path[0].rstrip("?") in REFUSED_COMMON and not cmd.query:
            self._refuse(cmd, message, resource,
                         "recalls a stored state or defines commands to run later, whose "
                         "levels cannot be checked",
                         "remove it from the profile; sweeprig sets every level itself")
        if cmd.common or cmd.query:
            return
        header = canonical(cmd.path)
        if "UNIT" in cmd.path:
            if len(cmd.args) != 1 or cmd.args[0].upper() not in WORKING_UNITS:
                self._refuse(cmd, message, resource,
                             "changes the unit of later levels to one sweeprig does not use",
                             f"remove it; levels are sent in {', '.join(sorted(WORKING_UNITS))}")
            return
        matching = [r for r in self.rules if _same_header(r.header, header)]
        self._check_below_level(cmd, message, resource)
        if matching:
            self._check_value(cmd, matching, message, resource)
            return
        if header and any(_same_header(h, header) for h in self.foreign):
            self._refuse(cmd, message, resource,
                         "sets a level with a command that is not this profile's",
                         f"set levels only through the profile's ops ({self._ops_text()})")

    def _check_below_level(self, cmd: Command, message: str, resource: str) -> None:
        """Refuse a command below a level header (``POW:OFFS``, ``POW:STAR``) unless it is in
        :data:`ALLOWED_UNDER_LEVEL`."""
        for index, node in enumerate(cmd.path):
            if node not in self.level_nodes:
                continue
            below = tuple(n for n in cmd.path[index + 1:] if n not in DEFAULT_NODES)
            if not below:
                continue
            allowed = below[0] in ALLOWED_UNDER_LEVEL
            values = ALLOWED_UNDER_LEVEL.get(below[0])
            if allowed and values is not None:
                allowed = all(arg.upper() in values for arg in cmd.args) and bool(cmd.args)
            if not allowed:
                self._refuse(cmd, message, resource,
                             "may change the level in a way the guard cannot check (an "
                             "offset, a reference, a step, a level sweep or list)",
                             "remove it from the profile; sweeprig sets absolute levels, one "
                             "at a time")

    def _ops_text(self) -> str:
        return ", ".join(f"ops.{op}" for op in GUARDED_OPS[self.driver.profile.kind])

    def _check_value(self, cmd: Command, rules: list[LevelRule], message: str,
                     resource: str) -> None:
        fitted = False
        for rule in rules:
            readings = self._read_value(cmd, rule)
            if readings is None:
                continue
            fitted = True
            note = "" if len(readings) == 1 else \
                " (its unit suffix has more than one reading, IEEE 488.2 7.7.3; each is checked)"
            for value in readings:
                self._within(rule.op, value, cmd, message, resource, note)
        if not fitted:
            self._refuse(cmd, message, resource,
                         "looks like a level setting whose value the guard cannot read "
                         "(a keyword such as MAX or DEF, an unknown unit, or other parameters "
                         "than the profile's command)",
                         "send levels as numbers, through the profile's own commands")
        self.checked += 1

    @staticmethod
    def _read_value(cmd: Command, rule: LevelRule) -> tuple[float, ...] | None:
        if len(cmd.args) != len(rule.args):
            return None
        for index, (sent, expected) in enumerate(zip(cmd.args, rule.args, strict=True)):
            if index != rule.value_index and sent.upper() != expected.upper():
                return None
        template = rule.args[rule.value_index]
        before = template.split(VALUE_PLACEHOLDER, 1)[0].strip()
        text = cmd.args[rule.value_index].strip()
        if before:
            if not text.upper().startswith(before.upper()):
                return None
            text = text[len(before):].strip()
        if text.upper() in _KEYWORDS:
            return None
        match = _NUMBER.fullmatch(text)
        if match is None:
            return None
        try:
            number = float(match.group(1))
        except (ValueError, OverflowError):  # pragma: no cover - the pattern is a float
            return None
        spec_unit = _op_unit(rule.op)
        return _readings(number, match.group(2), spec_unit)

    def _within(self, op: str, value: float, cmd: Command, message: str,
                resource: str, note: str = "") -> None:
        limits = self.driver.op_limits(op)
        unit = f" {limits.unit}" if limits.unit else ""
        origin: str | None = None
        if not math.isfinite(value):
            problem = f"sets {op} to {value!r}, not a finite number"
        else:
            bound = limits.refusal(value)  # the project's one limit rule (its float slack too)
            if bound is None:
                return
            side = "above the maximum" if bound.side == "max" else "below the minimum"
            problem = f"sets {op} {value:g}{unit} {side} {bound.value:g}{unit}"
            origin = bound.describe(limits.unit)
        self._refuse(cmd, message, resource, problem + note,
                     "find what produced the command (a profile's template or value map) and "
                     "correct it; raise a limit only if the part and the bench can take it",
                     origin=origin)

    def _refuse(self, cmd: Command, message: str, resource: str, problem: str, fix: str,
                origin: str | None = None) -> None:
        whole = "" if cmd.text.strip() == message.strip() else \
            f" (in the message {short_repr(message)})"
        limit = f" (limit from {origin})" if origin else ""
        raise SafetyLimitError(
            f"command {short_repr(cmd.text)} {problem}{whole}; nothing was sent",
            where=f"role {self.driver.role!r} ({resource}), last-step guard{limit}",
            fix=f"{fix}. Caution: too much RF power, supply voltage or current, or a chamber "
            "beyond its range can destroy the part or the bench",
        )


def _op_unit(op: str) -> str | None:
    return {"power": "power", "voltage": "voltage", "current_limit": "current",
            "setpoint": "temperature"}.get(op)


class GuardedTransport:
    """A :class:`~sweeprig.transport.base.Transport` that passes every message through a
    :class:`LastStepGuard` first. Other attributes are those of the wrapped transport."""

    def __init__(self, inner: Transport, guard: LastStepGuard) -> None:
        self.inner = inner
        self.guard = guard

    @property
    def resource(self) -> str:  # type: ignore[override]
        return self.inner.resource

    @property
    def on_transaction(self) -> TransactionHook | None:
        return self.inner.on_transaction

    @on_transaction.setter
    def on_transaction(self, hook: TransactionHook | None) -> None:
        self.inner.on_transaction = hook

    def write(self, cmd: str) -> None:
        self.guard.check(cmd, self.inner.resource)
        self.inner.write(cmd)

    def query(self, cmd: str, *, timeout_s: float | None = None) -> str:
        self.guard.check(cmd, self.inner.resource)
        return self.inner.query(cmd, timeout_s=timeout_s)

    def post(self, cmd: str) -> PostedQuery:
        self.guard.check(cmd, self.inner.resource)
        return self.inner.post(cmd)

    def collect(self, posted: PostedQuery, *, timeout_s: float | None = None) -> str:
        return self.inner.collect(posted, timeout_s=timeout_s)

    def query_binary_floats(self, cmd: str, *, timeout_s: float | None = None) -> np.ndarray:
        self.guard.check(cmd, self.inner.resource)
        return self.inner.query_binary_floats(cmd, timeout_s=timeout_s)

    def close(self) -> None:
        self.inner.close()

    def reconnect(self) -> None:
        self.inner.reconnect()

    def __getattr__(self, name: str) -> Any:
        return getattr(self.inner, name)


def guard_transport(transport: Transport, driver: GuardedDriver) -> Transport:
    """``transport`` behind a last-step guard for ``driver`` (unchanged for kinds without
    guarded levels, and not wrapped twice)."""
    if isinstance(transport, GuardedTransport):
        transport = transport.inner
    guard = LastStepGuard(driver)
    if not guard.active:
        return transport
    return GuardedTransport(transport, guard)
