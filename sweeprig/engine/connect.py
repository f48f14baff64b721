"""Opening a bench: one transport and one generic driver per role, identified and limited.

Nothing here enables an output. :func:`open_bench` connects, checks each ``*IDN?`` against
its profile, reads the error queues empty, and narrows each driver's limits to the bench
file's safety limits, so a command above a limit is refused by the driver before it is sent,
whatever the engine asks.
"""

from __future__ import annotations

import contextlib
import functools
from collections.abc import Callable, Iterator, Mapping
from dataclasses import dataclass, field
from typing import Any

from sweeprig.clock import Clock, VirtualClock, WallClock
from sweeprig.engine.locks import BenchLock
from sweeprig.errors import InputError, InstrumentError, TransportError
from sweeprig.formats.bench import Bench
from sweeprig.instruments import (
    AnalyzerDriver,
    ChamberDriver,
    Driver,
    PowerMeterDriver,
    SimControlDriver,
    SourceDriver,
    SupplyDriver,
    SwitchDriver,
    make_driver,
)
from sweeprig.plan.instrument_limits import bench_bounds, role_profile
from sweeprig.transport.backend import bench_file_fix, bench_file_problem, choose_visa_library
from sweeprig.transport.base import Transaction, Transport
from sweeprig.transport.visa import VisaTransport

SOURCE_ROLES = ("rf", "rf2", "lo")
#: The roles whose status companions a run reads after every point (the runner marks a
#: point from them: the part's supply, the sources); another role of the same kind (the
#: noise source's supply) is not asked them: on a profile without compound messages each
#: would be an exchange a point for nothing.
COMPANION_ROLES = ("dc", *SOURCE_ROLES)


class OutputTripped(InstrumentError):
    """An output's protection tripped (its ``output_tripped`` flag): the run stops at once
    and is never retried (a retry would switch that output on into whatever tripped it)."""


#: What to do about a tripped output protection (the fix of every :class:`OutputTripped`),
#: before ``then`` (how the measurement goes on).
TRIPPED_FIX = ("find what tripped it (a shorted or oscillating part, power fed back into a "
               "generator, a wrong cable) before anything else; then clear the protection at "
               "the instrument (front panel, or OUTP:PROT:CLE) and {then}; follow your lab's "
               "rules for RF and supply faults")


@dataclass
class BenchDrivers:
    """The drivers of an open bench, by role (None where the bench has no such role)."""

    rf: SourceDriver | None = None
    rf2: SourceDriver | None = None
    lo: SourceDriver | None = None
    sa: AnalyzerDriver | None = None
    pm: PowerMeterDriver | None = None
    dc: SupplyDriver | None = None
    chamber: ChamberDriver | None = None
    switch: SwitchDriver | None = None
    simctl: SimControlDriver | None = None
    nsdc: SupplyDriver | None = None
    transports: dict[str, Transport] = field(default_factory=dict)
    startup_errors: dict[str, list[str]] = field(default_factory=dict)
    """Errors found in each instrument's queue when the bench was opened (role → texts)."""
    timebase_notes: list[str] = field(default_factory=list)
    """What the bench's ``[timebase]`` could not set or verify (sweeprig.engine.timebase)."""
    companion_notes: list[tuple[str, dict[str, Any]]] = field(default_factory=list)
    """Status companions an instrument refused at connect (left out for the run): a note and
    its details each (:meth:`~sweeprig.instruments.driver.Driver.check_companions`)."""

    def items(self) -> Iterator[tuple[str, Driver]]:
        """(role, driver) for every present role."""
        for role in ("rf", "rf2", "lo", "sa", "pm", "dc", "chamber", "switch", "simctl",
                     "nsdc"):
            driver = getattr(self, role)
            if driver is not None:
                yield role, driver

    def sources(self) -> Iterator[SourceDriver]:
        """Every signal source present."""
        for role in SOURCE_ROLES:
            driver = getattr(self, role)
            if driver is not None:
                yield driver

    def transactions(self) -> int:
        """SCPI exchanges so far, all instruments."""
        return sum(d.transactions for _, d in self.items())

    def close(self) -> None:
        """Close every transport (idempotent; never raises)."""
        for transport in self.transports.values():
            with contextlib.suppress(Exception):  # closing must not mask the real error
                transport.close()


def open_bench(
    bench: Bench,
    roles: Mapping[str, str],
    *,
    resources: Mapping[str, str] | None = None,
    clock: Clock | None = None,
    on_transaction: Callable[[str, Transaction], None] | None = None,
    lock: BenchLock | None = None,
    check_ready: bool = True,
) -> BenchDrivers:
    """Connect and identify the instruments the run needs.

    ``check_ready``: refuse a bench that is not fit to measure on (an output protection
    tripped, a setting an earlier user left: :func:`_refuse_tripped`,
    :func:`_refuse_left_settings`). Off only for ``sweeprig safe``, which must switch such a
    bench off above all.

    ``roles``: role → why it is needed (from the sequence); only these are opened (plus
    ``simctl`` when ``resources`` has it). ``resources`` overrides the bench file's resource
    strings (the in-process simulated bench fills them in). ``on_transaction(role, t)`` is
    called after every SCPI exchange (the bus log). Raises :class:`InputError` for a
    role the bench lacks, :class:`InstrumentError`/:class:`TransportError` for an instrument
    that does not answer or is not what its profile expects. On failure everything opened
    so far is closed again. ``lock``: the run's instrument locks; each instrument's identity
    (maker, model, serial) is added to it right after ``*IDN?``, so an instrument another run
    holds under another resource name is refused (:class:`BenchBusy`) before anything is
    sent to it but identification.
    """
    resources = dict(resources or {})
    drivers = BenchDrivers()
    wanted = list(roles)
    if "simctl" in resources or bench.role("simctl") is not None:
        wanted.insert(0, "simctl")  # first: its clock is the one every driver waits on
    library = _visa_library(bench)
    try:
        for role in wanted:
            if role == "simctl" and bench.role("simctl") is None:
                resource, profile_name = resources["simctl"], "sim-control"
                profile = role_profile(bench, role, profile_name)
            else:
                spec = bench.role(role)
                if spec is None:
                    raise InputError(
                        f"the bench has no role {role!r}, which the sequence needs "
                        f"({roles[role]})",
                        where=bench.where(("roles",)),
                        fix=f"add roles.{role} = {{ resource = \"...\", profile = \"...\" }}",
                    )
                resource = resources.get(role, spec.resource)
                profile = role_profile(bench, role)  # of the kind the role takes
            transport = VisaTransport(
                resource,
                visa_library=library,
                timeout_s=float(bench.bench.timeout),
                settings=profile.connection,
            )
            transport.on_transaction = (
                None if on_transaction is None else functools.partial(on_transaction, role)
            )
            drivers.transports[role] = transport
            driver = make_driver(profile, role, transport, clock=clock)
            if role not in COMPANION_ROLES:
                driver.status_companions = ()
            setattr(drivers, role, driver)
            if role == "simctl":
                clock = bench_clock(driver, clock)  # type: ignore[arg-type]
            stale = _identify(driver, lock)
            if stale:
                drivers.startup_errors[role] = stale
        _apply_bench_limits(bench, drivers)
        from sweeprig.engine.timebase import apply_timebase

        drivers.timebase_notes = apply_timebase(
            bench, dict(drivers.items()), clock if clock is not None else WallClock())
        for _role, driver in drivers.items():  # the flags read after every point, tried once
            drivers.companion_notes += driver.check_companions()
        if check_ready:
            _refuse_tripped(drivers)
            _refuse_left_settings(drivers)
    except BaseException:
        drivers.close()
        raise
    return drivers


def _refuse_tripped(drivers: BenchDrivers) -> None:
    """Refuse to start on a bench where an output's protection is tripped already (read at
    connect, before anything is set): whatever tripped it may still be there, and the run
    would switch that output on again. The operator clears it, by hand, once the cause is
    found."""
    for role, driver in drivers.items():
        if driver.companions_at_connect.get("output_tripped"):
            raise OutputTripped(
                f"role {role!r} has its output protection tripped (its output is off and "
                "stays off): a supply's over-voltage or over-current protection, or a "
                "generator's reverse-power protection, tripped before this run",
                where=driver.where(),
                fix=TRIPPED_FIX.format(then="start again"))


def _refuse_left_settings(drivers: BenchDrivers) -> None:
    """Refuse to start when an instrument has settings a previous user left that make every
    reading wrong (:attr:`~sweeprig.instruments.driver.Driver.left_setting_ops`: a source's
    level or frequency offset or modulation, an analyzer's reference level offset or
    amplitude corrections): every reading of the run would be off by them, with nothing to
    show for it. Read at connect, before anything is set; a query the instrument refuses is
    left out with a warning (:attr:`BenchDrivers.companion_notes`)."""
    problems: list[str] = []
    where = ""
    for role, driver in drivers.items():
        found, notes = driver.left_settings()
        drivers.companion_notes += notes
        problems += [f"role {role!r}: {text}" for text in found]
        where = where or (driver.where() if found else "")
    if problems:
        raise InstrumentError(
            "an instrument is not set as sweeprig needs it (left so by an earlier user?): "
            + "; ".join(problems),
            where=where,
            fix="put each named setting back at the instrument as said, then start again "
            "(sweeprig changes no setting it does not own)")


def bench_clock(simctl: SimControlDriver, clock: Clock | None) -> Clock | None:
    """The clock the drivers wait on when the bench has a simulator's control instrument
    (a bench served by ``sweeprig sim serve``): its instruments run on the simulator's virtual
    clock, so a driver polling for completion (``complete = { method = "event" }`` or
    ``"poll"``) on the wall clock would ask forever while simulated time stands still. A
    :class:`~sweeprig.clock.VirtualClock` given by the caller (the in-process simulated bench)
    is already the instruments' own clock and is kept."""
    if isinstance(clock, VirtualClock):
        return clock
    from sweeprig.engine.simclock import SimControlClock

    return SimControlClock(simctl)


def _visa_library(bench: Bench) -> str:
    """The VISA backend to open (see :mod:`sweeprig.transport.backend`); a bench naming a
    library file is refused here too, for a bench built without :func:`load_bench`."""
    problem = bench_file_problem(bench.bench.visa_library)
    if problem is not None:
        raise InputError(problem, where=bench.where(("bench", "visa_library")),
                         fix=bench_file_fix())
    return choose_visa_library(bench.bench.visa_library)


IDENTIFY_ATTEMPTS = 3
"""Tries at identifying an instrument whose link fails (timeout, garbled reply)."""


def _identify(driver: Driver, lock: BenchLock | None = None) -> list[str]:
    """``*IDN?`` checked against the profile, the instrument's identity locked (before even its
    error queue is read: it may be another run's), then the error queue drained; a failing
    link is reconnected and tried again. Returns the texts that were in the queue."""
    for attempt in range(1, IDENTIFY_ATTEMPTS + 1):
        try:
            driver.identify()
            if lock is not None:
                lock.hold_identity(driver.role, driver.idn)
            return [str(e) for e in driver.errors()]
        except InstrumentError:  # a garbled *IDN? looks like a wrong instrument: ask again
            if attempt == IDENTIFY_ATTEMPTS:
                raise
            with contextlib.suppress(TransportError):
                driver.transport.reconnect()
    raise AssertionError("unreachable")  # pragma: no cover


def _apply_bench_limits(bench: Bench, drivers: BenchDrivers) -> None:
    """Narrow the drivers' limits to the bench file's safety limits and the part's ratings
    (never widen), the same bounds the pre-flight check uses (each naming its origin)."""
    for role, driver in drivers.items():
        for op, bounds in bench_bounds(bench, role).items():
            for bound in bounds:
                driver.add_bound(op, bound)
