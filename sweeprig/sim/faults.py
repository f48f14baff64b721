"""Fault injection for the simulated bench: planned misbehaviour of served instruments.

A :class:`FaultPlan` lists faults per instrument role. Kinds:

* ``timeout`` — the reply to the next query is swallowed (the command still runs).
* ``drop`` — the client's connection is closed; the message that triggered it is lost.
* ``error`` — ``code``/``text`` is pushed to the instrument's error queue (the message
  then runs normally).
* ``garble`` — the bytes of the next reply are corrupted (same length, the terminator kept).
* ``reset`` — the instrument resets itself as after a power glitch (power-on defaults, PON
  bit set, error queue cleared) before the message runs.
* ``swallow`` — the message is lost without a trace: it does not run, nothing is answered,
  the connection stays open (a command lost on the way, as seen by the sender).
* ``late`` — the reply to the next query is held back and sent ``delay_s`` (wall seconds)
  later, or just before the next message on that connection is handled if that comes first
  (an instrument answers in order: a late reply always precedes the replies to later
  queries). A client that timed out and then reads on would take it for the answer to its
  next query unless it resynchronises (:mod:`sweeprig.transport.resync`).
* ``freeze`` — the instrument stops answering: this message and every later one are
  ignored, connections stay open and new ones are accepted (a hung instrument). With
  ``whole_bench = true`` every instrument of the bench freezes at once (a hung server).
  :meth:`FaultInjector.thaw` ends it (for tests that look at the instruments afterwards).
* ``unlock`` — the instrument's 10 MHz reference input loses its signal for good (a house
  reference or its cable gone in the night): set to its external reference, it runs on its
  own crystal from then on and reports its reference unlocked (its questionable status).
  Roles ``rf``, ``rf2``, ``lo``, ``sa``.
* ``trip`` — the instrument's output protection trips before the message runs (a
  generator's reverse-power protection, a supply's over-voltage or over-current one): its
  output goes off and stays off, switching it on is refused until the protection is cleared
  (``OUTPut:PROTection:CLEar``), and ``OUTPut:PROTection:TRIPped?`` answers 1. Roles ``rf``,
  ``rf2``, ``lo``, ``dc`` (:mod:`sweeprig.sim.instruments.protection`). On ``chamber`` its
  over-temperature limiter trips: the conditioning stops (the air drifts to ambient) while
  its controller still reads control on, and nothing but the DUT probe tells.

Triggers (exactly one per fault): ``at_time_s`` (the first message at or after that
simulated time), ``at_command`` (the n-th message, counted from 1, received by that role's
instrument over all its connections), ``rate`` (probability per message, from a seeded
generator) or ``match`` (every message containing that text, case-insensitive, e.g.
``"OUTP:STAT OFF"``; with a ``rate`` too, that probability among the matching messages);
``max_count`` caps how often a ``rate`` or ``match`` fault fires. A
"message" is one received line. ``timeout``, ``garble`` and ``late`` wait, once triggered, for the
next message that has a reply.

Every injected fault is recorded in the thread-safe :class:`FaultLog` with role, kind,
simulated time, command count and the message it hit, so a soak test can check that the
engine accounted for each one.

TOML form (one table per fault)::

    [[faults]]
    role = "sa"
    kind = "timeout"
    at_command = 40

    [[faults]]
    role = "dc"
    kind = "error"
    rate = 0.01
    seed = 7
    code = -200
    text = "Execution error"
"""

from __future__ import annotations

import random
import threading
from dataclasses import dataclass
from typing import Any

from sweeprig.sim.fault_plan import FaultKind as FaultKind
from sweeprig.sim.fault_plan import FaultPlan as FaultPlan
from sweeprig.sim.fault_plan import FaultSpec as FaultSpec

#: Bytes a garbled reply is made of: printable ASCII that never forms a number or a terminator.
_GARBLE_ALPHABET = b"!#$%&()*<>?@[]^_{|}~"


@dataclass(frozen=True)
class FaultEvent:
    """One injected fault: where, what, when (simulated s), which message (1-based count)."""

    role: str
    kind: FaultKind
    time_s: float
    command_count: int
    command: str
    detail: str = ""


class FaultLog:
    """Thread-safe record of every injected fault, in injection order."""

    def __init__(self) -> None:
        self._events: list[FaultEvent] = []
        self._lock = threading.Lock()

    def record(self, event: FaultEvent) -> None:
        with self._lock:
            self._events.append(event)

    def events(self, role: str | None = None) -> list[FaultEvent]:
        with self._lock:
            return [e for e in self._events if role is None or e.role == role]

    def __len__(self) -> int:
        with self._lock:
            return len(self._events)


@dataclass(frozen=True)
class FaultAction:
    """What the server must do with one received message."""

    drop: bool = False
    swallow_reply: bool = False
    garble_reply: bool = False
    ignore: bool = False
    """The message is lost: not run, not answered, the connection kept (swallow, freeze)."""
    late_s: float | None = None
    """The reply is sent this many wall seconds late (or before the next message's)."""


class _Armed:
    __slots__ = ("fired", "rng", "spec")

    def __init__(self, spec: FaultSpec) -> None:
        self.spec = spec
        self.fired = 0
        self.rng = random.Random(spec.seed)


class RoleFaults:
    """Fault state of one role: message counter, triggers, faults waiting for a reply."""

    def __init__(self, role: str, specs: tuple[FaultSpec, ...], log: FaultLog,
                 bench_frozen: threading.Event | None = None) -> None:
        self.role = role
        self.log = log
        self.command_count = 0
        self.frozen = threading.Event()
        """Set while this instrument ignores every message (a ``freeze`` fault)."""
        self._bench_frozen = bench_frozen or threading.Event()
        self._armed = [_Armed(s) for s in specs]
        self._waiting: list[FaultSpec] = []
        self._lock = threading.Lock()

    def count_if_quiet(self) -> bool:
        """Count a received message and return True when nothing can happen to it: no fault
        armed or waiting for a reply, nothing frozen (the server then runs it as it is, with
        no :meth:`on_message` or :meth:`on_reply`). False: nothing counted; call
        :meth:`on_message`."""
        with self._lock:
            if self._armed or self._waiting or self.frozen.is_set() \
                    or self._bench_frozen.is_set():
                return False
            self.command_count += 1
            return True

    def on_message(self, message: str, now_s: float, instrument: Any) -> FaultAction:
        """Count a received message, fire due faults; ``instrument`` is a ScpiInstrument."""
        with self._lock:
            self.command_count += 1
            count = self.command_count
            if self.frozen.is_set() or self._bench_frozen.is_set():
                return FaultAction(ignore=True)
            due = [a for a in self._armed if self._is_due(a, now_s, count, message)]
            action = FaultAction()
            for armed in due:
                armed.fired += 1
                spec = armed.spec
                if spec.kind in ("timeout", "garble", "late"):
                    self._waiting.append(spec)
                    continue
                detail = ""
                if spec.kind == "error":
                    instrument.push_error(spec.code, text=spec.text)
                    detail = f"{spec.code}"
                elif spec.kind == "reset":
                    instrument.reset_to_power_on()
                elif spec.kind == "unlock":
                    instrument.reference.lose_input()
                elif spec.kind == "trip":
                    instrument.trip_protection()
                elif spec.kind == "drop":
                    action = FaultAction(drop=True)
                elif spec.kind == "swallow" and not action.drop:
                    action = FaultAction(ignore=True)
                elif spec.kind == "freeze":
                    (self._bench_frozen if spec.whole_bench else self.frozen).set()
                    detail = "whole bench" if spec.whole_bench else ""
                    action = FaultAction(ignore=True)
                self.log.record(FaultEvent(self.role, spec.kind, now_s, count, message, detail))
            return action

    def on_reply(self, message: str, now_s: float) -> FaultAction:
        """A reply is about to be sent for ``message``: apply a waiting timeout/garble."""
        with self._lock:
            if not self._waiting:
                return FaultAction()
            spec = self._waiting.pop(0)
            self.log.record(
                FaultEvent(self.role, spec.kind, now_s, self.command_count, message)
            )
            if spec.kind == "timeout":
                return FaultAction(swallow_reply=True)
            if spec.kind == "late":
                return FaultAction(late_s=spec.delay_s)
            return FaultAction(garble_reply=True)

    @staticmethod
    def _is_due(armed: _Armed, now_s: float, count: int, message: str) -> bool:
        spec = armed.spec
        if spec.match is not None:
            if spec.max_count is not None and armed.fired >= spec.max_count:
                return False
            if spec.match.upper() not in message.upper():
                return False
            return spec.rate is None or armed.rng.random() < spec.rate
        if spec.at_command is not None:
            return armed.fired == 0 and count == spec.at_command
        if spec.at_time_s is not None:
            return armed.fired == 0 and now_s >= spec.at_time_s
        if spec.max_count is not None and armed.fired >= spec.max_count:
            return False
        return armed.rng.random() < (spec.rate or 0.0)


class FaultInjector:
    """The running faults of a served bench: one :class:`RoleFaults` per role, one log."""

    def __init__(self, plan: FaultPlan | None = None) -> None:
        self.plan = plan or FaultPlan()
        self.log = FaultLog()
        self._roles: dict[str, RoleFaults] = {}
        self._lock = threading.Lock()
        self._bench_frozen = threading.Event()

    def for_role(self, role: str) -> RoleFaults:
        with self._lock:
            if role not in self._roles:
                self._roles[role] = RoleFaults(role, self.plan.for_role(role), self.log,
                                               self._bench_frozen)
            return self._roles[role]

    def add(self, spec: FaultSpec) -> None:
        """Plan one more fault from now on (its ``at_command`` counts from now)."""
        role_faults = self.for_role(spec.role)
        with role_faults._lock:
            armed = _Armed(spec)
            if spec.at_command is not None:
                armed.spec = spec.model_copy(
                    update={"at_command": role_faults.command_count + spec.at_command})
            role_faults._armed.append(armed)

    def freeze(self, role: str | None = None) -> None:
        """Make ``role`` (None: every instrument) ignore every message from now on."""
        if role is None:
            self._bench_frozen.set()
        else:
            self.for_role(role).frozen.set()

    def thaw(self) -> None:
        """End every freeze: the instruments answer again (messages sent meanwhile are lost)."""
        self._bench_frozen.clear()
        with self._lock:
            roles = list(self._roles.values())
        for role_faults in roles:
            role_faults.frozen.clear()

    def frozen(self, role: str) -> bool:
        """Whether ``role`` ignores messages now (its own freeze or the whole bench's)."""
        return self._bench_frozen.is_set() or self.for_role(role).frozen.is_set()


def garble(reply: bytes, seed: int = 0) -> bytes:
    """``reply`` with every byte replaced by punctuation (same length, never a newline)."""
    rng = random.Random(seed ^ len(reply))
    return bytes(rng.choice(_GARBLE_ALPHABET) for _ in reply)
