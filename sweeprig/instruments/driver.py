"""The generic driver base: one instrument, reached through a transport, driven by a profile.

A :class:`Driver` turns calls such as ``set_frequency(2.4e9)`` into the SCPI its profile
gives, and adds what every kind needs:

* ``identify()`` checks the ``*IDN?`` reply against the profile's pattern;
* a setting that has not changed since it was last sent is **not sent again** (the cache of
  last-sent values, :meth:`Driver.state`; :meth:`Driver.forget_state` empties it and must be
  called after a reset, a reconnect or anything else that may change the instrument behind
  the driver's back);
* limits from the profile (and any tighter ones from :meth:`Driver.tighten_limit`, such as the
  bench file's) are checked before anything is sent, each bound naming where it was written
  (:mod:`sweeprig.instruments.limits`, shared with the pre-flight check):
  :class:`SafetyLimitError` for powers, voltages and currents, :class:`InputError` otherwise;
* :meth:`Driver.check_errors` drains the error queue and raises :class:`InstrumentError`
  naming the role, the commands sent since the previous check and the instrument's text;
* ``transactions`` counts SCPI exchanges (writes and queries, completion waits included);
* where the profile allows compound messages (``compound_messages``), settings are held and
  sent joined with the next message to the instrument (``:SOUR:FREQ:CW 1E9;*OPC?`` is one
  exchange), and the error queue is read only when the event status register's error bits
  say it holds something (:meth:`Driver.check_errors`, :meth:`Driver.point_status`).

The per-kind classes (:mod:`sweeprig.instruments.source` and siblings) only name the
operations. Drivers are not thread-safe: one thread drives one instrument.
"""

from __future__ import annotations

import contextlib
import math
from collections import deque
from collections.abc import Callable, Iterator, Mapping
from dataclasses import dataclass
from typing import Any, ClassVar

import numpy as np

from sweeprig.clock import Clock, WallClock
from sweeprig.errors import InputError, InstrumentError, SafetyLimitError, TransportError
from sweeprig.instruments.guard import guard_transport
from sweeprig.instruments.limits import Bound, OpLimits, profile_limits
from sweeprig.instruments.profile import DOCS_HINT, Completion, Operation, Profile
from sweeprig.transport import blocks
from sweeprig.transport.base import PostedQuery, Transport

Value = float | int | bool | str
"""A setting's value: float (in the operation's unit), int, bool, or a choice name."""

MAX_ERROR_READS = 64
"""Error-queue reads before giving up on an instrument that never answers ``0,...``."""

CHECKED_KEPT = 8
"""Values remembered per setting as checked and rendered (:meth:`Driver._checked_token`)."""

_BLOCK_SHOWN = 12
_BLOCK_KEPT = 64

ESR_ERROR_BITS = 0x3C
"""IEEE 488.2 standard event status register, bits 2-5: query error, device-dependent error,
execution error, command error (IEEE 488.2 section 11.5.1, from memory): set whenever an error
enters the queue (SCPI-99 Vol. 1, chapter 21, from memory)."""

SAFETY_CAUTION = (
    "caution: too much RF power or supply voltage can destroy the part or the analyzer input"
)


@dataclass(frozen=True)
class Pending:
    """A query sent by :meth:`Driver.post_query`, its reply not read yet. ``posted``: the
    transport's handle (None: the transport asks when collected)."""

    message: str
    timeout_s: float | None
    posted: PostedQuery | None
    settling_ok: bool = False  # sent (or asked, at collect) without :attr:`Driver.before_message`


def _commands_text(sent: list[str], count: int) -> str:
    """The last :data:`_BLOCK_SHOWN` of ``sent`` (``count`` commands in all) for an error
    message, the number left out before them."""
    shown = sent[-_BLOCK_SHOWN:]
    prefix = f"({count - len(shown)} earlier) ... " if count > len(shown) else ""
    return prefix + "; ".join(shown) if shown else "(none since the last check)"


def _compound(units: list[str]) -> str:
    """Program message units as one compound message, each header made absolute (a leading
    ``:``), since after a ``;`` a header is read relative to the previous one's path
    (SCPI-99 Vol. 1, 6.2.4, from memory)."""
    return ";".join(u if u.startswith((":", "*")) else ":" + u for u in units)


class Driver:
    """Base of the generic drivers.

    ``role``: the bench role (``"rf"``, ``"sa"``...), used in every message. ``transport``:
    the connection. ``profile``: a profile of this driver's kind. ``clock``: used for poll
    intervals (wall clock by default).
    """

    kind: ClassVar[str] = ""

    def __init__(
        self,
        role: str,
        transport: Transport,
        profile: Profile,
        *,
        clock: Clock | None = None,
    ) -> None:
        if self.kind and profile.kind != self.kind:
            raise InputError(
                f"profile {profile.name!r} is for a {profile.kind}, not a {self.kind}",
                where=f"role {role!r}",
                fix=f"give role {role!r} a {self.kind} profile",
            )
        self.role = role
        self.profile = profile
        self.transport: Transport = guard_transport(transport, self)
        """The connection, behind the last-step guard (:mod:`sweeprig.instruments.guard`)
        for sources, supplies and chambers."""
        self.clock: Clock = clock or WallClock()
        self.idn: str | None = None
        self.transactions = 0
        """SCPI exchanges so far (writes + queries)."""
        self.settings_skipped = 0
        """Settings not sent because the instrument already had them."""
        self._cache: dict[str, tuple[Value, str]] = {}
        self._limits: dict[str, OpLimits] = {}
        #: per setting: the limits object its values were checked against, and for each of
        #: the last few values checked ((type, value)) the checked value and its token
        #: (:meth:`_checked_token`)
        self._checked_memo: dict[
            str, tuple[OpLimits | None, dict[tuple[type, object], tuple[Value, str]]]] = {}
        self._block: deque[str] = deque(maxlen=_BLOCK_KEPT)
        self._block_count = 0
        #: Commands of the block sent before a leading ``*ESR?`` (:meth:`post_sync`): while
        #: its reply is owed, the mark; once it showed error bits, kept for the message
        #: (those commands caused them; the ones after ran after the read). None: no mark.
        self._lead_mark: int | None = None
        self._errors_before: int | None = None
        self._block_ops: set[str] = set()
        #: commands held to be joined with the next message (compound profiles, inside
        #: :meth:`joined` only)
        self._held: list[str] = []
        self._joining = False
        #: event status bits read (joined with other queries) and not yet taken
        self._status_bits = 0
        #: True while the last exchange ended with an ``*ESR?`` read (nothing sent since)
        self._status_fresh = False
        #: an ``*ESR?`` read showed error bits: the queue holds entries not yet read
        self._errors_flagged = False
        #: the posted ``*OPC?`` message began with ``*ESR?`` (:meth:`post_sync`)
        self._status_first = False
        #: The :attr:`status_companions`' answers read with the last posted status read.
        self.status_seen: dict[str, Any] = {}
        #: The companions' answers when :meth:`check_companions` asked them, at connect
        #: (only those the instrument answered).
        self.companions_at_connect: dict[str, Any] = {}
        #: Companions left out for the run: the instrument did not answer them at connect
        #: (:meth:`check_companions`).
        self._dropped_companions: set[str] = set()
        #: (companion names, their distinct query texts), worked out once: they are asked
        #: at every point (None: not yet, or a companion was left out since).
        self._companion_plan: tuple[list[str], list[str]] | None = None

    before_message: Callable[[], None] | None = None
    """Called just before each message leaves for the instrument (after it is built), when
    set: the run loop waits out the sources' settling time there
    (:class:`sweeprig.engine.runner.SettleWait`), so the work of building the message runs
    inside that time rather than after it."""

    single_units = False
    """True: one unit per message whatever the profile says (``sweeprig probe`` tries each
    operation alone; narrow tests pin each operation's own rendering)."""

    @property
    def compound(self) -> bool:
        """Whether settings and queries are joined into compound messages (the profile's
        ``compound_messages``, unless :attr:`single_units`)."""
        return self.profile.compound_messages and not self.single_units

    # -- naming -----------------------------------------------------------------------------

    @property
    def resource(self) -> str:
        """The VISA resource string of the transport."""
        return self.transport.resource

    def where(self, cmd: str | None = None) -> str:
        """``role 'sa' (resource)`` or ``role 'sa' (resource), command 'X'``."""
        head = f"role {self.role!r} ({self.resource})"
        return f"{head}, command {cmd!r}" if cmd is not None else head

    def __repr__(self) -> str:
        return f"{type(self).__name__}({self.role!r}, {self.resource!r}, {self.profile.name!r})"

    # -- raw exchanges ----------------------------------------------------------------------

    def write(self, cmd: str) -> None:
        """Send ``cmd`` (after any held commands, in the same message; counted, remembered
        for the error report)."""
        self._block.append(cmd)
        self._block_count += 1
        self.transactions += 1
        self._status_fresh = False
        message = self._joined(cmd)
        if self.before_message is not None:
            self.before_message()
        self.transport.write(message)

    def query(self, cmd: str, *, timeout_s: float | None = None) -> str:
        """Send query ``cmd`` (after any held commands, in the same message) and return the
        reply text (counted)."""
        self.transactions += 1
        self._status_fresh = False
        message = self._joined(cmd)
        if self.before_message is not None:
            self.before_message()
        return self.transport.query(message, timeout_s=timeout_s)

    def post_query(self, cmd: str, *, timeout_s: float | None = None,
                   settling_ok: bool = False) -> Pending:
        """Send query ``cmd`` (after any held commands, in the same message) without waiting
        for the reply; :meth:`collect` reads it. Other instruments' messages can go out
        meanwhile, so they work at once (a transport that cannot post queries asks at
        :meth:`collect` instead). ``settling_ok``: a query that changes nothing on the bench
        (a status read) leaves at once, without :attr:`before_message` (the sources' settling
        time goes on meanwhile)."""
        self.transactions += 1
        self._status_fresh = False
        message = self._joined(cmd)
        if self.before_message is not None and not settling_ok:
            self.before_message()
        post = getattr(self.transport, "post", None)
        return Pending(message, timeout_s, None if post is None else post(message),
                       settling_ok)

    def collect(self, pending: Pending) -> str:
        """The reply to a :meth:`post_query`."""
        if pending.posted is None:
            if self.before_message is not None and not pending.settling_ok:
                self.before_message()
            return self.transport.query(pending.message, timeout_s=pending.timeout_s)
        return self.transport.collect(pending.posted, timeout_s=pending.timeout_s)

    @contextlib.contextmanager
    def joined(self) -> Iterator[None]:
        """A block whose commands are joined with the block's next query into one message,
        where the profile allows compound messages (no effect otherwise). Whatever is still
        held at the end is sent then, so nothing waits past the block while another
        instrument acts; on an exception it is dropped and the cached settings forgotten
        (so they are all sent again)."""
        if not self.compound or self._joining:
            yield
            return
        self._joining = True
        try:
            yield
        except BaseException:
            self._joining = False
            self.forget_state()
            raise
        self._joining = False
        self.flush()

    def _send(self, cmd: str) -> None:
        """A command of an operation: held for the next message inside :meth:`joined`
        (remembered for the error report at once), sent now otherwise."""
        if not self._joining:
            self.write(cmd)
            return
        self._block.append(cmd)
        self._block_count += 1
        self._held.append(cmd)
        self._status_fresh = False  # a status read before this command says nothing of it

    def flush(self) -> None:
        """Send the held commands now (one message), if any."""
        if self._held:
            self.transactions += 1
            self._status_fresh = False
            message = self._joined(None)
            if self.before_message is not None:
                self.before_message()
            self.transport.write(message)

    def _joined(self, cmd: str | None) -> str:
        """The held commands and ``cmd`` as one message (:func:`_compound`). Empties the
        hold."""
        if not self._held:
            assert cmd is not None
            return cmd
        units = [*self._held, *(() if cmd is None else (cmd,))]
        self._held = []
        if len(units) == 1:
            return units[0]
        return _compound(units)

    # -- values and limits ------------------------------------------------------------------

    def tighten_limit(
        self, op: str, *, min_value: float | None = None, max_value: float | None = None,
        origin: str = "the bench file", source: str = "bench",
    ) -> None:
        """Narrow the limits for ``op`` (e.g. to the bench's safe maximum power); ``origin``
        names who sets the new bound and where, for messages.

        Limits can only get tighter: the profile's own range still applies.
        """
        for side, value in (("min", min_value), ("max", max_value)):
            if value is not None:
                self.add_bound(op, Bound(float(value), side, source, origin))  # type: ignore[arg-type]

    def add_bound(self, op: str, bound: Bound) -> None:
        """Add ``bound`` to the limits of ``op`` (every bound holds: never a widening)."""
        self._limits[op] = self.op_limits(op).with_bound(bound)

    def op_limits(self, op: str) -> OpLimits:
        """Every bound in force for ``op``, each naming its origin."""
        if op not in self._limits:
            self._limits[op] = profile_limits(self.profile, op, self.role)
        return self._limits[op]

    def limits(self, op: str) -> tuple[float | None, float | None]:
        """The (min, max) in force for ``op``, in its unit (None = no limit)."""
        return self.op_limits(op).as_pair()

    def _checked(self, operation: Operation, value: object) -> Value:
        spec = operation.spec
        where = f"role {self.role!r}, {spec.name}"
        if spec.value == "bool":
            if not isinstance(value, bool | np.bool_):
                raise InputError(f"{value!r} is not on/off", where=where, fix="give True/False")
            return bool(value)
        if spec.value == "choice":
            if value not in spec.choices:
                raise InputError(
                    f"{value!r} is not one of {', '.join(spec.choices)}",
                    where=where,
                    fix="pick one of those",
                )
            return str(value)
        if isinstance(value, bool | np.bool_) or not isinstance(
            value, int | float | np.integer | np.floating
        ):
            raise InputError(f"{value!r} is not a number", where=where, fix="give a number")
        number = float(value)
        if not math.isfinite(number):
            raise InputError(f"{value!r} is not a finite number", where=where,
                             fix="give a finite number")
        checked: Value
        if spec.value == "int":
            if number != math.floor(number):
                raise InputError(f"{value!r} is not a whole number", where=where,
                                 fix="give a whole number")
            checked = int(number)
        else:
            checked = number
        self._check_limits(operation, number, where)
        return checked

    def _checked_token(self, operation: Operation, value: object) -> tuple[Value, str]:
        """``value`` checked (:meth:`_checked`: type and every limit in force) and rendered.

        The last :data:`CHECKED_KEPT` values checked for each setting are remembered with the
        limits they were checked against: the same value (same type, equal) under the same
        limits object gets the same verdict and token without checking again (a run asks for
        mostly unchanged settings every point, and a reading's markers for the same few
        frequencies). Limits only change by :meth:`add_bound`, which makes a new object, so a
        tightened limit is always checked; only values that passed are remembered, so NaN
        (refused) is always checked, as is a value that cannot be a key."""
        name = operation.spec.name
        limits = self._limits.get(name)
        memo = self._checked_memo.get(name)
        key = (type(value), value)
        if memo is not None and memo[0] is limits:
            try:
                known = memo[1].get(key)
            except TypeError:  # unhashable: not a value any setting takes, checked below
                known = None
            if known is not None:
                return known
        checked = self._checked(operation, value)
        token = operation.render_value(checked)
        limits = self._limits.get(name)  # the check may have made the entry
        if memo is None or memo[0] is not limits or len(memo[1]) >= CHECKED_KEPT:
            memo = self._checked_memo[name] = (limits, {})
        memo[1][key] = (checked, token)
        return checked, token

    def _check_limits(self, operation: Operation, number: float, where: str) -> None:
        spec = operation.spec
        limits = self.op_limits(spec.name)
        bound = limits.refusal(number)
        if bound is None:
            return
        unit = f" {limits.unit}" if limits.unit else ""
        problem = "above the maximum" if bound.side == "max" else "below the minimum"
        what = (f"{spec.summary.split(',')[0]} {number:g}{unit} is {problem}: "
                f"{bound.describe(limits.unit)} (nothing was sent)")
        if spec.safety:
            raise SafetyLimitError(
                what,
                where=where,
                fix=("change the setting: the instrument cannot go beyond its own range (its "
                     "driver profile)" if bound.source == "profile" else
                     "lower the setting, or raise the limit only if the part and the bench can "
                     "take it") + f"; {SAFETY_CAUTION}",
            )
        raise InputError(
            what,
            where=where,
            fix="choose a value inside the instrument's range (its driver profile)"
            if bound.source == "profile" else "choose a value inside the bench file's limits",
        )

    # -- operations -------------------------------------------------------------------------

    def set_value(self, op: str, value: Value, *, force: bool = False) -> bool:
        """Set the setting ``op`` to ``value``; return True if commands were sent.

        Validates and checks limits first (nothing is sent on failure). Skips sending when the
        cache says the instrument already has this value, unless ``force``.
        """
        operation = self.profile.op(op)
        if operation.spec.shape != "setting":
            raise InputError(f"{op!r} is not a setting", where=f"role {self.role!r}")
        checked, token = self._checked_token(operation, value)
        cached = self._cache.get(op)
        if not force and cached is not None and cached[1] == token:
            self.settings_skipped += 1
            return False
        self._cache.pop(op, None)  # unknown until the commands went through
        self._block_ops.add(op)
        for template in operation.commands:
            self._send(Operation.fill(template, token))
        self._cache[op] = (checked, token)
        self._complete(operation)
        if force:
            self.flush()  # a forced setting (the safe state) goes out now, never held
        return True

    def do(self, op: str, value: Value | None = None, *,
           timeout_s: float | None = None) -> None:
        """Run the action ``op`` (with ``value`` if it takes one) and wait for completion.

        ``timeout_s`` shortens the wait for completion below the profile's (never beyond it),
        for a caller that knows how long the operation should take.
        """
        operation = self.profile.op(op)
        token = None
        if operation.spec.value != "none":
            token = self._checked_token(operation, value)[1]
        with self.joined():  # the commands and the completion query: one message
            for template in operation.commands:
                self._send(Operation.fill(template, token))
            self._complete(operation, timeout_s)

    def ask(self, op: str, value: Value | None = None) -> Any:
        """Run the query ``op`` and return its parsed reply (a tuple when it has two queries;
        a bool when it has a ``mask``)."""
        operation = self.profile.op(op)
        token = None
        if operation.spec.value != "none":
            token = self._checked_token(operation, value)[1]
        for template in operation.commands:
            self._send(Operation.fill(template, token))
        results = []
        for template in operation.queries:
            cmd = Operation.fill(template, token)
            results.append(self._read(cmd, operation.reply or "text", operation.timeout_s))
        if operation.mask is not None:
            return (int(results[0]) & operation.mask) != 0
        return tuple(results) if len(results) > 1 else results[0]

    def read_back(self, op: str) -> Value:
        """Query the instrument's present value of setting ``op`` (the profile's ``query``).

        Does not touch the cache."""
        operation = self.profile.op(op)
        if operation.read_back is None:
            raise InputError(
                f"driver profile {self.profile.name!r} has no read-back ('query') for {op!r}",
                where=f"role {self.role!r}",
                fix=f"add query = \"<SCPI>?\" to [ops.{op}] ({DOCS_HINT})",
            )
        reply = self.query(operation.read_back, timeout_s=operation.timeout_s)
        return self._read_back_value(operation, reply)

    def read_backs(self, *ops: str) -> list[Value]:
        """:meth:`read_back` of each of ``ops``, in one message where the profile allows
        compound messages."""
        operations = [self.profile.op(op) for op in ops]
        if not self.compound or len(ops) < 2 or any(o.read_back is None for o in operations):
            return [self.read_back(op) for op in ops]
        queries = [str(o.read_back) for o in operations]
        timeout = max((o.timeout_s for o in operations if o.timeout_s is not None),
                      default=None)
        with self.joined():
            for cmd in queries[:-1]:
                self._send(cmd)
            reply = self.query(queries[-1], timeout_s=timeout)
        parts = self._answers(reply, len(queries), f"{len(queries)} joined queries",
                              ";".join(queries))
        return [self._read_back_value(o, part) for o, part in zip(operations, parts,
                                                                   strict=True)]

    def _read_back_value(self, operation: Operation, reply: str) -> Value:
        assert operation.read_back is not None
        where = self.where(operation.read_back)
        if operation.spec.value == "choice":
            text = reply.strip().upper()
            for name, token in operation.map.items():
                if token.upper() == text or token.upper().startswith(text + ","):
                    return name
            return reply.strip()
        value = self._parse(reply, operation.reply or "text", where)
        if operation.scale != 1.0 and isinstance(value, float):
            return value * operation.scale
        return value

    def _read(self, cmd: str, reply_format: str, timeout_s: float | None) -> Any:
        if reply_format == "real32":
            self.transactions += 1
            self._status_fresh = False
            message = self._joined(cmd)
            if self.before_message is not None:
                self.before_message()
            return self.transport.query_binary_floats(message, timeout_s=timeout_s)
        return self._parse(self.query(cmd, timeout_s=timeout_s), reply_format, self.where(cmd))

    @staticmethod
    def _parse(reply: str, reply_format: str, where: str) -> Any:
        if reply_format == "float":
            return blocks.parse_float(reply, where=where)
        if reply_format == "int":
            return blocks.parse_int(reply, where=where)
        if reply_format == "bool":
            return blocks.parse_bool(reply, where=where)
        if reply_format == "csv_floats":
            return blocks.parse_csv_floats(reply, where=where)
        if reply_format == "error":
            return blocks.parse_scpi_error(reply, where=where)
        if reply_format == "real32":
            return blocks.parse_real32_block(reply.encode("latin-1"), where=where)
        return reply.strip()

    def _complete(self, operation: Operation, limit_s: float | None = None) -> None:
        completion = operation.completion
        if completion is None:
            return
        timeout_s = completion.timeout_s if limit_s is None else min(limit_s,
                                                                      completion.timeout_s)
        if completion.method == "wait":
            self.flush()
            self.clock.sleep(completion.timeout_s if limit_s is None
                             else min(limit_s, completion.timeout_s))
            return
        if completion.method == "opc":
            opc = self.profile.op("operation_complete")
            cmd = opc.queries[0]
            reply = self.query(cmd, timeout_s=timeout_s)
            if not blocks.parse_bool(reply, where=self.where(cmd)):
                raise InstrumentError(
                    f"{cmd} answered {reply!r} instead of 1 after {operation.name!r}",
                    where=self.where(cmd),
                    fix="check the instrument's error queue; the operation may have failed",
                )
            return
        if completion.method == "event" and completion.command is not None:
            self.write(completion.command)
        assert completion.query is not None
        start = self.clock.now()
        while True:
            reply = self.query(completion.query)
            if self._poll_done(reply, completion):
                return
            if self.clock.now() - start >= timeout_s:
                raise InstrumentError(
                    f"{operation.name!r} did not complete within {timeout_s:g} s "
                    f"(last reply to {completion.query!r}: {reply!r})",
                    where=self.where(completion.query),
                    fix="raise complete.timeout_s in the profile if the operation is slow, or "
                    "check the instrument",
                )
            self.clock.sleep(completion.interval_s)

    def _poll_done(self, reply: str, completion: Completion) -> bool:
        text = reply.strip()
        if completion.until is not None and completion.until.fullmatch(text) is None:
            return False
        clear, want = completion.until_bits_clear, completion.until_bits_set
        if clear is not None or want is not None:
            bits = blocks.parse_int(text, where=self.where())
            if clear is not None and bits & clear:
                return False
            if want is not None and bits & want != want:
                return False
        return True

    # -- common to every kind ---------------------------------------------------------------

    def identify(self) -> str:
        """Query ``*IDN?`` and check it against the profile's pattern; return the reply.

        Raises :class:`InstrumentError` naming the role, resource, reply and expected pattern
        on a mismatch.
        """
        reply = self.ask("identify")
        if not self.profile.matches_idn(reply):
            raise InstrumentError(
                f"*IDN? answered {reply!r}, which does not match driver profile "
                f"{self.profile.name!r} (pattern {self.profile.idn_pattern.pattern!r})",
                where=self.where(),
                fix="check that the bench file gives this role the right resource and profile "
                "(`sweeprig scan` shows which profile matches each instrument), or write a "
                f"profile for this model ({DOCS_HINT})",
            )
        self.idn = reply
        return reply

    def reset(self) -> None:
        """``*RST`` (and wait); forgets the cached settings."""
        self.forget_state()
        self.do("reset")

    def clear(self) -> None:
        """``*CLS``: clear the error queue and event registers."""
        self.do("clear")
        self.flush()  # now: a later forget_state() must not drop it
        self._errors_flagged = False
        self._block.clear()
        self._block_count = 0
        self._block_ops.clear()
        self._lead_mark = self._errors_before = None

    reference: str | None = None
    """The 10 MHz reference the bench's ``[timebase]`` asks for (``internal`` or
    ``external``), set by :meth:`prepare` where the profile has a ``reference`` operation
    (so a recovery after a reset sets it again); None: left as it is."""

    def prepare(self) -> None:
        """Put the instrument in the mode sweeprig expects (the profile's ``prepare``), on the
        reference the bench asks for."""
        if self.profile.has("prepare"):
            self.do("prepare")
        if self.reference is not None and self.profile.has("reference"):
            self.set_value("reference", self.reference)

    def reference_unlocked(self) -> bool | None:
        """Whether the instrument reports its reference unlocked (None: the profile has no
        ``reference_unlocked`` query, so it cannot tell)."""
        if not self.profile.has("reference_unlocked"):
            return None
        return bool(self.ask("reference_unlocked"))

    def event_status(self) -> int:
        """The event status register (``*ESR?``; reading clears it), with any bits read in
        joined messages and not yet taken. Error bits are kept for :meth:`check_errors`."""
        bits = int(self.ask("event_status"))
        if bits & ESR_ERROR_BITS:
            self._errors_flagged = True
        self._status_fresh = True
        bits, self._status_bits = bits | self._status_bits, 0
        return bits

    def errors(self) -> list[blocks.ScpiError]:
        """Drain the error queue: every entry up to the ``0,...`` that ends it."""
        found: list[blocks.ScpiError] = []
        self._errors_flagged = False
        for _ in range(MAX_ERROR_READS):
            entry = self.ask("next_error")
            if not entry.is_error:
                return found
            found.append(entry)
        raise InstrumentError(
            f"the error queue did not empty after {MAX_ERROR_READS} reads "
            f"(last: {found[-1]})",
            where=self.where(self.profile.op("next_error").queries[0]),
            fix="check that the profile's next_error query is the instrument's error query",
        )

    def check_errors(self) -> None:
        """Raise :class:`InstrumentError` if the instrument reported errors since the last
        check (draining its queue).

        On a compound profile the event status register says whether there is anything to
        read (``*ESR?``, joined with any held commands; no query at all when the last exchange
        already read it): the queue is read only when an error bit is set. Otherwise the queue
        is drained every time. The message names the commands sent since the previous check
        (the last configuration block) and the instrument's texts. Settings in that block are
        forgotten from the cache, since the instrument may have refused them.
        """
        if self.compound and self.profile.has("event_status"):
            if not self._status_fresh:
                self._read_status()
            if not self._errors_flagged:
                self._end_block()
                return
        self._raise_queued_errors()

    def _end_block(self) -> tuple[list[str], set[str], int]:
        sent, ops, count = list(self._block), set(self._block_ops), self._block_count
        self._block.clear()
        self._block_count = 0
        self._block_ops.clear()
        self._lead_mark = self._errors_before = None
        return sent, ops, count

    def _raise_queued_errors(self) -> None:
        before = self._errors_before
        sent, ops, count = self._end_block()
        self._errors_flagged = False
        found = self.errors()
        if not found:
            return
        for op in ops:
            self._cache.pop(op, None)
        later = ""
        if before is not None:  # a leading *ESR? showed the error: the commands after it
            cut = max(before - (count - len(sent)), 0)  # (the block keeps the last ones)
            sent, after = sent[:cut], sent[cut:]
            later = ("; its status showed the error before these later commands ran: "
                     + _commands_text(after, len(after)))
            count = before
        texts = "; ".join(str(e) for e in found)
        raise InstrumentError(
            f"the instrument reported {texts} after: {_commands_text(sent, count)}{later}",
            where=self.where(),
            fix="check these settings against the instrument's ranges and the profile's "
            "commands against its manual",
        )

    def _take_status(self, reply: str, cmd: str) -> None:
        """Keep the bits of an ``*ESR?`` reply read in a joined message."""
        bits = blocks.parse_int(reply, where=self.where(cmd))
        self._status_bits |= bits
        if bits & ESR_ERROR_BITS:
            self._errors_flagged = True
        self._status_fresh = True

    def _read_status(self) -> None:
        cmd = self.profile.op("event_status").queries[0]
        reply = self.query(cmd, timeout_s=self.profile.op("event_status").timeout_s)
        self._take_status(reply, cmd)

    def point_status(self) -> int:
        """The event status bits since the last call (``*ESR?``; the power-on bit, 128, says
        the instrument reset itself), after checking for errors.

        On a compound profile the register is read only when the last exchange did not
        already read it (a query can carry ``*ESR?`` at its end: :meth:`sync`,
        :meth:`ask_joined`), and error bits raise as :meth:`check_errors` does. Otherwise
        this is :meth:`event_status` (errors are left to :meth:`check_errors`)."""
        if not (self.compound and self.profile.has("event_status")):
            if self._status_fresh:  # read by the last exchange (finish_status)
                bits, self._status_bits = self._status_bits, 0
                return bits
            return self.event_status()
        self.check_errors()
        bits, self._status_bits = self._status_bits, 0
        return bits

    @property
    def joins_status(self) -> bool:
        """True when an ``*ESR?`` can lead a message of settings (:meth:`post_sync`)."""
        return self.compound and self.profile.has("event_status")

    @property
    def status_fresh(self) -> bool:
        """True while the last exchange ended with an ``*ESR?`` read (nothing sent since)."""
        return self._status_fresh

    def taken_status(self) -> int:
        """The event status bits read since the last call (by joined, posted or leading
        ``*ESR?`` reads: :meth:`finish_status`, :meth:`post_sync`), without reading the
        register again; error bits among them raise as :meth:`check_errors` does (the queue
        is read then)."""
        if self._errors_flagged:
            self._raise_queued_errors()
        bits, self._status_bits = self._status_bits, 0
        return bits

    def expire_status(self) -> None:
        """A new point begins: a status read before it says nothing of it, so the point's
        :meth:`point_status` reads the register unless a later query carried it."""
        self._status_fresh = False

    def post_ask(self, op: str) -> Pending | None:
        """:meth:`ask` of a plain query operation (no parameter, no command, one text or
        number reply) in two halves: sent here, read by :meth:`finish_ask`. None when the
        operation is not that plain (then :meth:`ask` it)."""
        operation = self.profile.op(op)
        if operation.spec.value != "none" or operation.commands or len(operation.queries) != 1 \
                or operation.mask is not None or operation.reply == "real32":
            return None
        return self.post_query(operation.queries[0], timeout_s=operation.timeout_s)

    def finish_ask(self, op: str, pending: Pending) -> Any:
        """The parsed reply of a :meth:`post_ask`."""
        operation = self.profile.op(op)
        return self._parse(self.collect(pending), operation.reply or "text",
                           self.where(operation.queries[0]))

    def post_sync(self, *, status_first: bool = False) -> Pending | None:
        """:meth:`sync` in two halves, so several instruments settle at once: the ``*OPC?``
        (joined with the held settings) is sent here and its reply read by
        :meth:`finish_sync`. Without compound messages the error check runs here, in full,
        and None is returned.

        ``status_first``: the message begins with ``*ESR?``, read before the held settings
        run (so it tells of the time before them); :meth:`finish_sync` keeps its bits for
        :meth:`taken_status`, and the status counts as unread afterwards (the settings came
        after it). The :attr:`status_companions` follow it, before the settings too (their
        answers in :attr:`status_seen`, as :meth:`post_status` gives them). Ignored without
        compound messages or an ``event_status`` operation."""
        if not self.compound:
            self.check_errors()
            return None
        if status_first and self.profile.has("event_status"):
            self.status_seen = {}
            self._lead_mark = self._block_count - len(self._held)  # (held: in the block)
            self._held[0:0] = [self.profile.op("event_status").queries[0],
                               *self._companion_queries(joined=True)]
            self._status_first = True
        opc = self.profile.op("operation_complete")
        try:
            return self.post_query(opc.queries[0], timeout_s=opc.timeout_s)
        except BaseException:
            self._status_first = False
            raise

    def finish_sync(self, pending: Pending | None) -> None:
        """Read the ``*OPC?`` reply of :meth:`post_sync` (nothing when it returned None)."""
        if pending is None:
            return
        first, self._status_first = self._status_first, False
        reply = self.collect(pending)
        opc = self.profile.op("operation_complete").queries[0]
        if first:
            status_cmd = self.profile.op("event_status").queries[0]
            also = self._companion_queries(joined=True)
            parts = self._answers(reply, 2 + len(also),
                                  f"{status_cmd}, {len(also)} status queries and {opc} joined"
                                  if also else f"{status_cmd} and {opc} joined", opc)
            self._take_companions(also, parts[1:-1])
            self._take_status(parts[0], status_cmd)
            if self._errors_flagged and self._errors_before is None:
                self._errors_before = self._lead_mark
            self._status_fresh = False  # the settings ran after that read
            reply = parts[-1]
        self._check_complete(reply, opc)

    def _check_complete(self, reply: str, cmd: str) -> None:
        """Raise unless ``reply`` to the completion query ``cmd`` is 1."""
        if not blocks.parse_bool(reply, where=self.where(cmd)):
            raise InstrumentError(
                f"{cmd} answered {reply!r} instead of 1",
                where=self.where(cmd),
                fix="check the instrument's error queue; a setting may have failed",
            )

    #: Plain queries (operation names) asked with every posted status read: in the same
    #: message where the profile joins queries, else each in a message of its own after it
    #: (one exchange more each). Their parsed replies land in :attr:`status_seen` (a supply's
    #: current-limit state, a source's level state: read after every point).
    status_companions: tuple[str, ...] = ()

    @property
    def asks_companions(self) -> bool:
        """True when a status read after a point asks :attr:`status_companions`."""
        return bool(self._companions())

    def _companions(self) -> list[str]:
        """The :attr:`status_companions` this instrument's profile has as plain queries (and
        it answered at connect)."""
        return self._plan_companions()[0]

    def _plan_companions(self) -> tuple[list[str], list[str]]:
        """(:meth:`_companions`, their distinct query texts: two flags of one register, such
        as a source's level state and its reference lock, are one query)."""
        if self._companion_plan is None:
            names = [name for name in self.status_companions if self.plain_query(name)
                     and name not in self._dropped_companions]
            queries = list(dict.fromkeys(self.profile.op(n).queries[0] for n in names))
            self._companion_plan = (names, queries)
        return self._companion_plan

    def check_companions(self) -> list[tuple[str, dict[str, Any]]]:
        """Ask each companion query once, at connect: one the instrument refuses (an error
        in its queue, no reply, or a reply its operation cannot parse) is left out for the
        run, so the status read after every point never fails on a flag this instrument
        lacks. Returns, for each query left out, a note and its details (``role``,
        ``query``, ``left_out``: the companions' operation names)."""
        notes: list[tuple[str, dict[str, Any]]] = []
        self.companions_at_connect = {}
        for query in list(self._companion_queries(joined=False)):
            names = [n for n in self._companions() if self.profile.op(n).queries[0] == query]

            def answers(query: str = query, names: list[str] = names) -> dict[str, Any]:
                reply = self.query(query)
                return {n: self._joined_value(self.profile.op(n), reply, query) for n in names}

            values, problem = self._tried_at_connect(answers)
            if problem:
                self._dropped_companions.update(names)
                self._companion_plan = None
                notes.append(self._left_out_note(
                    query, problem, names,
                    f"{' and '.join(names)} {'is' if len(names) == 1 else 'are'} not read "
                    "after each point: those flags cannot be raised for it this run",
                    hint=" (check it with `sweeprig probe`)"))
            else:
                self.companions_at_connect.update(values)
        return notes

    #: Operations (plain queries) reading settings sweeprig does not own that a previous user
    #: may have left other than neutral (a number other than 0, a flag set), which would make
    #: every reading wrong: :meth:`left_settings` asks them once, at connect.
    left_setting_ops: tuple[str, ...] = ()

    def left_settings(self) -> tuple[list[str], list[tuple[str, dict[str, Any]]]]:
        """The :attr:`left_setting_ops` this profile can ask, asked: a text for each found
        other than neutral (a number other than 0, a flag set), and a note (with its details)
        for each query the instrument refused, which is then left unchecked."""
        found: list[str] = []
        notes: list[tuple[str, dict[str, Any]]] = []
        for name in self.left_setting_ops:
            if not self.plain_query(name):
                continue
            operation = self.profile.op(name)
            query, what = operation.queries[0], name.replace("_", " ")
            value, refused = self._tried_at_connect(lambda name=name: self.ask(name))
            if refused:
                notes.append(self._left_out_note(query, refused, [name],
                                                 f"its {what} is not checked"))
            elif isinstance(value, bool) or operation.spec.reply == "int":
                if value:
                    found.append(f"{what} on ({query}): switch it off at the instrument")
            elif float(value) != 0.0:
                unit = {"level_db": " dB", "frequency": " Hz"}.get(operation.spec.unit or "", "")
                found.append(f"a {what} of {float(value):g}{unit} is set ({query}): every "
                             "level or frequency it gives is off by it; set it to 0 at the "
                             "instrument, and calibrate again if the calibration was made "
                             "with it set")
        return found, notes

    def _tried_at_connect(self, ask: Callable[[], Any]) -> tuple[Any, str]:
        """``ask()`` once, at connect: (its answer, "") or (None, what went wrong: the first
        line of what it raised, else the errors it left in the queue, drained either way)."""
        value, problem = None, ""
        try:
            value = ask()
        except (InstrumentError, TransportError) as exc:
            problem = str(exc).splitlines()[0]
        errors = "; ".join(str(e) for e in self.errors())
        problem = problem or errors
        return (None if problem else value), problem

    def _left_out_note(self, query: str, problem: str, names: list[str], consequence: str,
                       *, hint: str = "") -> tuple[str, dict[str, Any]]:
        """The warning (and its details: ``role``, ``query``, ``left_out``) for a query the
        instrument refused at connect, left out for the run with ``names``."""
        return (f"role {self.role!r}: {query} failed at connect ({problem}), so {consequence}; "
                f"give it a profile without ops.{names[0]}{hint} to silence this",
                {"role": self.role, "query": query, "left_out": names})

    def plain_query(self, name: str) -> bool:
        """True when the profile has operation ``name`` as a plain single query (no
        parameter, no command): one that can ride in another message."""
        if not self.profile.has(name):
            return False
        operation = self.profile.op(name)
        return (len(operation.queries) == 1 and not operation.commands
                and operation.spec.value == "none")

    def _companion_queries(self, *, joined: bool) -> list[str]:
        """The distinct query texts of the companions, those that ride in a status read's
        own message when ``joined`` (a compound profile: else none)."""
        if joined and not self.compound:
            return []
        return self._plan_companions()[1]

    def post_status(self, *, settling_ok: bool = False) -> Pending | None:
        """Send the point's ``*ESR?`` when :meth:`point_status` would have to read it (the
        last exchange did not carry it); its reply is taken by :meth:`finish_status`, and
        :meth:`point_status` then sends nothing. None when there is nothing to send. The
        :attr:`status_companions` ride in the same message on a compound profile
        (:attr:`status_seen` is emptied here, so it never holds an older read's answer).
        ``settling_ok``: as :meth:`post_query`'s (status queries change nothing that
        settles; no settings are held here, or they would go with it)."""
        self.status_seen = {}
        if not self.profile.has("event_status") or self._status_fresh:
            return None
        op = self.profile.op("event_status")
        units = [op.queries[0], *self._companion_queries(joined=True)]
        if settling_ok and self._held:
            raise RuntimeError(f"{self.where()}: settings held while a status read is sent "
                               "inside the settling time")
        return self.post_query(_compound(units) if len(units) > 1 else units[0],
                               timeout_s=op.timeout_s, settling_ok=settling_ok)

    def finish_status(self, pending: Pending | None) -> None:
        """Take the ``*ESR?`` reply of :meth:`post_status` as :meth:`point_status` would, and
        its companions' replies into :attr:`status_seen` (asked now, each distinct query in
        a message of its own, where the profile does not join queries)."""
        if pending is None:
            return
        reply = self.collect(pending)
        status_cmd = self.profile.op("event_status").queries[0]
        also = self._companion_queries(joined=True)
        if also:
            parts = self._answers(reply, 1 + len(also),
                                  f"{status_cmd} and {len(also)} joined queries", status_cmd)
            reply = parts[0]
            self._take_companions(also, parts[1:])
        self._take_status(reply, status_cmd)
        if not self.compound and (alone := self._companion_queries(joined=False)):
            self._take_companions(alone, [self.query(q) for q in alone])

    def _take_companions(self, queries: list[str], parts: list[str]) -> None:
        """The answers ``parts`` of the companion ``queries`` into :attr:`status_seen`, each
        companion parsed from its query's answer as its operation says (its own mask)."""
        answers = dict(zip(queries, parts, strict=True))
        for name in self._companions():
            operation = self.profile.op(name)
            cmd = operation.queries[0]
            self.status_seen[name] = self._joined_value(operation, answers[cmd], cmd)

    def sync(self) -> None:
        """Prove the instrument has applied everything sent so far before another
        instrument acts (a source settled before the analyzer sweeps): on a compound profile
        one ``*OPC?`` joined with the held settings (errors are then found by the point's
        :meth:`point_status`); otherwise the error check, whose reply proves the same for
        the sequential commands it follows."""
        if not self.compound:
            self.check_errors()
            return
        opc = self.profile.op("operation_complete")
        self._check_complete(self.query(opc.queries[0], timeout_s=opc.timeout_s),
                             opc.queries[0])

    def ask_joined(self, *asks: tuple[str, Value | None], status: bool = False,
                   timeout_s: float | None = None) -> list[Any]:
        """Several single-query operations (``(op, value)``) in one message where the
        profile allows it, ``*ESR?`` at its end when ``status`` (taken as :meth:`point_status`
        will read it); one by one otherwise. Returns each parsed reply, in order. A query
        whose text was asked already in the message, with no command since, is sent once and
        its answer read for both (two flags of one register)."""
        ops = [self.profile.op(op) for op, _ in asks]
        joinable = self.compound and all(
            len(o.queries) == 1 and o.reply != "real32" for o in ops)
        if not joinable:
            return self._ask_each(asks, ops)
        tokens = [None if o.spec.value == "none" else self._checked_token(o, value)[1]
                  for o, (_, value) in zip(ops, asks, strict=True)]  # all checked first
        with self.joined():  # held here, sent with the last query
            queries: list[str] = []  # the query of each ask
            sent: dict[str, int] = {}  # query text -> its answer's place, since a command
            places: list[int] = []
            for operation, token in zip(ops, tokens, strict=True):
                for template in operation.commands:
                    self._send(Operation.fill(template, token))
                    sent.clear()
                queries.append(Operation.fill(operation.queries[0], token))
                place = sent.get(queries[-1])
                if place is None:
                    place = sent[queries[-1]] = len(set(places))
                    self._send(queries[-1])  # a query unit: its answer joins the reply
                places.append(place)
            status_cmd = None
            if status and self.profile.has("event_status"):
                status_cmd = self.profile.op("event_status").queries[0]
                self._send(status_cmd)
            last = self._held.pop()
            self._block_count -= 1
            self._block.pop()
            timeout = max((o.timeout_s for o in ops if o.timeout_s is not None),
                          default=timeout_s)
            if timeout_s is not None:
                timeout = max(timeout_s, timeout or 0.0)
            reply = self.query(last, timeout_s=timeout)
        expected = len(set(places)) + (status_cmd is not None)
        parts = self._answers(reply, expected, f"{expected} joined queries", last)
        if status_cmd is not None:
            self._take_status(parts.pop(), status_cmd)
        return [self._joined_value(operation, parts[place], cmd)
                for operation, place, cmd in zip(ops, places, queries, strict=True)]

    def _ask_each(self, asks: tuple[tuple[str, Value | None], ...], ops: list[Operation]
                  ) -> list[Any]:
        """:meth:`ask_joined` one message at a time: a plain query whose text was just asked
        (no command since) is read from that answer, not asked again."""
        out: list[Any] = []
        last: tuple[str, str] | None = None  # (query, its answer) since the last command
        for (op, value), operation in zip(asks, ops, strict=True):
            if not self.plain_query(op) or operation.reply == "real32":
                out.append(self.ask(op, value))
                last = None
                continue
            cmd = operation.queries[0]
            if last is None or last[0] != cmd:
                last = (cmd, self.query(cmd, timeout_s=operation.timeout_s))
            out.append(self._joined_value(operation, last[1], cmd))
        return out

    def _answers(self, reply: str, count: int, what: str, cmd: str) -> list[str]:
        """The ``count`` answers of a joined reply; :class:`InstrumentError` naming ``what``
        and ``cmd`` when there are not that many."""
        parts = reply.strip().split(";")
        if len(parts) != count:
            raise InstrumentError(
                f"{what} got {len(parts)} answers: {reply!r}",
                where=self.where(cmd),
                fix="if the instrument does not take compound messages, set "
                "compound_messages = false in its driver profile",
            )
        return parts

    def _joined_value(self, operation: Operation, part: str, cmd: str) -> Any:
        """One answer of a joined reply, parsed as ``operation`` says (a bool with a mask)."""
        value = self._parse(part, operation.reply or "text", self.where(cmd))
        if operation.mask is not None:
            value = (int(value) & operation.mask) != 0
        return value

    def forget_state(self) -> None:
        """Empty the cache of last-sent settings (after a reset, reconnect or power cycle),
        and drop any held commands (they were not sent). The memo of values already checked
        (:meth:`_checked_token`) goes too: nothing from before a reset or recovery is taken
        on trust, and checking again costs only the first message of each setting."""
        self._cache.clear()
        self._checked_memo.clear()
        self._held.clear()
        self._status_fresh = False
        self._status_first = False

    def state(self) -> dict[str, Value]:
        """The settings sent and not forgotten since: operation name → value."""
        return {op: value for op, (value, _token) in self._cache.items()}

    def apply_state(self, state: Mapping[str, Value]) -> None:
        """Send the settings in ``state`` (from :meth:`state`), in the profile's order.

        Settings unchanged in the cache are skipped as usual; call :meth:`forget_state`
        first to send them all.
        """
        for op in self.profile.ops:
            if op in state:
                self.set_value(op, state[op])

    def safe(self) -> None:
        """Put the instrument in its safe state (sources/supplies off). Base: nothing."""

    def close(self) -> None:
        """Close the transport."""
        with contextlib.suppress(TransportError):
            self.transport.close()
