"""The bench's safe state, reached on every exit path.

RF off on every source first (the DUT and the analyzer input are protected before anything
else), then the supply to its safe setting, then the chamber to its idle set point. Each step
is tried on its own: an instrument that fails to answer does not stop the others from being
made safe. Signals are held off while this runs so a second Ctrl-C cannot interrupt it.
"""

from __future__ import annotations

import signal
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass

from sweeprig.engine.connect import BenchDrivers
from sweeprig.formats.bench import Bench

_HELD = tuple(s for s in (signal.SIGINT, signal.SIGTERM, getattr(signal, "SIGHUP", None))
              if s is not None)  # Windows has no SIGHUP


@dataclass(frozen=True)
class SafeOutcome:
    """What making the bench safe did: steps done and steps that failed (with the error)."""

    done: tuple[str, ...]
    failed: tuple[tuple[str, str], ...]

    @property
    def ok(self) -> bool:
        return not self.failed


def make_safe(
    drivers: BenchDrivers,
    *,
    supply_safe_v: float | None,
    chamber_idle_c: float | None,
    log: Callable[[str], None] = lambda _msg: None,
) -> SafeOutcome:
    """Put the bench in its safe state, best effort, every step independently.

    ``supply_safe_v``: None = supply output off; a voltage = output stays on at that voltage.
    ``chamber_idle_c``: None = chamber control off; a temperature = idle set point.
    """
    done: list[str] = []
    failed: list[tuple[str, str]] = []

    def step(name: str, action: Callable[[], object]) -> None:
        try:
            action()
        except Exception as exc:
            failed.append((name, str(exc).splitlines()[0]))
            log(f"safe state: {name} FAILED: {exc}")
        else:
            done.append(name)

    with _signals_held():
        for role in ("rf", "rf2", "lo"):
            source = getattr(drivers, role)
            if source is not None:
                step(f"{role} RF off", lambda s=source: _rf_off(s))
        if drivers.dc is not None:
            dc = drivers.dc
            if supply_safe_v is None:
                step("supply output off", lambda: _supply_off(dc))
            else:
                step(f"supply to {supply_safe_v:g} V", lambda: _supply_to(dc, supply_safe_v))
        if drivers.chamber is not None:
            chamber = drivers.chamber
            step(
                "chamber idle" if chamber_idle_c is None else f"chamber to {chamber_idle_c:g} degC",
                lambda: chamber.safe(chamber_idle_c),
            )
    return SafeOutcome(tuple(done), tuple(failed))


def _rf_off(source) -> None:  # type: ignore[no-untyped-def]
    # Always sent (force): the driver's cache must not suppress the one command that matters.
    source.set_value("output", False, force=True)


def _supply_off(dc) -> None:  # type: ignore[no-untyped-def]
    dc.set_value("output", False, force=True)


def _supply_to(dc, volts: float) -> None:  # type: ignore[no-untyped-def]
    dc.set_value("voltage", volts, force=True)


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
                    log: Callable[[str], None] = lambda _msg: None) -> SafeOutcome:
    """Open every instrument of ``bench`` that answers and put the bench in its safe state.

    For use after a run was killed (power cut, SIGKILL) and could not do it itself. Each role
    is opened on its own, so one dead instrument does not keep the others unsafe; a role that
    cannot be opened is reported as a failed step. Refuses (:class:`BenchBusy`) while a live
    run holds the bench.
    """
    from sweeprig.engine.connect import open_bench
    from sweeprig.engine.locks import BenchBusy, BenchLock

    roles = [r for r in ("rf", "rf2", "lo", "dc", "chamber") if bench.role(r) is not None]
    resources = dict(resources or {})
    lock_resources = tuple(resources.get(r, bench.role(r).resource) for r in roles)  # type: ignore[union-attr]
    failed: list[tuple[str, str]] = []
    done: list[str] = []
    with BenchLock(lock_resources, "sweeprig safe") as lock:
        for role in roles:
            try:
                drivers = open_bench(bench, {role: "safe state"}, resources={
                    k: v for k, v in resources.items() if k == role}, lock=lock)
            except BenchBusy:
                raise  # a live run holds this instrument under another name
            except Exception as exc:
                failed.append((f"{role}: open", str(exc).splitlines()[0]))
                log(f"{role}: cannot open: {exc}")
                continue
            try:
                state = bench.safe_state
                outcome = make_safe(
                    drivers,
                    supply_safe_v=None if state.supply in (None, "off") else float(state.supply),
                    chamber_idle_c=None if state.chamber in (None, "off") else float(state.chamber),
                    log=log,
                )
            finally:
                drivers.close()
            done.extend(outcome.done)
            failed.extend(outcome.failed)
    return SafeOutcome(tuple(done), tuple(failed))
