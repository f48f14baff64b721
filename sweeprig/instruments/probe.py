"""The conformance probe: which operations of a profile work on one instrument.

:func:`probe` drives every operation of a driver's profile once, safely: the RF output or
supply output is switched off first and verified off (the probe stops if it cannot be), and
is never switched on; every level stays at a conservative low value inside the limits in force
(the profile's, narrowed by a bench file's when one is given); a chamber's conditioning stays
off. After each step it reads the error queue (SCPI-99 vol. 2, SYSTem:ERRor, from memory),
reads a setting back where the profile can, and times the round trip. Each step gets a result
(``ok``, ``differs``, ``fail``, ``skipped``) and, when it is not ``ok``, a suggested fix that
names the profile key to change.

The result (:class:`ProbeReport`) is plain data, written as JSON for a bug report.
"""

from __future__ import annotations

import contextlib
import math
import time
from collections.abc import Callable
from dataclasses import asdict, dataclass, field, replace
from typing import Any, Literal

from sweeprig.errors import SweeprigError, TransportError
from sweeprig.instruments.driver import Driver, Value
from sweeprig.instruments.ops import UNIT_SYMBOL
from sweeprig.instruments.profile import Operation

Result = Literal["ok", "differs", "fail", "skipped"]

CAUTIONS: tuple[str, ...] = (
    "caution: the probe switches RF and supply outputs off and keeps them off, but it does "
    "send every command of the profile; connect the instrument to a load or a terminated "
    "port, not to a part you cannot afford to lose",
    "caution: a wrong profile can send a command the instrument reads differently; probe a "
    "new instrument before it is wired into a bench",
)

#: The value each setting is probed with, before it is clipped into the limits in force: low
#: levels, harmless frequencies (common practice, no source).
PROBE_VALUES: dict[str, Value] = {
    "frequency": 1e9,
    "power": -30.0,
    "centre": 1e9,
    "span": 1e6,
    "rbw": 10e3,
    "vbw": 10e3,
    "ref_level": 0.0,
    "attenuation": 30.0,  # more attenuation protects the analyzer's input
    "averages": 1,
    "points": 101,
    "voltage": 0.0,
    "current_limit": 0.01,
    "setpoint": 25.0,
    "ramp": 1.0,
    "channel": 1,
    "advance": 0.0,
}

#: On/off settings: the state they are probed in. Outputs and conditioning stay off.
PROBE_SWITCHES: dict[str, bool] = {
    "output": False,
    "noise_source": False,
    "control": False,
    "continuous": False,
    "rbw_auto": True,
    "attenuation_auto": True,
    "marker_on": True,
}

#: Common operations the probe runs first (in this order) or not as a step of their own.
_FIRST = ("identify", "clear", "reset")
_NOT_A_STEP = frozenset({"next_error"})
#: Probed right after the reset, before the other operations: a power meter's zeroing (every
#: output is off then, as zeroing needs; some meters refuse readings until zeroed).
_EARLY = ("zero",)


@dataclass(frozen=True)
class ProbeStep:
    """One operation as probed.

    ``sent``: the commands sent (as the driver rendered them). ``value``: what was set or
    passed. ``read_back``: the reply to the read-back or the query. ``errors``: the
    instrument's error-queue entries after the step. ``round_trip_ms``: wall-clock time of
    the step, ms.
    """

    op: str
    shape: str
    result: Result
    sent: tuple[str, ...] = ()
    value: str | None = None
    read_back: str | None = None
    errors: tuple[str, ...] = ()
    round_trip_ms: float | None = None
    detail: str = ""
    fix: str = ""


@dataclass(frozen=True)
class ProbeReport:
    """Every step, the identity, and whether the outputs were left off (verified)."""

    resource: str
    profile: str
    profile_file: str | None
    idn: str | None
    started_utc: str
    steps: tuple[ProbeStep, ...]
    outputs_off_verified: bool | None
    cautions: tuple[str, ...] = CAUTIONS
    limits: dict[str, list[float | None]] = field(default_factory=dict)

    @property
    def failed(self) -> tuple[ProbeStep, ...]:
        """The steps that failed."""
        return tuple(s for s in self.steps if s.result == "fail")

    def counts(self) -> dict[str, int]:
        """Steps per result."""
        out = {"ok": 0, "differs": 0, "fail": 0, "skipped": 0}
        for step in self.steps:
            out[step.result] += 1
        return out

    def as_json(self) -> dict[str, Any]:
        """A JSON-ready dict (for a bug report)."""
        data = asdict(self)
        data["counts"] = self.counts()
        data["format"] = "sweeprig-probe/1"
        return data


def _clip(driver: Driver, op: str, value: float) -> float:
    low, high = driver.limits(op)
    if low is not None:
        value = max(value, low)
    if high is not None:
        value = min(value, high)
    return value


def probe_value(driver: Driver, operation: Operation) -> Value | None:
    """The value the probe uses for ``operation`` (None: it takes none)."""
    spec = operation.spec
    if spec.value == "none":
        return None
    if spec.value == "bool":
        return PROBE_SWITCHES.get(spec.name, False)
    if spec.value == "choice":
        wanted = "real32" if driver.profile.has("trace_real32") else "ascii"
        return wanted if wanted in spec.choices else spec.choices[0]
    if spec.name == "marker_level":
        return float(driver.state().get("centre", 1e9))
    if spec.name == "closed":
        return int(driver.state().get("channel", 1))
    base = float(PROBE_VALUES.get(spec.name, 0.0))  # type: ignore[arg-type]
    value = _clip(driver, spec.name, base)  # a source level: never above the lowest maximum
    return math.ceil(value) if spec.value == "int" else value


def _fix_for_error(code: int, op: str, key: str, where: str) -> str:
    # SCPI-99 vol. 2, 21.8 (error/event numbers, from memory): -1xx command errors (-113
    # undefined header), -2xx execution errors (-222 data out of range), -4xx query errors
    if code == -113 or -119 <= code <= -110:
        return (f"the instrument does not know this header: this dialect spells it "
                f"differently; look it up in its manual and fix ops.{op}.{key} in {where}")
    if -199 <= code <= -100:
        return (f"the command's form or parameter is refused (a wrong separator, suffix or "
                f"token): fix ops.{op}.{key} (or its map) in {where}")
    if -299 <= code <= -200:
        return (f"the instrument could not carry it out (e.g. a value out of its range): "
                f"check ops.{op}.min/max and the probe value against its manual ({where})")
    if -499 <= code <= -400:
        return (f"a query problem (asked nothing, or interrupted): check ops.{op}.query in "
                f"{where}")
    return f"read the instrument's manual for error {code}; then fix ops.{op} in {where}"


def _shown(value: object) -> str:
    if isinstance(value, float):
        return format(value, ".9g")
    if isinstance(value, tuple):
        return ", ".join(_shown(v) for v in value)
    if hasattr(value, "shape"):
        return f"{getattr(value, 'size', '?')} values"
    return str(value)


def _agrees(operation: Operation, sent: Value, back: object) -> bool:
    if isinstance(sent, bool) or operation.spec.value == "choice":
        return back == sent
    if isinstance(back, int | float) and not isinstance(back, bool):
        return math.isclose(float(back), float(sent), rel_tol=1e-6, abs_tol=1e-9)
    return False


class _Recorder:
    """Wraps the driver's transport hook to collect what each step sent."""

    def __init__(self, driver: Driver) -> None:
        self.sent: list[str] = []
        transport = driver.transport
        # the guarded transport of a source passes every exchange to the one it wraps
        self._hooked = getattr(transport, "inner", transport)
        previous = self._hooked.on_transaction
        self._restore = previous

        def hook(transaction: Any) -> None:
            self.sent.append(transaction.sent)
            if previous is not None:
                previous(transaction)

        self._hooked.on_transaction = hook

    def take(self) -> tuple[str, ...]:
        out = tuple(self.sent)
        self.sent.clear()
        return out

    def close(self) -> None:
        self._hooked.on_transaction = self._restore


def probe(driver: Driver, *, clock: Callable[[], float] = time.perf_counter,
          started_utc: str = "") -> ProbeReport:
    """Probe every operation of ``driver``'s profile (see the module docstring)."""
    driver.single_units = True  # each operation alone: its own reply and its own errors
    profile = driver.profile
    where = str(profile.path) if profile.path else f"profile {profile.name!r}"
    steps: list[ProbeStep] = []
    recorder = _Recorder(driver)
    outputs_off: bool | None = None
    try:
        idn_step = _step(driver, recorder, clock, "identify", lambda: driver.identify(), where)
        steps.append(idn_step)
        if idn_step.result == "fail":
            return _report(driver, steps, None, started_utc)
        for op in ("clear", "reset"):
            if profile.has(op):
                steps.append(_step(driver, recorder, clock, op,
                                   lambda op=op: driver.do(op), where))
        driver.forget_state()
        if profile.has("output") and profile.kind in ("source", "supply"):
            outputs_off = _outputs_off(driver)
            if not outputs_off:
                steps.append(ProbeStep(
                    "output", "setting", "fail", recorder.take(),
                    detail="the output could not be verified off; the probe stopped",
                    fix=f"give ops.output a read-back query in {where}, and switch the "
                    "output off at the instrument; caution: RF or supply voltage may be on"))
                return _report(driver, steps, outputs_off, started_utc)
            recorder.take()
        early = [n for n in _EARLY if profile.has(n)]  # a meter that reads only once zeroed
        for name, operation in [*((n, profile.ops[n]) for n in early), *profile.ops.items()]:
            if name in _FIRST or name in _NOT_A_STEP or (name in early and any(
                    s.op == name for s in steps)):
                continue
            steps.append(_probe_op(driver, recorder, clock, operation, where))
        if profile.has("output") and profile.kind in ("source", "supply"):
            outputs_off = _outputs_off(driver)
            recorder.take()
    finally:
        recorder.close()
    return _report(driver, steps, outputs_off, started_utc)


def _report(driver: Driver, steps: list[ProbeStep], outputs_off: bool | None,
            started_utc: str) -> ProbeReport:
    limits = {op: list(driver.limits(op)) for op, o in driver.profile.ops.items()
              if o.spec.value in ("float", "int")}
    return ProbeReport(
        resource=driver.resource, profile=driver.profile.name,
        profile_file=str(driver.profile.path) if driver.profile.path else None,
        idn=driver.idn, started_utc=started_utc, steps=tuple(steps),
        outputs_off_verified=outputs_off, limits=limits)


def _outputs_off(driver: Driver) -> bool:
    """Switch the output off and read it back (False when that cannot be shown)."""
    try:
        driver.set_value("output", False, force=True)
        if driver.profile.op("output").read_back is None:
            return False
        return driver.read_back("output") is False
    except SweeprigError:
        return False


def _errors(driver: Driver) -> tuple[tuple[str, ...], int | None]:
    try:
        found = driver.errors()
    except SweeprigError as exc:
        return (f"error queue unreadable: {exc.what}",), None
    return tuple(str(e) for e in found), (found[0].code if found else None)


def _recover(driver: Driver) -> None:
    """After a lost reply: reconnect, so that a late answer is not read as the next one."""
    with contextlib.suppress(SweeprigError):
        driver.transport.reconnect()
    driver.forget_state()


def _step(driver: Driver, recorder: _Recorder, clock: Callable[[], float], op: str,
          action: Callable[[], object], where: str, key: str = "command") -> ProbeStep:
    shape = driver.profile.op(op).spec.shape
    start = clock()
    try:
        reply = action()
    except SweeprigError as exc:
        sent = recorder.take()
        if isinstance(exc, TransportError):
            _recover(driver)
        errors, _ = _errors(driver)
        recorder.take()
        return ProbeStep(op, shape, "fail", sent, errors=errors,
                         round_trip_ms=(clock() - start) * 1e3, detail=exc.what,
                         fix=_fix_for_exception(exc, op, shape, where))
    elapsed_ms = (clock() - start) * 1e3
    sent = recorder.take()
    errors, code = _errors(driver)
    recorder.take()
    if errors:
        return ProbeStep(op, shape, "fail", sent, read_back=None if reply is None else
                         _shown(reply), errors=errors, round_trip_ms=elapsed_ms,
                         detail=f"the instrument answered {errors[0]} to {'; '.join(sent)}",
                         fix=_fix_for_error(code or 0, op, key, where))
    return ProbeStep(op, shape, "ok", sent, read_back=None if reply is None else _shown(reply),
                     round_trip_ms=elapsed_ms)


def _fix_for_exception(exc: SweeprigError, op: str, shape: str, where: str) -> str:
    if isinstance(exc, TransportError):
        if "timeout" in exc.what or "no reply" in exc.what:
            return (f"no reply: the instrument may not know this query, or it needs longer; "
                    f"check ops.{op}.query (and timeout_s) in {where}")
        return (f"the reply does not read as expected: check ops.{op}.query and ops.{op}.reply "
                f"in {where}")
    return exc.fix or f"check ops.{op} in {where}"


def _probe_op(driver: Driver, recorder: _Recorder, clock: Callable[[], float],
              operation: Operation, where: str) -> ProbeStep:
    name, shape = operation.spec.name, operation.spec.shape
    try:
        value = probe_value(driver, operation)
    except SweeprigError as exc:  # pragma: no cover - the values are clipped into the limits
        return ProbeStep(name, shape, "skipped", detail=exc.what)
    if shape == "setting":
        assert value is not None
        step = replace(_step(driver, recorder, clock, name,
                             lambda: driver.set_value(name, value, force=True) and None, where),
                       value=_shown(value))
        if step.result != "ok":
            return step
        if operation.read_back is None:
            return replace(step, detail="no read-back query in the profile")
        got: list[object] = []
        back = _step(driver, recorder, clock, name,
                     lambda: got.append(driver.read_back(name)), where, key="query")
        sent = step.sent + back.sent
        if back.result != "ok" or not got:
            return replace(back, sent=sent, value=_shown(value),
                           round_trip_ms=step.round_trip_ms)
        shown = _shown(got[0])
        if _agrees(operation, value, got[0]):
            return replace(step, sent=sent, read_back=shown)
        unit = UNIT_SYMBOL.get(operation.spec.unit, "")
        return replace(
            step, result="differs", sent=sent, read_back=shown,
            detail=f"set {_shown(value)} {unit}".rstrip() + f", read back {shown}",
            fix="the instrument may round the value to its own steps (then all is well), or "
            f"take another unit: if it is off by a power of ten, set ops.{name}.unit "
            f"(e.g. \"kHz\") in {where}; if on/off reads wrong, check ops.{name}.map")
    if shape == "action":
        return _with_value(_step(driver, recorder, clock, name,
                                 lambda: driver.do(name, value), where), value)
    if name in ("trace_ascii", "trace_real32") and driver.profile.has("trace_format"):
        wanted = "real32" if name == "trace_real32" else "ascii"
        with contextlib.suppress(SweeprigError):
            driver.set_value("trace_format", wanted)
            recorder.take()
    return _with_value(_step(driver, recorder, clock, name, lambda: driver.ask(name, value),
                             where, key="query"), value)


def _with_value(step: ProbeStep, value: Value | None) -> ProbeStep:
    return step if value is None else replace(step, value=_shown(value))
