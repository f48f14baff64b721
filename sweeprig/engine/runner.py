"""The run loop: points in plan order, each applied, read and committed to the store.

Order of work for every point (the plan already put slow settings outermost):

1. chamber set point (only when it changes): set, wait until the DUT probe is within the
   tolerance, then soak; RF is off while the temperature moves;
2. supply voltage (when it changes), output on;
3. LO, RF and RF2 frequency and level: source setting = DUT-plane power + path loss; a
   setting the instrument already has is not sent again (the drivers' cache);
4. RF outputs on, then the settling time if anything changed, counted from the sources'
   completion replies and waited out just before the next message to any instrument
   (:class:`SettleWait`: building that message runs inside the settling time);
5. each reading (analyzer: route the switch, configure, sweep, marker at the product and at
   a noise offset, overload flag; power meter; supply current); levels are referred back to
   the DUT port planes by adding the path loss; with a bench ``[timebase]`` the product is
   searched for on the trace read for the floor, within the offset the references explain,
   aimed by the offsets found before (:meth:`Runner._aim`, :mod:`sweeprig.plan.search_window`);
6. the point and all its readings are written in one transaction, once its status is
   read (below); the commit waits for the next point's settling time (step 4 of that
   point), where it costs the bench nothing; a chamber move or the end of the points
   reads the status and commits at once; a fault or a stop before the status was read
   leaves the point to be measured again (by the recovery, or by ``sweeprig resume``).

The error queue of every instrument configured in a block is drained after the block, and
every instrument's event status register is read before a point is committed (at the
point's end where its last exchange carried it, and for the chamber; for the others, the
sources and the supply, as the first unit of the next point's settings message or a bare
``*ESR?`` beside it: :meth:`Runner._confirm_held`): a power-on bit means the instrument
reset itself during the point, so the point is measured again.

Faults (:class:`RecoveryPolicy`): a point that fails — timeout, dropped connection, garbled
reply, instrument reset, error in the queue — is measured again from scratch after the bench
is recovered (a timed-out query's session was device-cleared and resynchronised by the
transport, so it gets ``*CLS`` and is recorded as ``device_clear``; each instrument probed
with ``*ESR?``; a dead link is reconnected with
backoff; cached settings are forgotten so everything is sent again; supply and chamber set
points are restored). An error in the queue follows the policy: ``retry`` (default),
``skip`` (record why and go on) or ``stop``. Every fault and what was done is written to the
run store's events. When the engine gives up it raises :class:`GaveUp`; the caller puts the
bench in its safe state (:mod:`sweeprig.engine.safe`) and marks the run aborted.

A store failure (:class:`~sweeprig.errors.StoreError`: the store's file or folder gone or
replaced, the disk full, the file read-only) is not an instrument fault and is never retried:
it ends the point loop at once, since nothing measured after it could be kept.
"""

from __future__ import annotations

import math
import time
from collections import deque
from collections.abc import Callable, Iterable, Mapping
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np

from sweeprig.clock import Clock, WallClock
from sweeprig.engine.connect import SOURCE_ROLES, TRIPPED_FIX, BenchDrivers, OutputTripped
from sweeprig.engine.eta import EtaTracker
from sweeprig.engine.noise_floor import MASK_HALF_WIDTH_RBW, NoiseFloor, estimate_noise_floor
from sweeprig.errors import InputError, InstrumentError, StoreError, TransportError
from sweeprig.formats.bench import Bench
from sweeprig.formats.pathloss import PathLoss
from sweeprig.formats.sequence import AdaptiveSoak, Sequence
from sweeprig.instruments import AnalyzerDriver, ChamberDriver, Driver, SourceDriver
from sweeprig.instruments.driver import Pending
from sweeprig.instruments.source import UNLEVELED_SOURCES
from sweeprig.instruments.supply import SUPPLY_LIMITED, supply_limited
from sweeprig.plan import search_window as sw
from sweeprig.plan.duration import soak_range_s
from sweeprig.plan.expand import Point
from sweeprig.plan.frequency_error import reference_coefficients
from sweeprig.plan.offset_agreement import DISAGREE_K, disagreeing, predicted_offset_hz
from sweeprig.plan.readings import Reading
from sweeprig.plan.search_window import Found
from sweeprig.store.base import PointRecord, ReadingRecord, RunStore, utc_now
from sweeprig.transport.base import ReplyTimeout

#: Found offsets remembered for aiming the next search.
OFFSET_MEMORY = 40
CHAMBER_POLL_S = 10.0
#: Wall seconds between heartbeats while the run waits (chamber, soak): a live run's heartbeat
#: stays fresh however long a soak lasts (another host calls a run interrupted after 120 s).
WAIT_HEARTBEAT_S = 15.0
#: Longest single sleep during a soak, bench seconds (so heartbeats and signals are timely).
WAIT_SLICE_S = 5.0
"""How often the DUT probe temperature is read while waiting for a set point, s."""
CHAMBER_TIMEOUT_S = 4 * 3600.0
"""Give up waiting for a set point after this long, s."""


PON_BIT = 0x80
"""IEEE 488.2 standard event status register bit 7: power on."""

#: A reading's ``extra`` ``status_flags`` entry: the analyzer flagged the reading
#: uncalibrated (the reduction flags its figures ``analyzer_uncalibrated``).
ANALYZER_UNCALIBRATED = "analyzer_uncalibrated"
#: The flag the reduction gives the figures of a point whose DUT probe read outside the
#: temperature tolerance of its set point (the key of the runner's one event about it).
TEMPERATURE_OFF = "temperature_off"

#: The point record's ``extra`` key listing the roles that reported their 10 MHz reference
#: unlocked at the point (the reduction flags its figures ``reference_unlocked``).
REFERENCE_UNLOCKED = "reference_unlocked"

#: What the run says once, in its events, when a point is first marked: (event kind, text
#: after "point N: 'role'").
_MARK_EVENTS: dict[str, tuple[str, str]] = {
    UNLEVELED_SOURCES: (
        "source", "reports its output not leveled: it delivers less than its setting, so "
        "the part got less drive than planned; check the path losses and the source's "
        "maximum leveled output at these frequencies (the figures of such points are flagged "
        "source_unleveled)"),
    REFERENCE_UNLOCKED: (
        "timebase", "reports its 10 MHz reference unlocked: it runs on its own crystal, so "
        "its frequencies are off by that crystal's error and a narrow-RBW reading can miss "
        "the product; check the house reference, its distribution and the cables (the "
        "figures of such points are flagged reference_unlocked)"),
}


@dataclass(frozen=True)
class RecoveryPolicy:
    """What the engine does when an instrument misbehaves.

    ``on_error``: an error in an instrument's queue after configuration — ``retry`` the
    point, ``skip`` it (recorded) once the retries are spent, or ``stop`` the run at once.
    ``point_attempts``: measurements of one point before giving up (or skipping).
    ``reconnect_attempts``: reconnections of one instrument per recovery; ``backoff_s``: wait
    before the first, doubled for each next one (bench-clock seconds).
    ``reset_check``: read every instrument's event status before committing a point.
    """

    on_error: str = "retry"
    point_attempts: int = 3
    reconnect_attempts: int = 4
    backoff_s: float = 0.5
    reset_check: bool = True


class InstrumentReset(InstrumentError):
    """An instrument's power-on bit was set: it reset itself since the last check."""


class GaveUp(InstrumentError):
    """The engine could not measure a point or recover the bench; the run stops."""


@dataclass
class PointResult:
    """What one point produced (for progress display)."""

    point: Point
    readings: list[ReadingRecord]
    gain_db: float | None
    eta: Mapping[str, float] | None = None


@dataclass
class RunProgress:
    """Counters the reporter shows."""

    done: int = 0
    total: int = 0
    last: PointResult | None = None
    notes: list[str] = field(default_factory=list)


class Runner:
    """Runs points on an open bench and writes them to a store.

    ``sequence``/``bench``: the validated files. ``drivers``: the open bench.
    ``store``/``run_id``: where points go. ``clock``: the bench clock (virtual on the
    simulated bench). ``on_point``: called after each committed point. ``on_wait``: called
    with the activity (see :class:`~sweeprig.store.base.RunInfo`) whenever the run starts
    waiting and at each heartbeat of a wait.
    """

    def __init__(
        self,
        *,
        sequence: Sequence,
        bench: Bench,
        drivers: BenchDrivers,
        store: RunStore,
        run_id: int,
        clock: Clock,
        on_point: Callable[[PointResult], None] | None = None,
        log: Callable[[str], None] = lambda _msg: None,
        policy: RecoveryPolicy | None = None,
        on_wait: Callable[[Mapping[str, Any]], None] | None = None,
        eta: EtaTracker | None = None,
    ) -> None:
        self.sequence = sequence
        self.eta = eta
        self._waited_s = 0.0
        self.bench = bench
        self.d = drivers
        self.store = store
        self.run_id = run_id
        self.clock = clock
        self.on_point = on_point
        self._waits = WaitReporter(store, run_id, on_wait)
        self.log = log
        self.policy = policy or RecoveryPolicy()
        self.skipped = 0
        self._told: set[str] = set()  # the warnings said once a run (:meth:`_warn_once`)
        self._point_unlocked: set[str] = set()  # roles whose readings found it unlocked
        self.recoveries = 0
        self._temperature_c: float | None = None
        self._supply_on = False
        self._noise: Any = None  # sweeprig.engine.noise_reading.NoiseReader, when needed
        #: offsets found by recent searches: (reference coefficients, offset Hz, resolution
        #: Hz), from which the next search is aimed (reference errors drift slowly)
        self._offsets: deque[tuple[dict[str, float], float, float]] = deque(
            maxlen=OFFSET_MEMORY)
        #: each source's own line found once per run (kept beside the recent finds)
        self._surveyed: list[tuple[dict[str, float], float, float]] = []
        self._survey_due = bench.references() is not None
        self._losses: dict[str, PathLoss] = {}
        cond = sequence.conditions
        self.settle_s = float(cond.settle)
        self._settle = SettleWait(clock)
        #: the point measured last, awaiting its commit (:meth:`_store_held`): its point
        #: record, readings, heartbeat activity and result
        self._held: tuple[PointRecord, list[ReadingRecord], dict[str, Any] | None,
                          PointResult] | None = None
        self._stored = 0
        #: the instruments whose status must still be read before the held point is
        #: committed, and those of them already read in this point's set-up (ids)
        self._unverified: list[tuple[str, Driver]] = []
        self._status_read: set[int] = set()
        #: status queries posted beside the sources' messages, their replies not yet read
        for _role, driver in drivers.items():
            driver.before_message = self._settle.wait
        self.soak_s = float(cond.soak)
        self.tolerance_c = float(cond.temperature_tolerance)

    # -- the loop ---------------------------------------------------------------------------

    def run(self, points: Iterable[Point]) -> int:
        """Measure and store every point; returns how many were stored."""
        self._prepare_with_recovery()
        if self.eta is not None:
            self.eta.start(self.clock.now())
        self._stored = 0
        try:
            for point in points:
                self.measure_with_recovery(point)  # its commit is the heartbeat
            self.measure_with_recovery(None)  # the last point's status, then its commit
        except StoreError:
            self._held = None  # nothing more can be kept
            raise
        except BaseException:
            # the bench gave up, or a stop: no more exchanges before the safe state (a hung
            # instrument would hold it back), so a point whose status is still owed is left
            # to resume (it is held only from its end until the next point's sources answer)
            self._release_held(then="`sweeprig resume` measures it")
            raise
        return self._stored

    # -- the held point ---------------------------------------------------------------------
    #
    # A measured point is held, not committed, until the instruments whose event status its
    # last exchanges did not carry (the sources, the supply) have answered a status read made
    # after it: the next point's settings messages begin with ``*ESR?`` (no exchange of its
    # own), or a bare ``*ESR?`` goes out once they are answered, inside the next point's
    # settling time (a status query changes nothing that settles). Only then is it
    # committed, inside that settling time. A reset or an error in that read, or a fault before it
    # was read, measures the held point again (:meth:`measure_with_recovery`).

    def _confirm_held(self) -> None:
        """Read what is still owed of the held point's event status (nothing when the next
        point's set-up carried it), check it, then commit the point (:meth:`_store_held`).
        Raises :class:`InstrumentReset` (power-on bit) or the instrument's errors."""
        if self._held is None:
            return
        if self._unverified:
            # status queries change nothing that settles: they go out at once, inside the
            # settling time the sources' replies began, and cost the bench no time there
            owed = [(d, d.post_status(settling_ok=True)) for _role, d in self._unverified
                    if id(d) not in self._status_read]
            failure = _finish_all(owed, Driver.finish_status)
            if failure is not None:
                raise failure
            self._mark_point_state([d for d, p in owed if p is not None])
            for role, driver in self._unverified:
                if driver.taken_status() & PON_BIT:
                    raise _reset(role, driver, f"point {self._held[3].point.index}")
                driver.expire_status()  # what is read next tells of the next point
            self._unverified, self._status_read = [], set()
        self._store_held()

    def _read_held_status_now(self, drivers: list[Driver]) -> None:
        """Read the held point's status of ``drivers`` now, before their settings move (read
        after, it would tell of the new ones), check it and mark the point from it."""
        if not drivers:
            return
        read = [(d, d.post_status()) for d in drivers]
        failure = _finish_all(read, Driver.finish_status)
        if failure is not None:
            raise failure
        self._status_read.update(id(d) for d in drivers)
        self._mark_point_state([d for d, p in read if p is not None])

    def _mark_point_state(self, read: list[Driver]) -> None:
        """Mark the held point from the status reads just made after it (``read``: the
        instruments whose read came back, with their :attr:`~Driver.status_seen`):
        ``supply_limited`` when the supply held its current limit; the sources that said
        their output was not leveled (``unleveled_sources``) or their reference unlocked
        (``reference_unlocked``), role names."""
        self._stop_if_tripped(read)
        if self._held is None or not read:
            return
        record = self._held[0]
        dc = self.d.dc
        if dc is not None and any(d is dc for d in read) \
                and dc.status_seen.get("current_limited"):
            record.extra["supply_flags"] = [SUPPLY_LIMITED]
            self._tell_supply_limited(record.index, "in current limit")
        sources = [(role, source) for role in SOURCE_ROLES
                   if (source := getattr(self.d, role)) is not None
                   and any(d is source for d in read)]
        self._mark_roles(record, UNLEVELED_SOURCES,
                         [r for r, s in sources if s.status_seen.get("unleveled")])
        self._mark_roles(record, REFERENCE_UNLOCKED,
                         [r for r, s in sources if s.status_seen.get("reference_unlocked")])

    def _stop_if_tripped(self, read: list[Driver]) -> None:
        """Raise :class:`OutputTripped` when an instrument of ``read`` says its output
        protection tripped: its output went off on its own (the held point may have been
        read with it off, so it is not stored)."""
        for driver in read:
            if driver.status_seen.get("output_tripped"):
                held = self._held[3].point.index if self._held is not None else None
                raise OutputTripped(
                    f"role {driver.role!r} tripped its output protection"
                    + (f" during or after point {held}" if held is not None else "")
                    + ": its output went off on its own (a supply's over-voltage or "
                    "over-current protection, a generator's reverse-power protection); the "
                    "run stops with every output off",
                    where=driver.where(),
                    fix=TRIPPED_FIX.format(then="`sweeprig resume` the run"))

    def _mark_roles(self, record: PointRecord, key: str, roles: list[str]) -> None:
        """Add ``roles`` to the point record's ``extra[key]`` (a sorted list of role names)
        and say so once a run in the events (:data:`_MARK_EVENTS`)."""
        if not roles:
            return
        record.extra[key] = sorted({*(record.extra.get(key) or []), *roles})
        kind, text = _MARK_EVENTS[key]
        self._warn_once(key, kind, f"point {record.index}: "
                        f"{' and '.join(repr(r) for r in roles)} {text}", record.index)

    def _tell_supply_limited(self, point_index: int, how: str, detail: str = "") -> None:
        """The run's one event saying the part runs below its stated supply."""
        self._warn_once(SUPPLY_LIMITED, "supply",
                        f"point {point_index}: the supply is {how}{detail}: the part runs "
                        "below its stated supply; check the bench's supply_max_current "
                        "against the part's draw (its figures there are flagged "
                        "supply_limited)", point_index)

    def _warn_once(self, key: str, kind: str, message: str, point_index: int) -> None:
        """A warning event of ``kind``, written the first time ``key`` is told this run."""
        if key not in self._told:
            self._told.add(key)
            self._event("warning", kind, message, point_index)

    def _store_held(self) -> None:
        """Commit the held point (its status confirmed: :meth:`_confirm_held`), then tell
        :attr:`on_point`. Only the process dying between a point's end and its commit loses
        it, and ``sweeprig resume`` measures it again."""
        held, self._held = self._held, None
        if held is None:
            return
        record, records, activity, result = held
        self.store.write_point(self.run_id, record, records, activity=activity)
        self._stored += 1
        if self.on_point is not None:
            self.on_point(result)

    def _release_held(self, *, then: str) -> Point | None:
        """After a fault or a stop: commit the held point if its status needs no reading
        (``reset_check`` off); otherwise drop it. Returns the held point when it was not
        committed (``then`` says, in its event, what becomes of it); None: nothing was
        held, or it was committed."""
        if self._held is None:
            return None
        if not self._unverified:
            self._store_held()
            return None
        point = self._held[3].point
        self._held, self._unverified, self._status_read = None, [], set()
        self._event("warning", "unconfirmed", f"point {point.index} is not stored: its "
                    f"instruments' status after it was not read clean; {then}", point.index)
        return point

    def _prepare_with_recovery(self) -> None:
        """:meth:`_prepare`, with the bench recovered and the set-up tried again on a fault."""
        for attempt in range(1, self.policy.point_attempts + 1):
            try:
                self._prepare()
                return
            except InstrumentError as exc:
                if attempt == self.policy.point_attempts or (
                        self.policy.on_error == "stop" and not isinstance(exc, TransportError)):
                    raise
                self._event("warning", "link" if isinstance(exc, TransportError) else "error",
                            f"set-up, attempt {attempt}: {exc.message().splitlines()[0]}")
                self._recover_safely(exc)

    def _prepare(self) -> None:
        """Instrument set-up that holds for the whole run (no output enabled)."""
        for _role, driver in self.d.items():
            driver.prepare()
        if self.d.dc is not None and self.bench.limits.supply_max_current is not None:
            self.d.dc.set_current_limit(float(self.bench.limits.supply_max_current))
        self._check(*(d for _, d in self.d.items()))
        self._part_in_place()
        if "noise_figure" in self.sequence.reading_kinds() and self._noise is None:
            from sweeprig.engine.noise_reading import NoiseReader  # only runs that need it

            self._noise = NoiseReader(self.bench, self.d, self.clock)
        if self.policy.reset_check:
            for role, driver in self._checked_drivers():
                if driver.point_status() & PON_BIT:  # reading clears it
                    self._event("info", "reset", f"role {role!r} reports a power-on since it "
                                "was last used")

    # -- faults -----------------------------------------------------------------------------

    def measure_with_recovery(self, point: Point | None) -> PointResult | None:
        """:meth:`measure`, with the recovery policy around it; None if the point was skipped.
        ``point`` None: only the held point's status is read and the point committed (the
        end of the points).

        A fault before the held point's status was read (or a reset that read shows) measures
        the held point again, before ``point``. Raises :class:`GaveUp` when the points cannot
        be measured within the policy.
        """
        policy = self.policy
        redo: Point | None = None
        attempt = 0
        while True:
            attempt += 1
            try:
                if redo is not None:
                    self.measure(redo)  # held again, confirmed by what follows
                    redo = None
                if point is None:
                    self._confirm_held()
                    return None
                return self.measure(point)
            except OutputTripped as exc:
                # never retried: a retry would switch that output on into whatever tripped
                # it; the held point (read with the output perhaps off) is not stored
                self._release_held(then="`sweeprig resume` measures it once the cause is "
                                   "found and the protection cleared")
                self._event("error", "tripped", exc.message().splitlines()[0],
                            (redo or point).index if (redo or point) is not None else None)
                raise
            except InstrumentReset as exc:
                kind, error = "reset", exc
            except TransportError as exc:
                kind, error = "link", exc
            except InstrumentError as exc:
                kind, error = "error", exc
            redo = self._release_held(then="it is measured again") or redo
            failed = redo if redo is not None else point
            assert failed is not None  # with no point, only a held point's read can fail
            first_line = error.message().splitlines()[0]
            self._event("warning", kind, f"point {failed.index}, attempt {attempt}: "
                        f"{first_line}", failed.index, {"attempt": attempt})
            if kind == "error" and policy.on_error == "stop":
                raise error
            if attempt >= policy.point_attempts:
                if kind == "error" and policy.on_error == "skip":
                    self.skipped += 1
                    self._event("warning", "skip", f"point {failed.index} skipped after "
                                f"{attempt} attempts: {first_line}", failed.index)
                    self._recover_safely(error)
                    if failed is redo and point is not None:
                        redo, attempt = None, 0  # now this point, with attempts of its own
                        continue
                    return None
                raise GaveUp(
                    f"point {failed.index} failed {attempt} times; last: {first_line}",
                    where=error.where,
                    fix="check the instrument and its connection; the data taken so far "
                    "is stored, and the run can be resumed with `sweeprig resume`",
                ) from error
            self._recover_safely(error)

    def _recover_safely(self, cause: InstrumentError) -> None:
        """:meth:`_recover`, tried again if a fault strikes during the recovery itself."""
        for attempt in range(1, self.policy.reconnect_attempts + 2):
            try:
                self._recover(cause)
                return
            except GaveUp:
                raise
            except InstrumentError as exc:
                cause = exc
                self._event("warning", "link" if isinstance(exc, TransportError) else "error",
                            f"recovery attempt {attempt}: {exc.message().splitlines()[0]}")
        raise GaveUp(
            f"the bench could not be recovered: {cause.message().splitlines()[0]}",
            where=cause.where,
            fix="check the instruments; the data taken so far is stored, and the run can be "
            "resumed with `sweeprig resume`",
        ) from cause

    def _recover(self, cause: InstrumentError) -> None:
        """Bring every instrument back to a known state after ``cause``.

        Links named in ``cause`` are reconnected first; then every instrument is probed with
        ``*ESR?`` (a dead link is reconnected with backoff), its error queue drained and its
        cached settings forgotten, so the next point sends everything again. Nothing the
        engine remembers of the bench's state survives: the drivers' memos, the supply's
        output, and the noise source's hot/cold state (a command may have run whose reply
        was lost, or an instrument reset itself), so each is commanded and read back again.
        Where the bench's switch has a part route, the part is put back in the DUT position
        and read back (the fault may have struck while the calibration thru was in): every
        point measures the part; only the system calibration fits the thru, by itself.
        """
        self.recoveries += 1
        text = str(cause)
        cleared: set[str] = set()
        for role, driver in self.d.items():
            if driver.resource not in text:
                continue
            if isinstance(cause, ReplyTimeout) and cause.resynced:
                # the transport device-cleared the session and is in step again: a late
                # reply can no longer shift an answer (sweeprig.transport.resync)
                cleared.add(role)
                self._event("warning", "device_clear", f"role {role!r}: {cause.resync}")
            else:
                self._reconnect(role, driver, reason="named in the fault")
        for role, driver in self.d.items():
            self._probe(role, driver)
            if role in cleared:
                driver.clear()  # *CLS after the device clear (status left as it was)
            driver.forget_state()
            driver.prepare()
        self._supply_on = False
        if self._noise is not None:
            self._noise.forget_state()
        self._part_in_place()
        self._restore_chamber()

    def _part_in_place(self) -> None:
        """The part in the DUT position, read back, where the bench's switch has a part route
        (at set-up: a calibration that stopped may have left its thru in; after a recovery:
        the fault may have struck while the system calibration had the thru in)."""
        part = self.bench.switch_route("part")
        if self.d.switch is not None and part is not None:
            self.d.switch.route(part)

    def _probe(self, role: str, driver: Driver) -> None:
        backoff = self.policy.backoff_s
        for attempt in range(self.policy.reconnect_attempts + 1):
            try:
                status = driver.event_status()
                stale = driver.errors()
            except TransportError as exc:
                if attempt == self.policy.reconnect_attempts:
                    raise GaveUp(
                        f"role {role!r} did not answer after {attempt} reconnections",
                        where=driver.where(),
                        fix="check the instrument's power and network; the data taken so far "
                        "is stored, and the run can be resumed with `sweeprig resume`",
                    ) from exc
                self.clock.sleep(backoff)
                backoff *= 2
                self._reconnect(role, driver, reason=str(exc).splitlines()[0])
                continue
            except InstrumentError as exc:  # a queue that never empties, a refused query
                self._event("warning", "probe", f"role {role!r}: {str(exc).splitlines()[0]}")
                return
            if status & PON_BIT:
                self._event("warning", "reset", f"role {role!r} had reset itself; settings "
                            "will be applied again")
            if stale:
                self._event("info", "error_queue", f"role {role!r} queue held: "
                            + "; ".join(str(e) for e in stale))
            return

    def _reconnect(self, role: str, driver: Driver, *, reason: str) -> None:
        self._event("warning", "reconnect", f"reconnecting role {role!r} ({reason})")
        try:
            driver.transport.reconnect()
        except TransportError as exc:
            self._event("warning", "reconnect", f"role {role!r}: {str(exc).splitlines()[0]}")

    def _restore_chamber(self) -> None:
        """After a recovery: set point again; wait and soak again only if the DUT drifted."""
        chamber, target = self.d.chamber, self._temperature_c
        if chamber is None or target is None:
            return
        chamber.set_control(True)
        chamber.set_setpoint_c(target)
        if abs(chamber.probe_temperature_c() - target) > self.tolerance_c:
            self._event("warning", "chamber", f"DUT probe left {target:g} degC; waiting and "
                        "soaking again")
            self._temperature_c = None

    def _checked_drivers(self) -> list[tuple[str, Driver]]:
        return [(role, d) for role, d in self.d.items() if role != "simctl"]

    def _loss(self, connection: str) -> PathLoss:
        """The bench's path loss of ``connection``, looked up once per run."""
        loss = self._losses.get(connection)
        if loss is None:
            loss = self._losses[connection] = self.bench.loss(connection)
        return loss

    def _check_resets(self, checked: list[tuple[str, Driver]] | None = None) -> float | None:
        """Raise :class:`InstrumentReset` if any instrument of ``checked`` has its power-on
        bit set; on a compound profile, also raise the errors its event status reports (read
        once per point, or taken from the point's last query where that carried it; at a
        point's end the engine passes the chamber and the instruments whose last exchange
        carried it, the others are read with the next point: :meth:`_confirm_held`). Returns the
        chamber's DUT probe temperature (°C; None without a chamber), read in the same
        message as the chamber's status.

        The status queries go to every instrument before any reply is read, so they answer
        at once rather than one after another; every reply is read before any error
        raises. ``checked``: :meth:`_checked_drivers`, when the caller has it."""
        checked = self._checked_drivers() if checked is None else checked
        chamber = self.d.chamber
        joins = chamber is not None and chamber.compound  # its probe carries its status
        posted = [(driver, driver.post_status()) for _role, driver in checked
                  if not (joins and driver is chamber)]
        probe_c: float | None = None
        failure: InstrumentError | None = None
        probe = None  # the chamber's probe query, sent after its status query
        try:
            if chamber is not None and joins:
                probe_c = chamber.probe_temperature_c(status=True)
            elif chamber is not None:
                probe = chamber.post_ask("probe")
        except InstrumentError as exc:
            failure = exc
        failure = _finish_all(posted, Driver.finish_status) or failure
        if probe is not None and chamber is not None:
            try:
                probe_c = float(chamber.finish_ask("probe", probe))
            except InstrumentError as exc:
                failure = failure or exc
        if failure is not None:
            raise failure
        for role, driver in checked:
            if driver.point_status() & PON_BIT:
                raise _reset(role, driver, "the point")
        if chamber is not None and probe_c is None:
            probe_c = chamber.probe_temperature_c()
        return probe_c

    def _check_temperature_held(self, point: Point, probe_c: float | None) -> None:
        """Say once a run when a point's DUT probe reading is outside the tolerance of its
        set point: the soak ended inside it, so the chamber has lost hold of the part (the
        reduction flags the figures of such points ``temperature_off``)."""
        setpoint = point.temperature_c
        if probe_c is None or setpoint is None or abs(probe_c - setpoint) <= self.tolerance_c:
            return
        self._warn_once(TEMPERATURE_OFF, "chamber",
                        f"point {point.index}: the DUT probe read {probe_c:.1f} °C, outside "
                        f"±{self.tolerance_c:g} °C of the {setpoint:g} °C set point: the "
                        "chamber is not holding the part (its conditioning lost, a door open, "
                        "a limiter tripped?); the figures of such points are flagged "
                        f"{TEMPERATURE_OFF}; check the chamber", point.index)

    def _event(self, severity: str, kind: str, message: str, point_index: int | None = None,
               details: dict[str, object] | None = None) -> None:
        self.log(message)
        self.store.log_event(self.run_id, severity, kind, message, details,  # type: ignore[arg-type]
                             point_index=point_index)

    def measure(self, point: Point) -> PointResult:
        """Apply ``point``, take its readings, commit them; return the result."""
        sim_start, wall_start = self.clock.now(), utc_now()
        waited_before = self._waited_s
        checked = self._checked_drivers()  # the bench's instruments, listed once a point
        self._point_unlocked = set()
        for _role, driver in checked:
            driver.expire_status()  # every instrument's status is read for this point
        if point.temperature_c is not None and point.temperature_c != self._temperature_c:
            self._confirm_held()  # before the chamber moves (it may take hours)
        changed = self._apply_conditions(point)
        changed |= self._apply_sources(point)  # the held point's status travels with them
        if changed:
            self._settle.start(self.settle_s)
        # the point before is checked and committed (and the store's owed log forcing paid)
        # while the bench settles for this one: they cost the bench nothing there
        self._confirm_held()
        if changed:
            self.store.force_owed_log()
        try:
            if self._survey_due:
                self._survey(point)
            records = [self._read(point, reading) for reading in point.readings]
        finally:
            self._settle.wait()  # a point without instrument readings still settles
        records = self._agree_offsets(point, records)
        if self.policy.reset_check:
            # now: the instruments whose last exchange carried their status, and the chamber
            # (its probe reading belongs to the point); the others' status is read with the
            # next point's set-up, before this point is committed (:meth:`_confirm_held`)
            chamber = self.d.chamber
            now: list[tuple[str, Driver]] = []
            unverified = []
            for role, driver in checked:
                fresh = driver is chamber or driver.status_fresh
                if fresh and driver is not chamber and driver.asks_companions:
                    # its last read (its settings' check, at the point's start) did not ask
                    # what a status read after the point asks (a supply's current limit)
                    driver.expire_status()
                    fresh = False
                (now if fresh else unverified).append((role, driver))
            probe_c = self._check_resets(now)
        else:
            unverified = []
            probe_c = (self.d.chamber.probe_temperature_c() if self.d.chamber is not None
                       else None)
        self._check_temperature_held(point, probe_c)
        current_a = next((r.extra["current_a"] for r in records if "current_a" in r.extra), None)
        # the point's end, read once: the record and the ETA (on a served bench the clock is
        # a query to the simulator)
        sim_end = self.clock.now()
        record = PointRecord(
            index=point.index,
            study=point.study,
            temperature_c=point.temperature_c,
            supply_v=point.supply_v,
            lo_freq_hz=point.lo_freq_hz,
            lo_power_dbm=point.lo_power_dbm,
            rf_freq_hz=point.rf_freq_hz,
            rf_power_dbm=point.rf_power_dbm,
            rf2_freq_hz=point.rf2_freq_hz,
            rf2_power_dbm=point.rf2_power_dbm,
            probe_temperature_c=probe_c,
            supply_current_a=current_a,
            sim_start_s=sim_start,
            sim_end_s=sim_end,
            wall_start=wall_start,
            wall_end=utc_now(),
            extra={"if_freq_hz": point.if_freq_hz, "tone_spacing_hz": point.tone_spacing_hz,
                   "axis_index": dict(point.axis_index)},
        )
        self._mark_roles(record, REFERENCE_UNLOCKED, sorted(self._point_unlocked))
        eta: dict[str, float] | None = None
        if self.eta is not None:
            self.eta.point_measured(sim_end - sim_start - (self._waited_s - waited_before))
            eta = self.eta.fields(sim_end)
        # held, and committed in the next point's settling time (:meth:`_store_held`)
        result = PointResult(point, records, None, eta)
        self._held = (record, records,
                      None if eta is None else {"what": "measuring", **eta}, result)
        self._unverified, self._status_read = unverified, set()
        wanted = next((r for r in records if r.name == "wanted"), None)
        gain = None
        if wanted is not None and wanted.level_dbm is not None:
            gain = wanted.level_dbm - point.rf_power_dbm
        result.gain_db = gain
        return result

    # -- settings ---------------------------------------------------------------------------

    def _apply_conditions(self, point: Point) -> bool:
        changed = False
        if point.temperature_c is not None and point.temperature_c != self._temperature_c:
            self._go_to_temperature(point.temperature_c, point)
            self._temperature_c = point.temperature_c
            changed = True
        return self._apply_supply(point) or changed

    def _apply_supply(self, point: Point) -> bool:
        """The supply to the point's voltage, output on (checked). True if anything was sent."""
        dc = self.d.dc
        if dc is None or point.supply_v is None:
            return False
        if (self._held is not None and dc.state().get("voltage") != point.supply_v
                and any(d is dc for _r, d in self._unverified)
                and id(dc) not in self._status_read):
            # the held point's status (and current-limit state) is read before the supply
            # moves: after it, it would tell of the new setting (a supply sweep)
            self._read_held_status_now([dc])
        with dc.joined():
            sent = dc.set_voltage(point.supply_v)
            if not self._supply_on:
                sent |= dc.set_output(True)
                self._supply_on = True
            if sent:
                self._check(dc)
        return sent

    def _go_to_temperature(self, temperature_c: float, point: Point | None = None) -> None:
        """Set the chamber, wait for the DUT probe, soak. RF is off while the temperature
        moves (an adaptive soak judged by gain switches the point's RF on to read it)."""
        chamber = self.d.chamber
        if chamber is None:
            raise InputError(
                "the sequence sets temperatures but the bench has no chamber",
                where=self.sequence.where(("conditions", "temperature")),
                fix="add roles.chamber to the bench file, or remove conditions.temperature",
            )
        for source in self.d.sources():
            source.set_output(False)
        chamber.set_control(True)
        chamber.set_setpoint_c(temperature_c)
        self._check(chamber)
        self.log(f"chamber to {temperature_c:g} degC")
        began = self.clock.now()
        try:
            self._travel_and_soak(chamber, temperature_c, point)
        finally:
            self._waited_s += self.clock.now() - began

    def _eta(self, wait_left_s: float) -> dict[str, float]:
        """The ETA fields of an activity, with ``wait_left_s`` left of the wait in hand."""
        if self.eta is None:
            return {}
        return self.eta.fields(self.clock.now(), wait_left_s=wait_left_s)

    def _travel_and_soak(self, chamber: ChamberDriver, temperature_c: float,
                         point: Point | None) -> None:
        if self.eta is not None:
            self.eta.at_temperature(temperature_c)
        shortest_soak_s = soak_range_s(self.sequence)[0]
        condition_s = self.eta.condition_s() if self.eta is not None else 0.0
        waited = 0.0
        eta: dict[str, float] = {}
        self._waits.restart()  # the first look is always told
        while abs((probe := chamber.probe_temperature_c()) - temperature_c) > self.tolerance_c:
            if self._waits.due():
                eta = self._eta(max(condition_s - waited, shortest_soak_s))
            self._waits.tell({"what": "chamber", "setpoint_c": temperature_c, "probe_c": probe,
                           "waited_s": waited, **eta,
                           "label": f"chamber to {temperature_c:g} °C, probe at {probe:.2f} °C "
                                    f"(tolerance ±{self.tolerance_c:g} °C)"})
            if waited >= CHAMBER_TIMEOUT_S:
                raise InstrumentError(
                    f"the DUT probe did not reach {temperature_c:g} degC "
                    f"(±{self.tolerance_c:g}) within {CHAMBER_TIMEOUT_S / 3600:g} h",
                    where=chamber.where(),
                    fix="check the chamber and the probe; a chamber that cannot reach the "
                    "set point must not be left running unattended",
                )
            self.clock.sleep(CHAMBER_POLL_S)
            waited += CHAMBER_POLL_S
        adaptive = self.sequence.conditions.adaptive_soak
        if adaptive is not None and point is not None:
            self.log(f"probe at {temperature_c:g} degC after {waited:g} s; soaking until "
                     f"settled ({adaptive.by})")
            self._adaptive_soak(chamber, temperature_c, point, adaptive)
            return
        self.log(f"probe at {temperature_c:g} degC after {waited:g} s; soaking {self.soak_s:g} s")
        self._soak(chamber, temperature_c)

    def _soak(self, chamber: ChamberDriver, temperature_c: float) -> None:
        soak(self.clock, self.soak_s, temperature_c, chamber.probe_temperature_c, self._waits,
             eta=self._eta)

    def _criterion(self, point: Point, by: str) -> Callable[[], float] | None:
        """A function reading the adaptive soak's criterion at ``point`` (gain, dB, or supply
        current, A), with what it needs switched on; None when the bench cannot read it."""
        self._apply_supply(point)
        dc = self.d.dc
        if by == "supply_current":
            return None if dc is None else dc.measure_current_a
        wanted = next((r for r in point.readings if r.kind == "wanted"), None)
        if wanted is None or self.d.sa is None:
            return None
        if self._apply_sources(point):
            self.clock.sleep(self.settle_s)

        def gain_db() -> float:
            record = self._read_analyzer(point, wanted)
            return float(record.level_dbm) - point.rf_power_dbm  # type: ignore[arg-type]
        return gain_db

    def _adaptive_soak(self, chamber: ChamberDriver, temperature_c: float, point: Point,
                       adaptive: AdaptiveSoak) -> None:
        """Soak until the criterion's readings over the last window spread by no more than
        the drift allowed (after the minimum, at most the maximum); store the soak curve."""
        shortest_s, longest_s = soak_range_s(self.sequence)
        read = self._criterion(point, adaptive.by)
        if read is None:
            self._event("warning", "soak", f"point {point.index} cannot read the adaptive "
                        f"soak's criterion ({adaptive.by}); soaking the maximum "
                        f"{longest_s:g} s", point.index)
            soak(self.clock, longest_s, temperature_c, chamber.probe_temperature_c,
                 self._waits, eta=self._eta)
            return
        start = self.clock.now()
        curve: list[tuple[float, float, float]] = []
        next_read_s = 0.0
        settled = False
        self._waits.restart()
        unit = "dB" if adaptive.by == "gain" else "A"
        while True:
            elapsed = self.clock.now() - start
            if elapsed >= next_read_s - 1e-9:
                value = read()
                curve.append((elapsed, chamber.probe_temperature_c(), value))
                next_read_s += adaptive.every
                if elapsed >= adaptive.minimum - 1e-9 and is_settled(
                        curve, adaptive.window, adaptive.drift):
                    settled = True
                    break
            if elapsed >= longest_s - 1e-9:
                break
            spread = window_spread(curve, adaptive.window)
            probe = curve[-1][1]
            eta = self._eta(max(shortest_s - elapsed, 0.0)) if self._waits.due() else {}
            self._waits.tell({
                "what": "soak", "setpoint_c": temperature_c, "probe_c": probe,
                "left_s": longest_s - elapsed, "total_s": longest_s, "adaptive": True, **eta,
                "label": f"soak at {temperature_c:g} °C until settled, probe at {probe:.2f} °C, "
                         f"{adaptive.by} spread "
                         + ("-" if spread is None else f"{spread:.3g} {unit}")
                         + f" (settled at ≤ {adaptive.drift:g} {unit} over "
                         f"{_clock_text(adaptive.window)}), at most "
                         f"{_clock_text(longest_s - elapsed)} left"})
            self.clock.sleep(max(0.0, min(next_read_s - elapsed, longest_s - elapsed,
                                          WAIT_SLICE_S)))
        soaked_s = self.clock.now() - start
        how = "settled" if settled else "not settled by the maximum"
        self._event("info" if settled else "warning", "soak_curve",
                    f"soak at {temperature_c:g} degC: {how} after {soaked_s:g} s "
                    f"({adaptive.by}, {len(curve)} readings)", point.index,
                    {"temperature_c": temperature_c, "by": adaptive.by, "unit": unit,
                     "settled": settled, "soak_s": soaked_s, "drift": adaptive.drift,
                     "window_s": adaptive.window,
                     "time_s": [c[0] for c in curve], "probe_c": [c[1] for c in curve],
                     "value": [c[2] for c in curve]})

    def _apply_sources(self, point: Point) -> bool:
        """LO, RF, RF2 to the point's settings; outputs on. True if anything was sent."""
        sent = False
        # A source whose profile cannot lead its settings with the held point's status read,
        # but asks its level state with that read, is read first: read after its new
        # settings, the state would tell of them (one exchange no more, only earlier). So is
        # a second tone about to go off (an output off is never unleveled).
        rf2 = self.d.rf2
        going_off = rf2 if (point.rf2_freq_hz is None and rf2 is not None
                            and rf2.state().get("output") is not False) else None
        self._read_held_status_now([
            d for _r, d in self._unverified
            if isinstance(d, SourceDriver) and id(d) not in self._status_read
            and d.asks_companions and (not d.joins_status or d is going_off)])
        # What goes off goes first, so the DUT's RF port never takes both tones at the new
        # level of one and the old level of the other.
        if point.rf2_freq_hz is None and self.d.rf2 is not None and self.d.rf2.set_output(False):
            self.d.rf2.sync()
            sent = True
        plan = [("lo", point.lo_freq_hz, point.lo_power_dbm, "lo"),
                ("rf", point.rf_freq_hz, point.rf_power_dbm, "rf")]
        if point.rf2_freq_hz is not None and point.rf2_power_dbm is not None:
            plan.append(("rf2", point.rf2_freq_hz, point.rf2_power_dbm, "rf2"))
        posted: list[tuple[Driver, Pending | None]] = []
        # the held point's status owed by these instruments: what does not lead a source's
        # message is read by :meth:`_confirm_held`, inside the settling time
        owed = {id(d) for _r, d in self._unverified if id(d) not in self._status_read}
        led: list[int] = []  # the sources whose message began with that status read
        try:
            for role, freq_hz, power_dbm, connection in plan:
                source = getattr(self.d, role)
                if source is None:
                    raise InputError(f"the bench has no {role!r} source", where="bench",
                                     fix=f"add roles.{role} to the bench file")
                with source.joined():  # the settings and the *OPC? below: one message
                    block = self._tune(source, connection, freq_hz, power_dbm)
                    block |= source.set_output(True)
                    if block:
                        # Each source proves it has applied its settings before the
                        # analyzer (another connection) sweeps: *OPC? joined to them where
                        # the profile allows it (its errors are then read with the point's
                        # status, before the point is stored), else the error check, whose
                        # reply orders things the same way. The *OPC? replies are read
                        # below, after every source has its message: the sources settle at
                        # once, and every one has answered before this method returns.
                        # The held point's status leads the message where it is owed.
                        first = source.joins_status and id(source) in owed
                        posted.append((source, source.post_sync(status_first=first)))
                        if first:
                            led.append(id(source))
                sent |= block
        except BaseException:
            _finish_all(posted, Driver.finish_sync)  # read what is owed; the first error wins
            raise
        failure = _finish_all(posted, Driver.finish_sync)
        if failure is not None:
            raise failure
        self._status_read.update(led)  # read: only now, with every reply in
        self._mark_point_state([d for d, _p in posted if id(d) in led])
        return sent

    def _note_analyzer_lock(self, sa: AnalyzerDriver) -> None:
        """Remember that the analyzer reported its reference unlocked at this point's
        reading (its record says so: :meth:`measure`)."""
        if sa.reference_unlocked_seen:
            self._point_unlocked.add("sa")

    def _tune(self, source: SourceDriver, connection: str, freq_hz: float,
              dut_power_dbm: float) -> bool:
        """Set a source's frequency and level so the DUT port gets ``dut_power_dbm`` at
        ``freq_hz`` — never more than the old or the new point's power on the way.

        With a frequency-dependent path loss, a new frequency at the old level can put more
        power into the DUT than either point: so a level going down is set first, a level
        going up last. A source whose level is unknown (after a recovery) is switched off
        while it is retuned. Returns True if anything was sent.
        """
        level = dut_power_dbm + self._loss(connection).at(freq_hz, dut_power_dbm)
        known = source.state().get("power")
        sent = False
        if known is None:
            sent |= source.set_output(False)
            sent |= source.set_power(level)
            sent |= source.set_frequency(freq_hz)
        elif level < float(known):
            sent |= source.set_power(level)
            sent |= source.set_frequency(freq_hz)
        else:
            sent |= source.set_frequency(freq_hz)
            sent |= source.set_power(level)
        return sent

    # -- readings ---------------------------------------------------------------------------

    def _read(self, point: Point, reading: Reading) -> ReadingRecord:
        if reading.instrument == "pm":
            return self._read_power_meter(point, reading)
        if reading.instrument == "dc":
            return self._read_supply(point, reading)
        if reading.instrument == "noise":
            return self._noise.read(point, reading)  # type: ignore[no-any-return]
        return self._read_analyzer(point, reading)

    def _read_analyzer(self, point: Point, reading: Reading) -> ReadingRecord:
        sa = self.d.sa
        if sa is None or reading.analyzer is None or reading.freq_hz is None:
            raise InputError(f"reading {reading.name!r} needs the spectrum analyzer",
                             where="bench", fix="add roles.sa to the bench file")
        port = reading.port or "if"
        self._switch_to(port)
        rf = self.d.rf
        if reading.rf_retune_hz is not None and rf is not None:
            # the same DUT-plane power at the retuned frequency (its own path loss)
            self._tune(rf, "rf", reading.rf_retune_hz, point.rf_power_dbm)
            rf.set_output(True)
            self._check(rf)
            self.clock.sleep(self.settle_s)
        a = reading.analyzer
        aim = None if reading.search_hz is None else self._aim(point, reading, sa)
        found: Found | None = None
        floor_from = "trace"
        for attempt in (1, 2):
            # the changed settings, the analyzer's sweep time for them and the error check:
            # one message where the profile allows it
            with sa.joined():
                changed = sa.configure(
                    centre_hz=a.center_hz if aim is None else aim.centre_hz,
                    span_hz=a.span_hz if aim is None else aim.span_hz, rbw_hz=a.rbw_hz,
                    ref_level_dbm=a.reference_level_dbm, attenuation_db=a.attenuation_db,
                    averages=a.averages, points=None if aim is None else aim.points,
                )
                sweep_s, sweep_from = sa.expected_sweep_s(a.averages, a.measure_time_s,
                                                          status=bool(changed))
                if changed:
                    self._check(sa)
            if aim is None:
                break  # swept below, with its marker reading in the same message
            sa.sweep(sweep_s)  # wait and timeout from the analyzer's own sweep time
            # the trace the floor needs anyway carries the search: no extra transaction
            floor, found = self._search(sa, reading, aim, a.rbw_hz, a.averages)
            if attempt == 1 and aim.aimed and sw.WINDOW_EDGE in found.flags:
                aim = self._aim(point, reading, sa, wide=True)  # off the aim: look wide
                continue
            break
        if aim is not None and found is not None:
            # a peak the references cannot explain is likely not the product: the level is
            # then read where the product should be, and the flag says so; a product not
            # found is bounded by the window's highest point (the analysis: in the noise)
            if found.freq_hz is None:
                marker_hz = found.highest_hz if found.highest_hz is not None \
                    else aim.centre_hz
            else:
                marker_hz = aim.centre_hz if found.flags else found.freq_hz
                clear = found.clear_offset_hz(floor.dbm)
                if clear is not None:
                    self._offsets.append((aim.coefficients, clear,
                                          found.resolution_hz or a.rbw_hz))
            level, _, overload = sa.marker_reading(marker_hz)
            self._note_analyzer_lock(sa)
        else:
            # the floor from markers in the same message when the reading stands clear of
            # them; the trace only for a reading near its floor (or no room for markers)
            noise_hz = noise_marker_hz(reading, a.center_hz, a.span_hz, a.rbw_hz) \
                if sa.compound else ()
            level, samples, overload = sa.sweep_and_read(sweep_s, reading.freq_hz, noise_hz)
            self._note_analyzer_lock(sa)
            floor_from = "markers"
            floor = floor_from_markers(level, samples)
            if floor is None:
                floor_from = "trace"
                floor = self._noise_floor(sa, reading, a.span_hz, a.rbw_hz, a.averages)
        if reading.rf_retune_hz is not None and rf is not None:
            self._tune(rf, "rf", point.rf_freq_hz, point.rf_power_dbm)
            rf.set_output(True)
            self._check(rf)
            self.clock.sleep(self.settle_s)
        loss = self._loss(_connection_of(port)).at(reading.freq_hz)
        orders = reading.orders or ()
        return ReadingRecord(
            name=reading.name,
            kind=reading.kind,
            port=port,
            freq_hz=reading.freq_hz,
            level_dbm=level + loss,
            noise_floor_dbm=None if floor.dbm is None else floor.dbm + loss,
            m=orders[0] if len(orders) >= 1 else None,
            n=orders[1] if len(orders) >= 2 else None,
            span_hz=a.span_hz,
            rbw_hz=a.rbw_hz,
            attenuation_db=a.attenuation_db,
            ref_level_dbm=a.reference_level_dbm,
            averages=a.averages,
            overload=overload,
            attenuation_check=True if reading.attenuation_check else None,
            extra={**_reading_extra(reading, level, loss, floor),
                   **({"noise_floor_from": "markers", "noise_floor_points": floor.points_used}
                      if aim is None and floor_from == "markers" else {}),
                   "sweep_s": sweep_s, "sweep_time_from": sweep_from,
                   **({} if found is None or aim is None
                      else search_extra(reading, found, aim)),
                   # the analyzer flagged its reading uncalibrated (its questionable status,
                   # read in the reading's own message)
                   **({"status_flags": [ANALYZER_UNCALIBRATED]} if sa.uncalibrated_seen
                      else {})},
        )

    def _agree_offsets(self, point: Point, records: list[ReadingRecord]
                       ) -> list[ReadingRecord]:
        """Mark ``frequency_offset`` on the searched readings whose offsets disagree with the
        others' (one set of reference errors explains them all, or the product found is
        another line: :mod:`sweeprig.plan.offset_agreement`). No instrument is asked."""
        refs = self.bench.references()
        if refs is None:
            return records
        chosen: list[int] = []
        coefficients, offsets, resolution = [], [], []
        for i, (reading, record) in enumerate(zip(point.readings, records, strict=True)):
            search = record.extra.get("search")
            if not search or not search.get("found") or record.extra.get("search_flags") \
                    or reading.orders is None:
                continue
            rf_hz = point.rf_freq_hz if reading.rf_retune_hz is None else reading.rf_retune_hz
            chosen.append(i)
            coefficients.append(self._coefficients(reading.orders, point, rf_hz))
            offsets.append(float(search["offset_hz"]))
            resolution.append(float(search["resolution_hz"]))
        if self._surveyed or self._offsets:
            # the clear finds so far (this point's included) predict each product's offset
            off = []
            for c, o, res in zip(coefficients, offsets, resolution, strict=True):
                mean, sigma = self._predicted_offset(c)
                off.append(abs(o - mean) > AIM_SIGMAS * sigma + DISAGREE_K * res)
        else:
            off = disagreeing(coefficients, offsets, resolution, refs.tolerance_ppm)
        out = list(records)
        for i, bad in zip(chosen, off, strict=True):
            if bad:
                out[i] = replace(out[i], extra={**out[i].extra,
                                                "search_flags": [sw.FREQUENCY_OFFSET]})
        return out

    def _coefficients(self, orders: tuple[int, int, int], point: Point, rf_hz: float | None
                      ) -> dict[str, float]:
        """How a product of ``orders`` (LO, RF, RF2) at ``point`` (the RF tone at ``rf_hz``)
        moves with each reference's error, as the analyzer sees it, Hz per ppm."""
        refs = self.bench.references()
        assert refs is not None
        terms = sw.product_terms(orders, point.lo_freq_hz, rf_hz, point.rf2_freq_hz, refs)
        return reference_coefficients(terms, refs.reference.get("sa", "sa:crystal"))

    def _predicted_offset(self, coefficients: dict[str, float]) -> tuple[float, float]:
        """The offset (mean, standard deviation), Hz, the clear finds so far predict for a
        product of these reference ``coefficients``."""
        refs = self.bench.references()
        assert refs is not None
        seen = [*self._surveyed, *self._offsets]
        return predicted_offset_hz([c for c, _, _ in seen], [o for _, o, _ in seen],
                                   [r for _, _, r in seen], refs.tolerance_ppm, coefficients)

    def _survey(self, point: Point) -> None:
        """Once per run, each source's own line where it leaks to the IF port, read at a
        narrow RBW over the window its reference allows: it pins that source's reference
        error, so every later search is aimed in its planned narrow span (products whose
        mix of references no clear product pins would otherwise need the whole window at
        their own, often narrow, RBW). A few sweeps per run, none per point; the levels are
        the point's first IF reading's (attenuation and reference level for that port)."""
        self._survey_due = False
        sa, refs = self.d.sa, self.bench.references()
        template = next((r for r in point.readings if r.instrument == "sa" and
                         r.port == "if" and r.analyzer is not None and
                         r.search_hz is not None and r.rf_retune_hz is None), None)
        if sa is None or refs is None or template is None or template.analyzer is None:
            return
        a = template.analyzer
        self._switch_to("if")
        for role, freq_hz, orders in (("lo", point.lo_freq_hz, (1, 0, 0)),
                                      ("rf", point.rf_freq_hz, (0, 1, 0)),
                                      ("rf2", point.rf2_freq_hz, (0, 0, 1))):
            if freq_hz is None or getattr(self.d, role) is None:
                continue
            bound = sw.offset_bound_hz(orders, point.lo_freq_hz, point.rf_freq_hz,
                                       point.rf2_freq_hz, refs)
            if bound <= 0.0:
                continue
            rbw = SURVEY_RBW_HZ
            half = bound + sw.SEARCH_SLACK_RBW * rbw
            if sa.configure(centre_hz=freq_hz, span_hz=sw.searched_span_hz(half, rbw),
                            rbw_hz=rbw, ref_level_dbm=a.reference_level_dbm,
                            attenuation_db=a.attenuation_db, averages=1):
                self._check(sa)
            sweep_s, _ = sa.expected_sweep_s(1, None)
            sa.sweep(sweep_s)
            trace = sa.read_trace()
            floor = estimate_noise_floor(trace.levels_dbm, trace.freq_hz, rbw, (freq_hz,))
            found = sw.search(trace.freq_hz, trace.levels_dbm, freq_hz, half, bound, rbw,
                              floor.dbm)
            clear = found.clear_offset_hz(floor.dbm)
            if clear is not None:
                self._surveyed.append((self._coefficients(orders, point, point.rf_freq_hz),
                                       clear, found.resolution_hz or rbw))
            self._event("info", "timebase", f"reference survey, role {role!r} at "
                        f"{freq_hz:g} Hz: " + (f"line {clear:+.1f} Hz off"
                                               if clear is not None else "no clear line found"),
                        point.index)

    def _aim(self, point: Point, reading: Reading, sa: AnalyzerDriver, *,
             wide: bool = False) -> Aim:
        """Where to look for a searched reading's product: at its computed frequency moved
        by the offset the products found so far predict for it, in the planned (narrow)
        span, when that prediction is tight enough (``AIM_SIGMAS`` standard deviations and
        half an RBW fit the span beside the floor's room); otherwise (or ``wide``) at the
        computed frequency over the whole window the references allow, the span widened to
        hold it (and the trace points raised so that an RBW keeps
        ``POINTS_PER_RBW`` points, where the profile can)."""
        assert reading.analyzer is not None and reading.freq_hz is not None
        assert reading.search_hz is not None and reading.orders is not None
        a = reading.analyzer
        rf_hz = point.rf_freq_hz if reading.rf_retune_hz is None else reading.rf_retune_hz
        coefficients = self._coefficients(reading.orders, point, rf_hz)
        mean, sigma = self._predicted_offset(coefficients)
        half = AIM_SIGMAS * sigma + sw.SEARCH_SLACK_RBW * a.rbw_hz
        room = a.span_hz / 2.0 - sw.FLOOR_ROOM_RBW / 2.0 * a.rbw_hz
        if not wide and half <= max(room, sw.SEARCH_SLACK_RBW * a.rbw_hz) \
                and half <= reading.search_hz:
            return Aim(reading.freq_hz + mean, a.span_hz, half, None, coefficients, True)
        span = max(a.span_hz, sw.searched_span_hz(reading.search_hz, a.rbw_hz))
        points = None
        if sa.profile.has("points"):
            needed = math.ceil(POINTS_PER_RBW * span / a.rbw_hz) + 1
            if needed > DEFAULT_TRACE_POINTS:
                points = min(needed, int(sa.limits("points")[1] or needed))
        return Aim(reading.freq_hz, span, reading.search_hz, points, coefficients, False)

    @staticmethod
    def _search(sa: AnalyzerDriver, reading: Reading, aim: Aim, rbw_hz: float,
                averages: int) -> tuple[NoiseFloor, Found]:
        """The product searched for in the aimed window on the last sweep's trace, and
        the noise floor beside it (the found peak masked too: an offset product must not
        raise the floor). See :mod:`sweeprig.plan.search_window`."""
        assert reading.freq_hz is not None
        trace = sa.read_trace()
        if trace.points < 3 or trace.span_hz <= 0:
            return NoiseFloor(None, 0, "no trace around the product (zero span)"), \
                Found(None, None, None)
        freqs = trace.freq_hz
        inside = np.abs(freqs - aim.centre_hz) <= aim.half_width_hz
        lines: tuple[float, ...] = (reading.freq_hz, aim.centre_hz, *reading.known_hz)
        if inside.any():
            lines = (*lines, float(freqs[inside][np.argmax(trace.levels_dbm[inside])]))
        floor = estimate_noise_floor(trace.levels_dbm, freqs, rbw_hz, lines, averages=averages)
        return floor, sw.search(freqs, trace.levels_dbm, reading.freq_hz, aim.half_width_hz,
                                reading.offset_bound_hz or 0.0, rbw_hz, floor.dbm,
                                window_centre_hz=aim.centre_hz)

    @staticmethod
    def _noise_floor(sa: AnalyzerDriver, reading: Reading, span_hz: float, rbw_hz: float,
                     averages: int) -> NoiseFloor:
        """The noise power around the product, dBm at the analyzer input.

        The median of the trace points more than ``MASK_HALF_WIDTH_RBW`` RBWs from the
        product and from every other line the plan expects at the port (several hundred
        points: a steady estimate, where one marker sample of log-detected noise scatters by
        about 5.6 dB; see :mod:`sweeprig.engine.noise_floor`). Too few such points: the
        floor is unknown (None), not a guess read on a filter skirt.
        """
        assert reading.freq_hz is not None
        centre_hz = reading.freq_hz
        trace = sa.read_trace()  # the axis as the analyzer reports it, not as requested
        if trace.points < 3 or trace.span_hz <= 0:
            return NoiseFloor(None, 0, "no trace around the product (zero span)")
        return estimate_noise_floor(trace.levels_dbm, trace.freq_hz, rbw_hz,
                                    (centre_hz, *reading.known_hz), averages=averages)

    def _read_power_meter(self, point: Point, reading: Reading) -> ReadingRecord:
        pm = self.d.pm
        if pm is None:
            raise InputError("the input_power reading needs the power meter", where="bench",
                             fix="add roles.pm to the bench file")
        freq = reading.freq_hz if reading.freq_hz is not None else point.rf_freq_hz
        if pm.set_frequency(freq):
            self._check(pm)
        level = pm.read_power_dbm()  # corrected by the sensor's calibration factor:
        level -= self.bench.sensor.cal_factor_db(freq, self.bench.where(("sensor", "cal_factor")))
        return ReadingRecord(name=reading.name, kind=reading.kind, port="rf", freq_hz=freq,
                             level_dbm=level)

    def _read_supply(self, point: Point, reading: Reading) -> ReadingRecord:
        dc = self.d.dc
        if dc is None:
            raise InputError("the supply_current reading needs the DC supply", where="bench",
                             fix="add roles.dc to the bench file")
        current, voltage, limited = dc.read_output()
        extra: dict[str, object] = {"current_a": current, "voltage_v": voltage}
        if limited is not None:
            extra["current_limited"] = limited
        if supply_limited(limited, voltage, point.supply_v):
            # the part ran below its stated supply: every figure of the point is flagged
            extra["supply_flags"] = [SUPPLY_LIMITED]
            self._tell_supply_limited(
                point.index, "in current limit" if limited else "below its setting",
                f" ({voltage:.3f} V, {current * 1e3:.1f} mA against {point.supply_v:g} V set)")
        return ReadingRecord(name=reading.name, kind=reading.kind, port="dc", extra=extra)

    # -- errors -----------------------------------------------------------------------------

    def _switch_to(self, port: str) -> None:
        """Route the analyzer to the DUT's ``port`` through the bench's switch (if any): sent
        only when the selection changes, then its errors read and the channel read back (a
        lost or refused command would leave the reading on another port: an isolation read at
        the IF port, say, with nothing to show for it). A channel that reads open raises (the
        point is measured again)."""
        switch = self.d.switch
        if switch is None:
            return
        channel = self.bench.switch_channel(port)
        if switch.select(channel):
            self._check(switch)
            switch.confirm(channel)

    def _check(self, *drivers: Driver) -> None:
        """Drain the error queue of each instrument configured in the last block."""
        for driver in drivers:
            driver.check_errors()


#: A search is aimed (narrow span) when the predicted offset is known to this many standard
#: deviations within the planned span (common practice for a Gaussian estimate, no source).
AIM_SIGMAS = 4.0
#: RBW of the once-per-run survey of each source's line, Hz (its window of a few kHz then
#: sweeps in about a second; common practice, no source).
SURVEY_RBW_HZ = 100.0
#: Trace points per RBW a wide search asks for, so that no line falls between two points
#: (common practice, no source); the analyzer's default point count.
POINTS_PER_RBW = 2.5
DEFAULT_TRACE_POINTS = 1001


@dataclass(frozen=True)
class Aim:
    """Where a searched reading looks: window centre and half-width, span and trace points
    (None: as they are), the product's reference coefficients, and whether the centre was
    predicted from the offsets found before (``aimed``) or the whole window is searched."""

    centre_hz: float
    span_hz: float
    half_width_hz: float
    points: int | None
    coefficients: dict[str, float]
    aimed: bool


def search_extra(reading: Reading, found: Found, aim: Aim) -> dict[str, object]:
    """What a windowed search adds to a reading's ``extra``: the window, the bound the
    references explain, the offset found (None: nothing stood out of the noise) and its
    flags (``search_flags``, read into the flag masks by the analysis)."""
    out: dict[str, object] = {"search": {
        "window_hz": aim.half_width_hz, "aimed": aim.aimed, "centre_hz": aim.centre_hz,
        "bound_hz": reading.offset_bound_hz,
        "offset_hz": found.offset_hz, "found": found.freq_hz is not None,
        "resolution_hz": found.resolution_hz}}
    if found.flags:
        out["search_flags"] = list(found.flags)
    return out


#: A reading at least this far above every noise marker takes its floor from the markers and
#: reads no trace: one log-detected sample of noise scatters by about 5.6 dB (standard
#: result, :mod:`sweeprig.engine.noise_floor`), so a dip of 20 dB under the mean is a
#: one-in-a-hundred event per marker, one in a million for all three; with the analysis'
#: widest noise margin (10 dB, :mod:`sweeprig.analysis.validity`) a reading this clear is
#: never near its floor (common practice, no source).
MARKER_FLOOR_CLEAR_DB = 35.0
#: Noise markers read with a reading (the floor is their mean in dB; the clearance is judged
#: against the highest, so one marker on an unexpected line only sends the reading to the
#: trace).
NOISE_MARKERS = 3
#: Where the noise markers may sit, as fractions of the span from the centre (both sides),
#: tried in this order (common practice, no source).
_NOISE_MARKER_SPAN_FRACTIONS = (0.42, -0.42, 0.30, -0.30, 0.18, -0.18)


def noise_marker_hz(reading: Reading, centre_hz: float, span_hz: float, rbw_hz: float
                    ) -> tuple[float, ...]:
    """Up to :data:`NOISE_MARKERS` frequencies, Hz, inside the span and more than
    ``MASK_HALF_WIDTH_RBW`` RBWs from the product and every line the plan expects there (the
    same mask as the trace estimate); () when fewer fit (zero or narrow span): the floor is
    then read from the trace."""
    if span_hz <= 0 or reading.freq_hz is None:
        return ()
    lines = [f for f in (reading.freq_hz, *reading.known_hz) if math.isfinite(f)]
    half = MASK_HALF_WIDTH_RBW * rbw_hz
    chosen: list[float] = []
    for fraction in _NOISE_MARKER_SPAN_FRACTIONS:
        f = centre_hz + fraction * span_hz
        if all(abs(f - line) > half for line in lines):
            chosen.append(f)
        if len(chosen) == NOISE_MARKERS:
            return tuple(chosen)
    return ()


def floor_from_markers(level_dbm: float, samples_dbm: tuple[float, ...]) -> NoiseFloor | None:
    """The floor from noise markers (the mean of their levels in dB: the displayed noise's
    mean in dB is its power, :mod:`sweeprig.engine.noise_floor`), dBm, when the reading
    stands at least :data:`MARKER_FLOOR_CLEAR_DB` above the highest; None otherwise (read
    the trace)."""
    if len(samples_dbm) < NOISE_MARKERS or not all(math.isfinite(x) for x in samples_dbm):
        return None
    if not math.isfinite(level_dbm) or level_dbm - max(samples_dbm) < MARKER_FLOOR_CLEAR_DB:
        return None
    # the mean in plain float arithmetic: the same sum in the same order as numpy's for so
    # few values (pinned in tests/engine), without making an array for three numbers
    return NoiseFloor(sum(samples_dbm) / len(samples_dbm), len(samples_dbm))


def _connection_of(port: str) -> str:
    return {"if": "if", "rf": "rf_port", "lo": "lo_port"}[port]


def _reading_extra(reading: Reading, level_dbm: float, loss_db: float,
                   floor: NoiseFloor | None = None) -> dict[str, object]:
    extra: dict[str, object] = {"analyzer_level_dbm": level_dbm, "path_loss_db": loss_db}
    if floor is not None and floor.dbm is None:
        extra["noise_floor_unknown"] = floor.reason
    if reading.orders is not None and len(reading.orders) > 2:
        extra["orders"] = list(reading.orders)
    if reading.repeat_of is not None:
        extra["repeat_of"] = reading.repeat_of
    if reading.expected_dbm is not None and math.isfinite(reading.expected_dbm):
        extra["expected_dbm"] = reading.expected_dbm
    if reading.predicted is not None:  # seam A: the planner's risks and the numbers behind
        extra["risks"] = sorted(reading.risks)
        extra["predicted"] = reading.predicted.as_dict()
    return extra


def window_spread(curve: list[tuple[float, float, float]], window_s: float) -> float | None:
    """Spread (max − min) of the readings in the last ``window_s`` of ``curve`` ((time,
    probe, value) rows); None until the readings cover the whole window."""
    if not curve:
        return None
    last = curve[-1][0]
    if curve[0][0] > last - window_s + 1e-9:
        return None
    values = [v for t, _p, v in curve if t >= last - window_s - 1e-9]
    return max(values) - min(values)


def is_settled(curve: list[tuple[float, float, float]], window_s: float,
               drift: float) -> bool:
    """True when the readings over the whole last ``window_s`` spread by at most ``drift``."""
    spread = window_spread(curve, window_s)
    return spread is not None and spread <= drift


def _clock_text(seconds: float) -> str:
    """``1:05:00`` / ``4:10`` for a duration in seconds (rounded up: never shows 0:00 early)."""
    whole = math.ceil(max(seconds, 0.0))
    hours, rest = divmod(whole, 3600)
    minutes, secs = divmod(rest, 60)
    return f"{hours}:{minutes:02d}:{secs:02d}" if hours else f"{minutes}:{secs:02d}"


class WaitReporter:
    """Tells the store (a heartbeat with the activity) and the live display what a run is
    waiting for, at most once per :data:`WAIT_HEARTBEAT_S` of wall time."""

    def __init__(self, store: RunStore, run_id: int,
                 on_wait: Callable[[Mapping[str, Any]], None] | None = None) -> None:
        self.store = store
        self.run_id = run_id
        self.on_wait = on_wait
        self._last = -math.inf

    def restart(self) -> None:
        """A new wait: its first :meth:`tell` is written whatever the timer says."""
        self._last = -math.inf

    def due(self) -> bool:
        """True when the next :meth:`tell` will be written."""
        return time.monotonic() - self._last >= WAIT_HEARTBEAT_S

    def tell(self, activity: Mapping[str, Any]) -> None:
        if not self.due():
            return
        self.store.heartbeat(self.run_id, activity)
        self._last = time.monotonic()
        if self.on_wait is not None:
            self.on_wait(activity)


def soak(clock: Clock, seconds: float, setpoint_c: float, read_probe: Callable[[], float],
         waits: WaitReporter,
         eta: Callable[[float], Mapping[str, float]] | None = None) -> None:
    """Let ``seconds`` of bench time pass at ``setpoint_c``, in slices of at most
    :data:`WAIT_SLICE_S`, telling ``waits`` (with a fresh probe reading) whenever a heartbeat
    is due: the run is seen live however long the soak, and what it waits for is shown."""
    end = clock.now() + seconds
    waits.restart()
    probe: float | None = None
    while (left := end - clock.now()) > 0:
        fields: Mapping[str, float] = {}
        if waits.due():
            probe = read_probe()
            fields = eta(left) if eta is not None else {}
        waits.tell({"what": "soak", "setpoint_c": setpoint_c, "probe_c": probe,
                    "left_s": left, "total_s": seconds, **fields,
                    "label": f"soak at {setpoint_c:g} °C"
                             + (f", probe at {probe:.2f} °C" if probe is not None else "")
                             + f", {_clock_text(left)} left of {_clock_text(seconds)}"})
        clock.sleep(min(left, WAIT_SLICE_S))


class SettleWait:
    """The settling time after the sources changed, waited out just before the next message
    to any instrument (every driver's :attr:`~sweeprig.instruments.driver.Driver.before_message`)
    or at the end of the point's readings, whichever comes first.

    The engine's own work in between (building the analyzer's message, checking its cached
    settings) then runs inside the settling time instead of after it. On the wall clock the
    time since :meth:`start` counts towards the wait, so the first message still leaves at
    least the settling time after the sources answered their completion queries. On any
    other clock (the simulated bench's virtual time, the simulator's own) the whole time is
    slept, at the same place among the point's exchanges as before, so simulated readings do
    not change: the engine's work takes no virtual time.
    """

    def __init__(self, clock: Clock) -> None:
        self.clock = clock
        self._wall = isinstance(clock, WallClock)
        self._seconds: float | None = None
        self._started = 0.0

    def start(self, seconds: float) -> None:
        """The sources have answered: the next message waits until ``seconds`` have passed."""
        self._seconds = seconds
        self._started = time.monotonic()

    def wait(self) -> None:
        """Wait out what is left of the settling time (nothing when none is pending)."""
        seconds = self._seconds
        if seconds is None:
            return
        self._seconds = None  # first: the clock's own sleep may send a message
        if self._wall:
            seconds -= time.monotonic() - self._started
        self.clock.sleep(seconds)


def _reset(role: str, driver: Driver, during: str) -> InstrumentReset:
    """The fault of an instrument whose power-on bit was read set after ``during``."""
    return InstrumentReset(
        f"role {role!r} reset itself during {during} (power-on bit set)",
        where=driver.where(),
        fix="check the instrument's power; the point is measured again",
    )


def _finish_all(posted: list[tuple[Driver, Pending | None]],
                finish: Callable[[Driver, Pending | None], None]) -> InstrumentError | None:
    """``finish`` every posted query (each instrument's reply read, in posting order) even
    when one fails; returns the first failure (None if all went well)."""
    failure: InstrumentError | None = None
    for driver, pending in posted:
        try:
            finish(driver, pending)
        except InstrumentError as exc:
            failure = failure or exc
    return failure
