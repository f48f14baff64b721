"""The bench's safe state, reached on every exit path and proven by reading it back.

RF off on every source first (the DUT and the analyzer input are protected before anything
else), then the noise source's drive off (its supply output, or the analyzer's own noise-source
output when its profile has one), then the supply to its safe setting, then the chamber to its
idle set point. Each step is one instrument: the safe-state command is sent (always, whatever
the driver's cache says), the instrument is asked to finish (``*OPC?``), its error queue is
read, and last the setting is **read back** and compared with the safe value (last, so that no
message of ours can undo what the read-back showed). A step whose read-back disagrees, whose
instrument does not answer, or whose error queue holds errors is tried again (reconnecting
first when the link failed), up to :data:`SAFE_ATTEMPTS` times. Every instrument gets its first
attempt before any is retried, so one hung instrument does not delay the others.

Nothing is called safe that was not read back: a step that never verifies is reported with
the instrument (role and resource), what it still reports (or that it did not answer) and
what to do by hand. Signals are held off while this runs so a second Ctrl-C cannot
interrupt it.
"""

from __future__ import annotations

import math
import signal
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass

from sweeprig.engine.connect import BenchDrivers
from sweeprig.errors import SweeprigError, TransportError
from sweeprig.formats.bench import Bench
from sweeprig.instruments.driver import Driver

_HELD = tuple(s for s in (signal.SIGINT, signal.SIGTERM, getattr(signal, "SIGHUP", None))
              if s is not None)  # Windows has no SIGHUP

SAFE_ATTEMPTS = 3
"""Tries per instrument (the first and two more) before its safe state is declared unproven."""

VOLTAGE_TOLERANCE_V = 0.01
"""A supply voltage read back within this of the safe voltage agrees (common practice, no
source: about one display digit of a bench supply)."""

TEMPERATURE_TOLERANCE_C = 0.1
"""A chamber set point read back within this of the idle set point agrees (common practice,
no source: the display resolution of a chamber controller)."""

CAUTION = ("follow your lab's safety rules (RF power, supply and chamber hazards) before "
           "touching cables, the part or the chamber door")

_OPENED = "open"
"""Step name of an instrument that could not even be opened (``sweeprig safe``)."""


@dataclass(frozen=True)
class SafeCheck:
    """One instrument's safe-state step and what reading it back showed.

    ``step``: what was asked ("RF off", "supply output off", "chamber to 25 degC").
    ``verified``: the read-back agreed, the instrument completed and its error queue was
    empty. ``reported``: what the instrument last reported ("RF output ON", "did not
    answer"). ``problem``: why it is not verified. ``by_hand``: what to do about it.
    """

    role: str
    resource: str
    step: str
    verified: bool
    reported: str
    attempts: int
    problem: str | None = None
    by_hand: str | None = None

    @property
    def name(self) -> str:
        """``rf RF off``, ``supply output off``, ``chamber to 25 degC``."""
        return self.step if self.role in ("dc", "chamber") else f"{self.role} {self.step}"

    def message(self) -> str:
        """One paragraph for the terminal and the log (empty for a verified step)."""
        if self.verified:
            return ""
        return (f"role {self.role!r} ({self.resource}): {self.step} NOT verified after "
                f"{self.attempts} attempt(s): it {_reports(self.reported)}"
                + (f" ({self.problem})" if self.problem else "")
                + (f". By hand: {self.by_hand}" if self.by_hand else ""))


NO_ANSWER = "did not answer"
NO_USABLE_ANSWER = "gave no usable answer"


def _reports(reported: str) -> str:
    if reported in (NO_ANSWER, NO_USABLE_ANSWER):
        return reported
    return f"still reports {reported}"


@dataclass(frozen=True)
class SafeOutcome:
    """What making the bench safe did.

    ``done``: steps verified by read-back; ``failed``: (step, message) of steps that were
    not; ``checks``: every step in detail. ``ok`` only when nothing failed.
    """

    done: tuple[str, ...]
    failed: tuple[tuple[str, str], ...]
    checks: tuple[SafeCheck, ...] = ()

    @property
    def ok(self) -> bool:
        return not self.failed

    @classmethod
    def from_checks(cls, checks: list[SafeCheck] | tuple[SafeCheck, ...]) -> SafeOutcome:
        return cls(
            done=tuple(c.name for c in checks if c.verified),
            failed=tuple((c.name, c.message()) for c in checks if not c.verified),
            checks=tuple(checks),
        )

    def details(self) -> dict[str, dict[str, object]]:
        """Step → what was found, for the run's events (JSON-ready)."""
        return {c.name: {"resource": c.resource, "verified": c.verified,
                         "reported": c.reported, "attempts": c.attempts,
                         "problem": c.problem, "by_hand": c.by_hand} for c in self.checks}


@dataclass(frozen=True)
class _Expect:
    """One read-back: setting ``op`` must be ``want`` (within ``tolerance`` for numbers)."""

    op: str
    want: bool | float
    label: str
    unit: str = ""
    tolerance: float = 0.0

    def show(self, value: object) -> str:
        if isinstance(value, bool):
            return f"{self.label} {'ON' if value else 'off'}"
        if isinstance(value, float):
            return f"{self.label} {value:g}{self.unit}"
        return f"{self.label} {value!r}"

    def agrees(self, value: object) -> bool:
        if isinstance(self.want, bool):
            return isinstance(value, bool) and value is self.want
        return (isinstance(value, float) and math.isfinite(value)
                and abs(value - self.want) <= self.tolerance)


@dataclass(frozen=True)
class _Step:
    role: str
    driver: Driver
    step: str
    send: Callable[[], None]
    expect: tuple[_Expect, ...]
    by_hand: str


@dataclass(frozen=True)
class _Try:
    verified: bool
    reported: str
    problem: str | None
    link_failed: bool


def make_safe(
    drivers: BenchDrivers,
    *,
    supply_safe_v: float | None,
    chamber_idle_c: float | None,
    log: Callable[[str], None] = lambda _msg: None,
    attempts: int = SAFE_ATTEMPTS,
) -> SafeOutcome:
    """Put the bench in its safe state and prove it by reading every step back.

    ``supply_safe_v``: None = supply output off; a voltage = output stays on at that voltage.
    ``chamber_idle_c``: None = chamber control off; a temperature = idle set point (control
    on). ``attempts``: tries per instrument. Never raises for an instrument's failure: it is
    in the outcome's ``failed`` steps.
    """
    steps = _steps(drivers, supply_safe_v, chamber_idle_c)
    with _signals_held():
        return SafeOutcome.from_checks(_run_steps(steps, log, max(1, attempts)))


def _run_steps(steps: list[_Step], log: Callable[[str], None], attempts: int) -> list[SafeCheck]:
    last: dict[int, _Try] = {}
    tries: dict[int, int] = {}
    pending = list(range(len(steps)))
    for attempt in range(1, attempts + 1):
        still: list[int] = []
        for index in pending:
            step = steps[index]
            if attempt > 1:  # a fresh session: a reply left over from a query cut short (a
                _reconnect(step.driver, log)  # stop signal, a timeout) cannot shift the next
            result = _attempt(step)
            last[index], tries[index] = result, attempt
            if not result.verified:
                log(f"safe state: {step.role} {step.step}: attempt {attempt} of {attempts} "
                    f"not verified: {_reports(result.reported)}"
                    + (f" ({result.problem})" if result.problem else ""))
                still.append(index)
        pending = still
        if not pending:
            break
    checks = []
    for index, step in enumerate(steps):
        result = last[index]
        checks.append(SafeCheck(
            role=step.role, resource=_resource(step.driver), step=step.step,
            verified=result.verified, reported=result.reported, attempts=tries[index],
            problem=None if result.verified else result.problem,
            by_hand=None if result.verified else step.by_hand,
        ))
    return checks


def _attempt(step: _Step) -> _Try:
    """Send, wait for completion, read the error queue, read back (last). Never raises."""
    driver = step.driver
    shown: list[str] = []
    agree = True

    def reported(default: str) -> str:
        return ", ".join(shown) if shown else default

    try:
        step.send()
        if not driver.ask("operation_complete"):
            return _Try(False, reported(NO_USABLE_ANSWER), "*OPC? did not answer 1", False)
        errors = driver.errors()
        # The read-back comes last: nothing sent after it can undo what it showed.
        for expect in step.expect:
            value = driver.read_back(expect.op)
            shown.append(expect.show(value))
            agree = agree and expect.agrees(value)
    except TransportError as exc:
        return _Try(False, reported(NO_ANSWER), _first_line(exc), True)
    except Exception as exc:  # a garbled reply, a driver fault: never stop the other steps
        return _Try(False, reported(NO_USABLE_ANSWER), _first_line(exc), True)
    if not agree:
        return _Try(False, reported(""), "the read-back disagrees with the safe state", False)
    if errors:
        texts = "; ".join(str(e) for e in errors)
        return _Try(False, reported(""), f"its error queue holds: {texts}", False)
    return _Try(True, reported(""), None, False)


def _reconnect(driver: Driver, log: Callable[[str], None]) -> None:
    driver.forget_state()
    try:
        driver.transport.reconnect()
    except Exception as exc:
        log(f"safe state: {driver.role}: reconnect failed: {_first_line(exc)}")


def _first_line(exc: BaseException) -> str:
    text = exc.what if isinstance(exc, SweeprigError) else str(exc)
    where = exc.where if isinstance(exc, SweeprigError) else None
    line = (text.splitlines() or [type(exc).__name__])[0]
    return f"{line} [{where}]" if where else line


def _resource(driver: Driver) -> str:
    try:
        return str(driver.resource)
    except Exception:
        return "resource unknown"


def _steps(drivers: BenchDrivers, supply_safe_v: float | None,
           chamber_idle_c: float | None) -> list[_Step]:
    steps: list[_Step] = []
    for role in ("rf", "rf2", "lo"):
        source = getattr(drivers, role)
        if source is not None:
            steps.append(_Step(
                role, source, "RF off",
                send=lambda s=source: s.set_value("output", False, force=True),
                expect=(_Expect("output", False, "RF output"),),
                by_hand=f"switch the RF output of role {role!r} ({_resource(source)}) off at "
                "its front panel, or switch the source off; check with a power meter or the "
                f"analyzer that no RF reaches the part; {CAUTION}",
            ))
    nsdc = drivers.nsdc
    if nsdc is not None:
        steps.append(_Step(
            "nsdc", nsdc, "noise-source drive off",
            send=lambda: nsdc.set_value("output", False, force=True),
            expect=(_Expect("output", False, "output"),),
            by_hand=f"switch the output of the supply of role 'nsdc' ({_resource(nsdc)}) that "
            f"drives the noise source off at its front panel; {CAUTION}",
        ))
    sa = drivers.sa
    if sa is not None and sa.profile.has("noise_source"):  # its own noise-source drive output
        steps.append(_Step(
            "sa", sa, "noise-source output off",
            send=lambda: sa.set_value("noise_source", False, force=True),
            expect=(_Expect("noise_source", False, "noise-source output"),),
            by_hand=f"switch the noise-source output of the analyzer of role 'sa' "
            f"({_resource(sa)}) off at its front panel, or unplug the noise source's drive "
            f"cable; {CAUTION}",
        ))
    dc = drivers.dc
    if dc is not None:
        place = f"the supply of role 'dc' ({_resource(dc)})"
        if supply_safe_v is None:
            steps.append(_Step(
                "dc", dc, "supply output off",
                send=lambda: dc.set_value("output", False, force=True),
                expect=(_Expect("output", False, "output"),),
                by_hand=f"switch the output of {place} off at its front panel; check with a "
                f"meter that the part's supply pin is at 0 V; {CAUTION}",
            ))
        else:
            volts = float(supply_safe_v)
            steps.append(_Step(
                "dc", dc, f"supply to {volts:g} V",
                send=lambda: dc.set_value("voltage", volts, force=True),
                expect=(_Expect("voltage", volts, "voltage set to", " V",
                                VOLTAGE_TOLERANCE_V),),
                by_hand=f"set {place} to {volts:g} V at its front panel (or switch its output "
                f"off); check the voltage at the part with a meter; {CAUTION}",
            ))
    chamber = drivers.chamber
    if chamber is not None:
        place = f"the chamber of role 'chamber' ({_resource(chamber)})"
        if chamber_idle_c is None:
            steps.append(_Step(
                "chamber", chamber, "chamber idle",
                send=lambda: chamber.safe(None),
                expect=(_Expect("control", False, "conditioning"),),
                by_hand=f"switch the conditioning of {place} off at its controller; check the "
                f"air temperature before opening the door (frost, heat); {CAUTION}",
            ))
        else:
            idle = float(chamber_idle_c)
            steps.append(_Step(
                "chamber", chamber, f"chamber to {idle:g} degC",
                send=lambda: chamber.safe(idle),
                expect=(_Expect("setpoint", idle, "set point", " degC",
                                TEMPERATURE_TOLERANCE_C),
                        _Expect("control", True, "conditioning")),
                by_hand=f"set {place} to {idle:g} degC at its controller; check the air "
                f"temperature before opening the door (frost, heat); {CAUTION}",
            ))
    return steps


@contextmanager
def _signals_held() -> Iterator[None]:
    """Ignore SIGINT/SIGTERM/SIGHUP for the duration (main thread only)."""
    previous = {}
    try:
        for sig in _HELD:
            try:
                previous[sig] = signal.signal(sig, signal.SIG_IGN)
            except ValueError:  # not the main thread
                break
        yield
    finally:
        for sig, handler in previous.items():
            signal.signal(sig, handler)


def make_bench_safe(bench: Bench, *, resources: dict[str, str] | None = None,
                    log: Callable[[str], None] = lambda _msg: None,
                    attempts: int = SAFE_ATTEMPTS) -> SafeOutcome:
    """Open every instrument of ``bench`` that answers, put the bench in its safe state and
    read it back (as :func:`make_safe`).

    For use after a run was killed (power cut, SIGKILL) and could not do it itself. Each role
    is opened on its own, so one dead instrument does not keep the others unsafe; a role that
    cannot be opened is a failed step ("did not answer"). Refuses (:class:`BenchBusy`) while
    a live run holds the bench.
    """
    from sweeprig.engine.connect import open_bench
    from sweeprig.engine.locks import BenchBusy, BenchLock

    analyzer_drives = bench.noise_source is not None and bench.noise_drive_role == "sa"
    roles = [r for r in ("rf", "rf2", "lo", "nsdc", "sa", "dc", "chamber")
             if bench.role(r) is not None and (r != "sa" or analyzer_drives)]
    resources = dict(resources or {})
    lock_resources = tuple(resources.get(r, bench.role(r).resource) for r in roles)  # type: ignore[union-attr]
    unopened: list[SafeCheck] = []
    drivers = BenchDrivers()
    with BenchLock(lock_resources, "sweeprig safe") as lock:
        try:
            for role in roles:
                resource = resources.get(role, bench.role(role).resource)  # type: ignore[union-attr]
                try:
                    # never refused for what would refuse a run (a tripped output, a setting
                    # left): this is what switches such a bench off
                    opened = open_bench(bench, {role: "safe state"}, resources={
                        k: v for k, v in resources.items() if k == role}, lock=lock,
                        check_ready=False)
                except BenchBusy:
                    raise  # a live run holds this instrument under another name
                except Exception as exc:
                    log(f"{role}: cannot open: {exc}")
                    unopened.append(_unopened(role, resource, exc))
                    continue
                setattr(drivers, role, getattr(opened, role))
                for other, transport in opened.transports.items():  # closed at the end
                    drivers.transports[role if other == role else f"{role}/{other}"] = transport
            state = bench.safe_state
            outcome = make_safe(
                drivers,
                supply_safe_v=None if state.supply in (None, "off") else float(state.supply),
                chamber_idle_c=None if state.chamber in (None, "off") else float(state.chamber),
                log=log, attempts=attempts,
            )
        finally:
            drivers.close()
    checks = {c.role: c for c in (*outcome.checks, *unopened)}
    return SafeOutcome.from_checks([checks[r] for r in roles if r in checks])


def _unopened(role: str, resource: str, exc: BaseException) -> SafeCheck:
    what = {"rf": "RF off", "rf2": "RF off", "lo": "RF off", "dc": "supply safe",
            "nsdc": "noise-source drive off", "sa": "noise-source output off",
            "chamber": "chamber idle"}[role]
    if role in ("rf", "rf2", "lo"):
        hand = (f"switch the RF output of role {role!r} ({resource}) off at its front panel, "
                "or switch the source off")
    elif role in ("dc", "nsdc"):
        hand = (f"switch the output of the supply of role {role!r} ({resource}) off at its "
                "front panel")
    elif role == "sa":
        hand = (f"switch the noise-source output of the analyzer of role 'sa' ({resource}) off "
                "at its front panel, or unplug the noise source's drive cable")
    else:
        hand = f"put the chamber of role 'chamber' ({resource}) in its idle state at its controller"
    return SafeCheck(role=role, resource=resource, step=what, verified=False,
                     reported=NO_ANSWER, attempts=1,
                     problem=f"could not be opened: {_first_line(exc)}",
                     by_hand=f"{hand}; check the instrument's connection; {CAUTION}")
