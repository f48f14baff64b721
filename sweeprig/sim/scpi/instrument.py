"""``ScpiInstrument``: the base class of every simulated instrument.

How a subclass is written::

    class Attenuator(ScpiInstrument):
        def __init__(self, clock: Clock, serial: str = "0001") -> None:
            super().__init__(clock, Identity("Tarnwick Labs", "TW-AT1", serial, "1.0"))
            # a typed setting: command form, query form, MIN/MAX/DEF, −222 outside limits,
            # restored by *RST and by a power-on reset
            self.add_setting(Setting("atten_db", "[SOURce]:ATTenuation", "float",
                                     default=10.0, unit="level_db", minimum=0.0, maximum=70.0,
                                     coerce=lambda v: 2.0 * round(v / 2.0)))
            # a free-form command and query (handlers receive a Command)
            self.add_command("INITiate[:IMMediate]", write=self._initiate)
            self.add_command("CALCulate:MARKer[1-4]:Y", query=self._marker_y)

        def _initiate(self, cmd: Command) -> None:
            cmd.no_params()
            self.start_operation(0.25, operation_bit=OPER_SWEEPING)  # *OPC? waits 0.25 s

        def _marker_y(self, cmd: Command) -> str:
            marker = cmd.index            # the suffix of MARKer (1 when omitted)
            return format_number(-42.0)

        def on_reset(self) -> None:       # *RST and power-on: non-setting state
            ...

        def questionable_condition(self) -> int:   # STATus:QUEStionable:CONDition?
            return 0

Handlers run under the instrument's lock (an ``RLock``: handlers may call the public
methods). Read-only views that the simulated world calls (``freq_hz``, ``output_on``, …)
must not take that lock: a handler may hold it while calling into the world, and the
world may hold its own lock while reading the views (``value()`` takes no lock).

A handler refuses a command by raising :class:`ScpiError` (pushed to the error
queue; a refused query sends no reply), or reports an error and still answers with
:meth:`ScpiInstrument.push_error`. A query handler returns ``str`` (text, no terminator) or
``bytes`` (e.g. an IEEE 488.2 definite-length block, passed through untouched).

In-process use (unit tests, the server): ``inst.handle("FREQ 1 GHz;:OUTP ON")`` → the reply
(several query replies joined by ``;``) or ``None`` when the message holds no query.

Time: the instrument takes a :class:`~sweeprig.clock.Clock` shared by the whole simulated
bench. A command that takes time calls :meth:`start_operation`; ``*OPC?`` and ``*WAI``
sleep on the clock until every pending operation has ended, ``*OPC`` sets ESR bit 0 once
they have.
"""

from __future__ import annotations

import math
import threading
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any, Literal

from sweeprig.clock import Clock
from sweeprig.sim.scpi.errors import ErrorEntry, ErrorQueue, ScpiError, standard_text
from sweeprig.sim.scpi.parser import (
    Param,
    full_path,
    match_mnemonic,
    mnemonic_forms,
    parse_unit,
    split_units,
)
from sweeprig.sim.scpi.status import ESR_OPC, StatusRegisters, esr_bit_for_error
from sweeprig.sim.scpi.tree import CommandTree, parse_pattern

SettingKind = Literal["float", "int", "bool", "enum"]
Reply = str | bytes
Limit = float | Callable[[], float] | None

#: SCPI "not a number" (SCPI-99), sent for a reading that has no value.
SCPI_NAN = 9.91e37


def format_number(value: float | int | bool) -> str:
    """A number as SCPI reply text, exact (``repr``): ``1e9`` → ``1000000000``, ``0.1`` → ``0.1``.

    Integral floats lose their ``.0``; NaN and infinities become ``9.91E+37`` (SCPI NaN) with
    the sign of infinities kept.
    """
    if isinstance(value, bool):
        return "1" if value else "0"
    if isinstance(value, int):
        return str(value)
    if math.isnan(value):
        return "9.91E+37"
    if math.isinf(value):
        return "9.9E+37" if value > 0 else "-9.9E+37"
    text = repr(float(value))
    return text[:-2] if text.endswith(".0") else text


@dataclass(frozen=True)
class Identity:
    """``*IDN?`` fields: maker, model, serial number, firmware version."""

    maker: str
    model: str
    serial: str
    firmware: str = "1.0"

    def idn(self) -> str:
        return f"{self.maker},{self.model},{self.serial},{self.firmware}"


@dataclass(frozen=True)
class Setting:
    """A typed instrument setting served as ``<pattern> <value>`` and ``<pattern>?``.

    ``name``: key for :meth:`ScpiInstrument.value` (units in the name: ``"freq_hz"``).
    ``kind``: ``float`` | ``int`` | ``bool`` | ``enum``.
    ``default``: power-on / ``*RST`` value (for ``enum``: one of ``choices``).
    ``unit``: quantity kind of :func:`sweeprig.units.parse_quantity` whose SCPI suffixes are
    accepted (``"frequency"``: HZ KHZ MHZ GHZ; ``"power"``: DBM; ``"level_db"``: DB;
    ``"voltage"``: V MV; ``"current"``: A MA; ``"time"``: S MS US; ``"temperature"``: CEL);
    None accepts plain numbers only.
    ``minimum``/``maximum``: limits (a number or a zero-argument callable for limits that
    depend on other settings); a value outside is refused with −222 and the setting is kept.
    ``choices``: enum mnemonics in mixed case (``"ASCii"``, ``"REAL,32"``); the value is
    stored as the upper-case long form (``"ASCII"``, ``"REAL,32"``) and queried back as the
    short form (``"ASC"``, ``"REAL,32"``). A choice with a comma matches that many
    parameters.
    ``coerce``: applied to an accepted value before it is stored (rounding to a step).
    ``on_change``: called with the new value after a successful set from SCPI (not on reset).
    ``writable``: False makes the setting query-only.
    ``caution``: appended to the −222 detail of a refused value (power, temperature limits).
    A pattern with a numeric suffix (``CALCulate:MARKer[1-4]:X``) makes an indexed setting:
    one value per suffix, read with ``value(name, index)``.
    """

    name: str
    pattern: str
    kind: SettingKind
    default: Any
    unit: str | None = None
    minimum: Limit = None
    maximum: Limit = None
    choices: tuple[str, ...] = ()
    coerce: Callable[[Any], Any] | None = None
    on_change: Callable[[Any], None] | None = None
    writable: bool = True
    caution: str = ""


class Command:
    """What a handler receives: the header, the raw parameters, the header's suffixes."""

    __slots__ = ("header", "params", "query", "suffixes")

    def __init__(self, header: str, params: tuple[Param, ...], suffixes: tuple[int, ...],
                 query: bool) -> None:
        self.header = header
        self.params = params
        self.suffixes = suffixes
        self.query = query

    @property
    def index(self) -> int:
        """The first numeric suffix of the header (its lower bound when omitted), else 1."""
        return self.suffixes[0] if self.suffixes else 1

    def expect(self, n_min: int, n_max: int) -> tuple[Param, ...]:
        """The parameters, checked: fewer than ``n_min`` → −109, more than ``n_max`` → −108."""
        if len(self.params) < n_min:
            raise ScpiError(-109, self.header)
        if len(self.params) > n_max:
            raise ScpiError(-108, f"{self.header} {','.join(p.text for p in self.params)}")
        return self.params

    def one(self) -> Param:
        """Exactly one parameter."""
        return self.expect(1, 1)[0]

    def no_params(self) -> None:
        self.expect(0, 0)


class ScpiInstrument:
    """A simulated SCPI instrument: parser, command tree, error queue, status, settings.

    Public API for the world/bench and subclasses:

    * ``handle(message) -> str | bytes | None`` — execute one program message (one line,
      without terminator); thread-safe.
    * ``add_setting(Setting)`` / ``add_command(pattern, write=, query=)`` — registration.
    * ``value(name, index=1)`` / ``put_value(name, value, index=1)`` — read / write a setting
      from Python (``put_value`` does no limit check: the simulation's own business).
    * ``push_error(code, detail="")`` — queue an error (sets the ESR bit).
    * ``start_operation(duration_s, operation_bit=None) -> end_s`` / ``wait_pending()`` /
      ``pending_until()`` — the pending-operation model behind ``*OPC?``/``*WAI``/``*OPC``.
    * ``reset_to_power_on()`` — as after a power cycle: defaults, queues and registers
      cleared, ESR = PON (128).
    * hooks: ``on_reset()`` (``*RST`` and power-on, after settings are restored) and
      ``questionable_condition() -> int``.
    * attributes: ``clock``, ``identity``, ``lock`` (``RLock``), ``errors``, ``status``.
    """

    def __init__(self, clock: Clock, identity: Identity) -> None:
        self.clock = clock
        self.identity = identity
        self.lock = threading.RLock()
        self.errors = ErrorQueue()
        self.status = StatusRegisters()
        self._tree = CommandTree()
        self._settings: dict[str, Setting] = {}
        self._indexed: set[str] = set()
        self._values: dict[str, Any] = {}
        self._pending: list[tuple[float, int]] = []
        self._opc_armed = False
        self._register_common()

    # ----------------------------------------------------------------- registration
    def add_command(self, pattern: str, *, write: Callable[[Command], None] | None = None,
                    query: Callable[[Command], Reply] | None = None) -> None:
        """Register a free-form command (``write``) and/or query (``query``) handler."""
        self._tree.add(pattern, write=write, query=query)

    def add_setting(self, setting: Setting) -> None:
        """Register a typed setting (see :class:`Setting`) and set it to its default."""
        if setting.name in self._settings:
            raise ValueError(f"setting {setting.name!r} registered twice")
        if setting.kind == "enum":
            canonical = self._enum_canonical(setting, str(setting.default))
            if canonical is None:
                raise ValueError(f"default of {setting.name!r} is not one of its choices")
        indexed = any(node.has_suffix for node in parse_pattern(setting.pattern))
        self._settings[setting.name] = setting
        if indexed:
            self._indexed.add(setting.name)
        self._restore_default(setting)
        write = self._make_setting_write(setting) if setting.writable else None
        self._tree.add(setting.pattern, write=write, query=self._make_setting_query(setting))

    # ----------------------------------------------------------------- values
    def value(self, name: str, index: int = 1) -> Any:
        """Current value of a setting (enum: upper-case long form)."""
        if name in self._indexed:
            return self._values[name].get(index, self._default_of(self._settings[name]))
        return self._values[name]

    def put_value(self, name: str, value: Any, index: int = 1) -> None:
        """Store a setting's value from Python, without limit checks or ``on_change``."""
        with self.lock:
            if name in self._indexed:
                self._values[name][index] = value
            else:
                self._values[name] = value

    def settings(self) -> dict[str, Setting]:
        """The registered settings by name."""
        return dict(self._settings)

    # ----------------------------------------------------------------- errors and status
    def push_error(self, code: int, detail: str = "", *, text: str | None = None) -> None:
        """Queue an error and set its event-status bit."""
        with self.lock:
            self.errors.push(ErrorEntry(code, text if text is not None else standard_text(code),
                                        detail))
            self.status.esr |= esr_bit_for_error(code)

    def questionable_condition(self) -> int:
        """Hook: the questionable condition register now (instrument-specific bits).

        Sampled after every program message (and when ``STAT:QUES?``/``*STB?`` are read):
        the event register latches every bit seen set. Keep it cheap.
        """
        return 0

    def operation_condition(self) -> int:
        """Operation condition register: bits of the pending operations still running."""
        now = self.clock.now()
        bits = 0
        for end_s, bit in self._pending:
            if end_s > now:
                bits |= bit
        return bits

    # ----------------------------------------------------------------- pending operations
    def start_operation(self, duration_s: float, operation_bit: int | None = None) -> float:
        """Start an operation that ends ``duration_s`` from now; returns its end time, s."""
        with self.lock:
            end_s = self.clock.now() + max(0.0, duration_s)
            self._pending = [(e, b) for e, b in self._pending if e > self.clock.now()]
            self._pending.append((end_s, operation_bit or 0))
            if operation_bit:
                self.status.operation_event |= operation_bit
            return end_s

    def pending_until(self) -> float:
        """End time of the last pending operation (≤ now when none is pending), s."""
        return max((e for e, _ in self._pending), default=float("-inf"))

    def wait_pending(self) -> None:
        """Let the clock run until every pending operation has ended."""
        with self.lock:
            remaining = self.pending_until() - self.clock.now()
            if remaining > 0:
                self.clock.sleep(remaining)
            self._pending.clear()
            self._update_opc()

    # ----------------------------------------------------------------- resets
    def on_reset(self) -> None:
        """Hook: restore state that is not a registered setting (``*RST`` and power-on)."""

    def reset_settings(self) -> None:
        """``*RST``: settings to defaults, pending operations abandoned, ``on_reset()``."""
        with self.lock:
            for setting in self._settings.values():
                self._restore_default(setting)
            self._pending.clear()
            self._opc_armed = False
            self.on_reset()

    def reset_to_power_on(self) -> None:
        """As after a power cycle: defaults, error queue and registers cleared, ESR = PON."""
        with self.lock:
            self.reset_settings()
            self.errors.clear()
            self.status.power_on()

    # ----------------------------------------------------------------- message handling
    def handle(self, message: str) -> Reply | None:
        """Execute one program message; the joined query replies, or None if there are none."""
        with self.lock:
            self._update_opc()
            replies: list[Reply] = []
            try:
                units = split_units(message)
            except ScpiError as exc:
                self._push(exc)
                return None
            branch: tuple[str, ...] = ()
            for raw in units:
                try:
                    unit = parse_unit(raw)
                    if unit is None:
                        continue
                    path = full_path(unit, branch)
                    resolved = self._tree.resolve(path, unit.query)
                    if not unit.common:
                        branch = path[:-1]
                    header = ":".join(path)
                    result = resolved.handler(
                        Command(header, unit.params, resolved.suffixes, unit.query)
                    )
                    if unit.query:
                        if result is None:
                            raise ScpiError(-200, f"{header}? produced no reply")
                        replies.append(result)
                except ScpiError as exc:
                    self._push(exc)
                except Exception as exc:  # a simulator bug must not kill the session
                    self._push(ScpiError(-200, f"internal: {type(exc).__name__}: {exc}"))
            self._sample_questionable()
            if not replies:
                return None
            if len(replies) == 1:
                return replies[0]
            if all(isinstance(r, str) for r in replies):
                return ";".join(replies)  # type: ignore[arg-type]
            return b";".join(r if isinstance(r, bytes) else r.encode("ascii") for r in replies)

    # ----------------------------------------------------------------- internals
    def _push(self, exc: ScpiError) -> None:
        self.errors.push(exc.entry())
        self.status.esr |= esr_bit_for_error(exc.code)

    def _update_opc(self) -> None:
        if self._opc_armed and self.pending_until() <= self.clock.now():
            self.status.esr |= ESR_OPC
            self._opc_armed = False

    def _sample_questionable(self) -> None:
        self.status.questionable_event |= self.questionable_condition()

    @staticmethod
    def _default_of(setting: Setting) -> Any:
        if setting.kind == "enum":
            return ScpiInstrument._enum_canonical(setting, str(setting.default))
        return setting.default

    def _restore_default(self, setting: Setting) -> None:
        default = self._default_of(setting)
        if setting.name in self._indexed:
            self._values[setting.name] = {}
        else:
            self._values[setting.name] = default

    @staticmethod
    def _limit(limit: Limit) -> float | None:
        return limit() if callable(limit) else limit

    @staticmethod
    def _enum_canonical(setting: Setting, text: str) -> str | None:
        parts = [p.strip() for p in text.split(",")]
        for choice in setting.choices:
            choice_parts = choice.split(",")
            if len(choice_parts) != len(parts):
                continue
            if all(match_mnemonic(t, c) for t, c in zip(parts, choice_parts, strict=True)):
                return ",".join(mnemonic_forms(c)[1] for c in choice_parts)
        return None

    @staticmethod
    def _enum_short(setting: Setting, canonical: str) -> str:
        for choice in setting.choices:
            parts = choice.split(",")
            if ",".join(mnemonic_forms(c)[1] for c in parts) == canonical:
                return ",".join(mnemonic_forms(c)[0] for c in parts)
        return canonical

    def _special_value(self, setting: Setting, special: str, header: str) -> Any:
        if special == "DEF":
            return self._default_of(setting)
        limit = self._limit(setting.minimum if special == "MIN" else setting.maximum)
        if limit is None:
            raise ScpiError(-224, f"{header} has no {special}")
        return int(limit) if setting.kind == "int" else float(limit)

    def _parse_setting(self, setting: Setting, cmd: Command) -> Any:
        header = cmd.header
        if setting.kind == "enum":
            cmd.expect(1, max(c.count(",") + 1 for c in setting.choices))
            text = ",".join(p.text for p in cmd.params)
            canonical = self._enum_canonical(setting, text)
            if canonical is None:
                special = cmd.params[0].special() if len(cmd.params) == 1 else None
                if special == "DEF":
                    return self._default_of(setting)
                raise ScpiError(-224, f"{header} {text}")
            return canonical
        param = cmd.one()
        if setting.kind == "bool":
            if param.special() == "DEF":
                return bool(setting.default)
            return param.to_bool(where=header)
        special = param.special()
        if special is not None:
            value: Any = self._special_value(setting, special, header)
        else:
            value = param.to_float(setting.unit, where=header)
            if not math.isfinite(value):
                raise ScpiError(-222, f"{header} {param.text}")
            low, high = self._limit(setting.minimum), self._limit(setting.maximum)
            caution = f"; {setting.caution}" if setting.caution else ""
            if low is not None and value < low:
                raise ScpiError(
                    -222, f"{header} {param.text} below {format_number(low)}{caution}"
                )
            if high is not None and value > high:
                raise ScpiError(
                    -222, f"{header} {param.text} above {format_number(high)}{caution}"
                )
        if setting.kind == "int":
            value = round(value)
        if setting.coerce is not None:
            value = setting.coerce(value)
        return value

    def _make_setting_write(self, setting: Setting) -> Callable[[Command], None]:
        def write(cmd: Command) -> None:
            value = self._parse_setting(setting, cmd)
            self.put_value(setting.name, value, cmd.index)
            if setting.on_change is not None:
                setting.on_change(value)

        return write

    def _make_setting_query(self, setting: Setting) -> Callable[[Command], Reply]:
        def query(cmd: Command) -> Reply:
            params = cmd.expect(0, 1)
            if params:
                special = params[0].special()
                if special is None or setting.kind in ("bool", "enum"):
                    raise ScpiError(-108, f"{cmd.header}? {params[0].text}")
                value = self._special_value(setting, special, cmd.header)
            else:
                value = self.value(setting.name, cmd.index)
            if setting.kind == "enum":
                return self._enum_short(setting, value)
            if setting.kind == "bool":
                return "1" if value else "0"
            return format_number(value)

        return query

    def _register_common(self) -> None:
        add = self._tree.add
        errors, status = self.errors, self.status
        add("*IDN", query=_fixed(self.identity.idn))
        add("*RST", write=_fixed(self.reset_settings))
        add("*CLS", write=self._cls)
        add("*OPC", write=self._opc, query=self._opc_query)
        add("*WAI", write=_fixed(self.wait_pending))
        add("*ESR", query=self._esr_query)
        add("*ESE", write=self._register_write("ese"), query=self._register_query("ese"))
        add("*SRE", write=self._register_write("sre"), query=self._register_query("sre"))
        add("*STB", query=self._stb_query)
        add("*TST", query=_fixed(lambda: "0"))
        add("SYSTem:ERRor[:NEXT]", query=_fixed(lambda: errors.pop().as_reply()))
        add("SYSTem:ERRor:COUNt", query=_fixed(lambda: str(len(errors))))
        add("SYSTem:VERSion", query=_fixed(lambda: "1999.0"))
        add("STATus:QUEStionable[:EVENt]", query=self._ques_event)
        add("STATus:QUEStionable:CONDition",
            query=_fixed(lambda: str(self.questionable_condition())))
        add("STATus:QUEStionable:ENABle", write=self._register_write("questionable_enable"),
            query=self._register_query("questionable_enable"))
        add("STATus:OPERation[:EVENt]", query=self._oper_event)
        add("STATus:OPERation:CONDition", query=_fixed(lambda: str(self.operation_condition())))
        add("STATus:OPERation:ENABle", write=self._register_write("operation_enable"),
            query=self._register_query("operation_enable"))
        add("STATus:PRESet", write=_fixed(status.preset))

    def _cls(self, cmd: Command) -> None:
        cmd.no_params()
        self.errors.clear()
        self.status.clear_events()
        self._opc_armed = False

    def _opc(self, cmd: Command) -> None:
        cmd.no_params()
        self._opc_armed = True
        self._update_opc()

    def _opc_query(self, cmd: Command) -> str:
        cmd.no_params()
        self.wait_pending()
        return "1"

    def _esr_query(self, cmd: Command) -> str:
        cmd.no_params()
        self._update_opc()
        return str(self.status.read_esr())

    def _stb_query(self, cmd: Command) -> str:
        cmd.no_params()
        self._update_opc()
        self._sample_questionable()
        return str(self.status.status_byte(len(self.errors) > 0))

    def _ques_event(self, cmd: Command) -> str:
        cmd.no_params()
        self._sample_questionable()
        value, self.status.questionable_event = self.status.questionable_event, 0
        return str(value)

    def _oper_event(self, cmd: Command) -> str:
        cmd.no_params()
        value, self.status.operation_event = self.status.operation_event, 0
        return str(value)

    def _register_write(self, attribute: str) -> Callable[[Command], None]:
        def write(cmd: Command) -> None:
            param = cmd.one()
            number = param.to_float(None, where=cmd.header)
            if not 0 <= number <= 255 and attribute in ("ese", "sre"):
                raise ScpiError(-222, f"{cmd.header} {param.text} outside 0..255")
            if not 0 <= number <= 32767:
                raise ScpiError(-222, f"{cmd.header} {param.text} outside 0..32767")
            setattr(self.status, attribute, round(number))

        return write

    def _register_query(self, attribute: str) -> Callable[[Command], str]:
        def query(cmd: Command) -> str:
            cmd.no_params()
            return str(getattr(self.status, attribute))

        return query


def _fixed(action: Callable[[], Any]) -> Callable[[Command], Any]:
    """A handler for a header that takes no parameters (−108 if some are given)."""

    def handler(cmd: Command) -> Any:
        cmd.no_params()
        return action()

    return handler
