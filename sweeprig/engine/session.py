"""One run, start to finish: files → pre-flight → bench → store → points → safe state.

:func:`run_sequence` is the Python API behind ``sweeprig run``. Everything that can be
refused is refused before an instrument is touched: the files are loaded and validated, the
pre-flight check predicts every port power of every point against the limits, and only then
are the instruments opened (identification only), the run recorded, and outputs enabled.

Whatever ends the run — the last point, an exception, Ctrl-C (SIGINT), SIGTERM or SIGHUP —
the bench is put in its safe state (RF off, supply safe, chamber idle), the safe state is
read back, and the run is marked ``complete`` or ``aborted`` with its reason — or ``unsafe``
when any instrument's safe state could not be verified (the reason names each one).

When the run store fails (its file or folder deleted, moved or replaced; disk full; read-only;
I/O error) the run stops measuring at once, the bench is made safe, and the run is marked
``aborted`` with the store's real cause — in the store if it can still be written, otherwise in
a note beside it (``<store>.run-<id>.failed.txt``; failing that in the log's folder or the
current one). A run is only ``complete`` when the store, read back, holds its points; the
count reported is the one read back.
"""

from __future__ import annotations

import json
import logging
import os
import re
import sys
import time
from collections.abc import Callable, Mapping
from contextlib import suppress
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from sweeprig.clock import Clock, VirtualClock, WallClock
from sweeprig.engine.connect import BenchDrivers, open_bench
from sweeprig.engine.eta import EtaTracker
from sweeprig.engine.locks import BenchLock
from sweeprig.engine.next_steps import next_steps
from sweeprig.engine.runner import PointResult, RecoveryPolicy, Runner
from sweeprig.engine.safe import SafeOutcome, make_safe
from sweeprig.engine.sim_specs import is_shipped_sim_bench, with_sim_figures
from sweeprig.engine.simclock import SimControlClock
from sweeprig.errors import BenchUnsafeError, InputError, StoreError, SweeprigError
from sweeprig.files import read_file_text, sha256_text
from sweeprig.formats.bench import Bench, load_bench
from sweeprig.formats.calibration import (
    Calibration,
    apply_calibration,
    check_calibration_age,
    check_calibration_instruments,
    load_calibration,
)
from sweeprig.formats.sequence import Sequence, load_sequence, required_roles
from sweeprig.instruments import available_profiles
from sweeprig.oslock import FileLock
from sweeprig.plan.duration import estimate_duration
from sweeprig.plan.expand import count_points, iter_points
from sweeprig.plan.preflight import PreflightReport, check_roles, preflight
from sweeprig.plan.spec_coverage import check_specs
from sweeprig.signals import (
    RunStopped,
    handles_stop_signals,
    raise_pending,
    stop_path,
    uninterrupted,
)
from sweeprig.store.base import (
    DEFAULT_STORE_PATH,
    INCLUDE_FILE,
    MERGED_SEQUENCE,
    BusRecord,
    InstrumentRecord,
    RunFile,
)
from sweeprig.store.open import StoreTarget, open_run_store, store_label, store_target
from sweeprig.store.paths import run_file_name, run_log_path
from sweeprig.store.runlock import hold_run_lock, run_lock_held
from sweeprig.store.sql import SqlRunStoreCore
from sweeprig.store.sqlite import SqliteRunStore

SIM_BENCH_FILE = "benches/sim.toml"
"""The built-in simulated bench's bench file, inside the shipped sequences folder."""


def _open_store(target: StoreTarget, *, create: bool = True,
                durable: bool = True) -> SqliteRunStore | SqlRunStoreCore:
    """The run's store: an SQLite file (:class:`SqliteRunStore`), or the lab database."""
    if isinstance(target, Path):
        return SqliteRunStore(target, create=create, durable=durable)
    return open_run_store(target, create=create)  # type: ignore[return-value]


@dataclass(frozen=True)
class RunOutcome:
    """How a run ended."""

    run_id: int
    status: str
    reason: str | None
    points_done: int
    points_total: int
    store_path: StoreTarget
    log_path: Path
    sim_elapsed_s: float
    wall_elapsed_s: float
    predicted_bench_s: float
    safe: SafeOutcome | None
    store_error: str | None = None
    """The run store's failure that stopped the run (or kept its end from being recorded)."""
    store_note: Path | None = None
    """Where the run's end was written when the store could not take it."""
    points_read_back: bool = True
    """False when the store could not be read back (``points_done`` is then 0)."""
    end_recorded: bool = True
    """False when how the run ended could be written neither to the store nor to a note."""
    next_steps: tuple[str, ...] = ()
    """The commands to run next (``safe``, ``resume``) when the run did not complete."""


@dataclass(frozen=True)
class LoadedFiles:
    """Validated inputs of a run. ``sequence_files``: the fragments the sequence included and
    the merged sequence (see :class:`~sweeprig.store.base.RunFile`), stored with the run."""

    sequence: Sequence
    sequence_path: Path
    sequence_text: str
    bench: Bench
    bench_path: Path
    bench_text: str
    simulated: bool
    report: PreflightReport
    sequence_files: tuple[RunFile, ...] = ()
    calibration: Calibration | None = None
    accept_calibration: bool = False
    calibration_warnings: tuple[str, ...] = ()
    sim_warnings: tuple[str, ...] = ()
    """Why the simulated part cannot serve the sequence (:mod:`sweeprig.engine.sim_fit`):
    printed by ``run --sim`` and recorded with the run."""


def sequence_files(sequence: Sequence, path: Path) -> tuple[RunFile, ...]:
    """The fragments ``sequence`` included (exact texts) and the merged sequence as JSON."""
    files = [RunFile(INCLUDE_FILE, str(p), sha256_text(text), text)
             for p, text in sequence.included_files]
    if sequence.merged_table is not None:
        merged = json.dumps(sequence.merged_table, sort_keys=True, default=str)
        files.append(RunFile(MERGED_SEQUENCE, str(path), sha256_text(merged), merged))
    return tuple(files)


def shipped_sequences_dir() -> Path:
    """The ``sequences/`` folder: inside the installed package, else the source checkout's."""
    here = Path(__file__).resolve().parent.parent
    for candidate in (here / "_sequences", here.parent / "sequences"):
        if candidate.is_dir():
            return candidate
    return here.parent / "sequences"


def served_bench_text(resources: Mapping[str, str], description: object = None) -> str:
    """The built-in simulated bench's bench file with each ``resource = "sim"`` replaced by
    the VISA resource string of a served simulated instrument (``sweeprig sim serve``), so the
    engine can run on it exactly as on a real bench; with a sim-bench ``description``, its
    stated analyzer and source figures are the description's, and the roles it serves from
    the second family take that family's profiles (and ``[timebase]``)."""
    text = (shipped_sequences_dir() / SIM_BENCH_FILE).read_text(encoding="utf-8")
    from sweeprig.sim.bench import SimBenchDescription

    if isinstance(description, SimBenchDescription):
        from sweeprig.engine.sim_specs import family_bench_text, figures_toml

        text = re.sub(r"^# BEGIN stated figures\n.*^# END stated figures\n",
                      lambda _: f"# BEGIN stated figures\n{figures_toml(description)}"
                      "# END stated figures\n", text, flags=re.M | re.S)
        text = family_bench_text(text, description)  # the second family's profiles

    def fill(match: re.Match[str]) -> str:
        role = match.group(1)
        if role not in resources:
            return match.group(0)
        return f'{role}{match.group(2)}{{ resource = "{resources[role]}"'

    text = re.sub(r'^(\w+)(\s*=\s*)\{\s*resource\s*=\s*"sim"', fill, text, flags=re.M)
    if "simctl" in resources and not re.search(r"^simctl\s*=", text, flags=re.M):
        line = f'simctl  = {{ resource = "{resources["simctl"]}", profile = "sim-control" }}'
        text = re.sub(r"^\[roles\]\n", f"[roles]\n{line}\n", text, count=1, flags=re.M)
    return text


def load_run_files(sequence_path: str | Path, bench_path: str | Path | None, *,
                   sim: bool, sim_description: object = None,
                   calibration: str | Path | None = None,
                   accept_calibration: bool = False) -> LoadedFiles:
    """Load and check the sequence and bench files and run the pre-flight check.

    Touches no instrument. ``sim`` with no bench file uses the built-in simulated bench's
    bench file. Raises :class:`SweeprigError` subclasses with file/line/key messages.
    """
    seq_path = Path(sequence_path)
    sequence = load_sequence(seq_path)
    check_specs(sequence)
    if bench_path is None:
        if not sim:
            raise _NoBench()
        bench_path = shipped_sequences_dir() / SIM_BENCH_FILE
    b_path = Path(bench_path)
    bench = load_bench(b_path, known_profiles=available_profiles())
    if sim and is_shipped_sim_bench(b_path, shipped_sequences_dir() / SIM_BENCH_FILE):
        bench = with_sim_figures(bench, sim_description)  # the served analyzer's own figures
    check_roles(sequence, bench)
    cal, cal_warnings = None, []
    if calibration is not None:  # before the pre-flight: it checks the calibrated grid
        cal = load_calibration(calibration)
        warning = check_calibration_age(cal, datetime.now(UTC), accept=accept_calibration)
        cal_warnings += [warning] if warning else []
        apply_calibration(bench, cal)
    report = preflight(sequence, bench)
    sim_warnings: list[str] = []
    if sim:
        from sweeprig.engine.sim_fit import sim_part_warnings

        sim_warnings = sim_part_warnings(sequence, sim_description)
    return LoadedFiles(
        sequence=sequence,
        sequence_path=seq_path,
        sequence_text=_read_text(seq_path),
        sequence_files=sequence_files(sequence, seq_path),
        bench=bench,
        bench_path=b_path,
        bench_text=_read_text(b_path),
        simulated=sim,
        report=report,
        calibration=cal,
        accept_calibration=accept_calibration,
        calibration_warnings=tuple(cal_warnings),
        sim_warnings=tuple(sim_warnings),
    )


class _NoBench(SweeprigError):
    def __init__(self) -> None:
        super().__init__(
            "no bench given",
            where="sweeprig run",
            fix="give --bench BENCH.toml for real instruments, or --sim for the simulated bench",
        )


@dataclass(frozen=True)
class ResumePlan:
    """What a resumed run continues: its id, the points already stored, and the instrument
    identities it started with (role → ``*IDN?``)."""

    run_id: int
    done: frozenset[int]
    identities: Mapping[str, str]
    accept_changes: bool = False
    previous: str = ""
    """How the run had ended (status and reason), kept in the resume event."""


def run_sequence(
    sequence_path: str | Path,
    bench_path: str | Path | None = None,
    *,
    sim: bool = False,
    sim_description: str | Path | None = None,
    store_path: str | Path = DEFAULT_STORE_PATH,
    realtime: bool = False,
    bus_log: bool = False,
    on_start: Callable[[int, int, LoadedFiles], None] | None = None,
    on_point: Callable[[PointResult], None] | None = None,
    log_dir: str | Path | None = None,
    on_wait: Callable[[Mapping[str, Any]], None] | None = None,
    calibration: str | Path | None = None,
    accept_calibration: bool = False,
) -> RunOutcome:
    """Run a sequence on a bench (or the in-process simulated bench) into a store.

    ``calibration``: a calibration file whose measured losses replace the bench's typed
    ones; an expired one, or one made with other instruments, is refused unless
    ``accept_calibration`` (then the run records a warning). It is stored with the run.

    ``bus_log``: record every SCPI exchange in the store. ``on_start(run_id, total_points,
    files)`` is called once the run is recorded; ``on_point`` after each committed point;
    ``on_wait(activity)`` when the run waits (chamber, soak) and at each heartbeat of a wait.
    Returns how the run ended; raises only for problems found before any output was enabled
    (bad files, pre-flight refusals, a busy or wrong instrument).
    """
    files = load_run_files(sequence_path, bench_path, sim=sim, sim_description=sim_description,
                           calibration=calibration, accept_calibration=accept_calibration)
    return _execute(files, store_path=store_target(store_path),
                    sim_description=sim_description, realtime=realtime, bus_log=bus_log,
                    on_start=on_start, on_point=on_point, log_dir=log_dir, resume=None,
                    on_wait=on_wait)


def run_loaded(
    files: LoadedFiles,
    *,
    store_path: str | Path = DEFAULT_STORE_PATH,
    sim_description: str | Path | None = None,
    realtime: bool = False,
    on_start: Callable[[int, int, LoadedFiles], None] | None = None,
    on_point: Callable[[PointResult], None] | None = None,
    on_wait: Callable[[Mapping[str, Any]], None] | None = None,
    log_dir: str | Path | None = None,
) -> RunOutcome:
    """:func:`run_sequence` for files already loaded and checked (a night plan checks every
    part before the first runs; a lab worker gives each run its serial)."""
    return _execute(files, store_path=store_target(store_path),
                    sim_description=sim_description, realtime=realtime, bus_log=False,
                    on_start=on_start, on_point=on_point, log_dir=log_dir, resume=None,
                    on_wait=on_wait)


def resume_run(
    run_id: int,
    *,
    store_path: str | Path = DEFAULT_STORE_PATH,
    accept_changes: bool = False,
    sim_description: str | Path | None = None,
    bus_log: bool = False,
    on_start: Callable[[int, int, LoadedFiles], None] | None = None,
    on_point: Callable[[PointResult], None] | None = None,
    log_dir: str | Path | None = None,
    on_wait: Callable[[Mapping[str, Any]], None] | None = None,
) -> RunOutcome:
    """Continue an interrupted or aborted run: measure only the points not yet stored.

    Takes the run's lock first, so a run that another process runs or resumes is refused
    (:class:`~sweeprig.store.runlock.RunBusy`). Refuses (:class:`InputError`) a run that is
    complete, and — unless
    ``accept_changes`` — a run whose sequence or bench file changed since it started or
    whose instruments answer ``*IDN?`` differently, naming what differs. The instrument
    state is set up again from the plan and the store, never from memory.
    """
    store_path = store_target(store_path)
    label = store_label(store_path)
    store = _open_store(store_path, create=False)
    run_lock: FileLock | None = None
    try:
        seen = store.run(run_id)  # a run that does not exist is refused before any lock file
        if seen.status == "running" and not run_lock_held(store_path, run_id):
            # Alive by its heartbeat on another host, whose run lock may not be visible here.
            raise InputError(
                f"run {run_id} may still be running (process {seen.pid} on {seen.host})",
                where=f"{label}: run {run_id}",
                fix="wait for it to end, or stop it first (Ctrl-C or SIGTERM in its terminal)")
        run_lock = hold_run_lock(store_path, run_id, f"a resume of run {run_id}")
        info = store.run(run_id)
        recorded_files = store.run_files(run_id)
        done = frozenset(store.done_point_indices(run_id))
        used = next((e.details for e in store.events(run_id)
                     if e.kind == "calibration" and "text" in e.details), None)
    except BaseException:
        if run_lock is not None:
            run_lock.release()
        raise
    finally:
        store.close()
    try:
        if info.stored_status == "complete":
            raise InputError(f"run {run_id} is already complete ({info.points_done} points)",
                             where=f"{label}: run {run_id}",
                             fix="nothing to resume; start a new run with `sweeprig run`")
        differences = _file_differences(info, recorded_files)
        if differences and not accept_changes:
            raise InputError(
                f"run {run_id}'s files changed since it started: " + "; ".join(differences),
                where=f"{label}: run {run_id}",
                fix="put the files back as they were, or resume with --accept-changes if the "
                "change cannot affect the measurements")
        cal_path = None
        if used is not None:  # the same corrections as the points already stored
            cal_path = str(used["path"])
            try:
                same = read_file_text(cal_path, what="calibration file") == used["text"]
            except (InputError, UnicodeDecodeError):
                same = False
            if not same:
                raise InputError(
                    f"run {run_id} used the calibration {cal_path}, which has changed or "
                    "cannot be read: the rest of the run would get other corrections",
                    where=f"{label}: run {run_id}",
                    fix="put the calibration file back as it was (its text is stored with "
                    "the run), or start a new run")
        files = load_run_files(info.sequence_path, info.bench_path, sim=info.simulated,
                               sim_description=sim_description, calibration=cal_path,
                               accept_calibration=accept_changes)
    except BaseException:
        run_lock.release()
        raise
    plan = ResumePlan(run_id, done, {i.role: i.idn for i in info.instruments},
                      accept_changes, f"{info.status}: {info.reason}" if info.reason
                      else info.status)
    try:
        return _execute(files, store_path=store_path, sim_description=sim_description,
                        realtime=False, bus_log=bus_log, on_start=on_start, on_point=on_point,
                        log_dir=log_dir, resume=plan, run_lock=run_lock, on_wait=on_wait)
    finally:
        run_lock.release()  # idempotent; _execute releases it once the run's status is final


def _file_differences(info: object, recorded: tuple[RunFile, ...] = ()) -> list[str]:
    """What differs between the files now on disk and the texts the run started with: the
    sequence, the bench and every fragment the sequence included."""
    out: list[str] = []
    pairs = [("sequence", info.sequence_path, info.sequence_text)]  # type: ignore[attr-defined]
    if info.bench_path:  # type: ignore[attr-defined]
        pairs.append(("bench", info.bench_path, info.bench_text))  # type: ignore[attr-defined]
    pairs += [("included", f.path, f.text) for f in recorded if f.role == INCLUDE_FILE]
    for label, path, stored in pairs:
        try:
            now = read_file_text(path, what=f"{label} file")
        except (InputError, UnicodeDecodeError) as exc:  # gone, a pipe, too big, not text
            reason = exc.what if isinstance(exc, InputError) else "not UTF-8 text"
            out.append(f"{label} file {path} cannot be read ({reason})")
            continue
        if now != (stored or ""):
            out.append(f"{label} file {path} differs ({_first_difference(stored or '', now)})")
    return out


def _first_difference(old: str, new: str) -> str:
    old_lines, new_lines = old.splitlines(), new.splitlines()
    for number, (a, b) in enumerate(zip(old_lines, new_lines, strict=False), start=1):
        if a != b:
            return f"line {number} was {a.strip()!r}, is {b.strip()!r}"
    return f"{len(old_lines)} lines then, {len(new_lines)} now"


@handles_stop_signals
def _execute(
    files: LoadedFiles,
    *,
    store_path: StoreTarget,
    sim_description: str | Path | None,
    realtime: bool,
    bus_log: bool,
    on_start: Callable[[int, int, LoadedFiles], None] | None,
    on_point: Callable[[PointResult], None] | None,
    log_dir: str | Path | None,
    resume: ResumePlan | None,
    run_lock: FileLock | None = None,
    on_wait: Callable[[Mapping[str, Any]], None] | None = None,
) -> RunOutcome:
    """The run itself, new or resumed (see the module docstring). ``run_lock``: the run's
    lock, already held by a resume (a new run takes its own once recorded); released here."""
    total = count_points(files.sequence)
    estimate = estimate_duration(files.sequence, files.bench, planned=files.report.points)
    predicted = estimate.total_s
    store = _open_store(store_path, durable=not files.simulated)
    wall0 = time.monotonic()
    sim_bench = None
    drivers: BenchDrivers | None = None
    lock: BenchLock | None = None
    run_id: int | None = None
    status, reason = "aborted", "did not start"
    steps: tuple[str, ...] = ()
    store_failure: StoreError | None = None
    expected_stored: int | None = None
    closing = _Closing(status, reason, None, 0, False, None, recorded=False)
    safe: SafeOutcome | None = None
    clock: Clock = WallClock()
    sim_t0 = 0.0
    log_dir = (Path(log_dir) if log_dir is not None else store_path.parent
               if isinstance(store_path, Path) else Path("."))
    log_path = log_dir / run_file_name(store_path, 0, ".log")  # replaced once the run has an id
    logger: logging.Logger | None = None
    bus: list[BusRecord] = []
    try:
        with stop_path():  # a first signal stops the run; later ones cannot cut the finish
            resources: dict[str, str] = {}
            roles = required_roles(files.sequence, files.bench.noise_drive_role)
            if files.simulated or files.bench.is_simulated():
                from sweeprig.sim.bench import start_sim_bench

                clock = VirtualClock(realtime_factor=1.0 if realtime else 0.0)
                sim_bench = start_sim_bench(
                    sim_description_for(files.sequence, sim_description), clock=clock)
                resources = dict(sim_bench.resources)
            else:
                label = f"run {resume.run_id}" if resume else f"a run of {files.sequence_path}"
                lock = BenchLock(_bench_resources(files.bench, roles),
                                 f"{label} (store {store_label(store_path)})").acquire()
            sim_t0 = clock.now()
            hook = (lambda role, t: bus.append(BusRecord(
                datetime.fromtimestamp(t.time_s, UTC), role, t.sent, t.received,
                t.duration_s))) if bus_log else None
            drivers = open_bench(files.bench, roles, resources=resources, clock=clock,
                                 on_transaction=hook, lock=lock)
            if sim_bench is None and drivers.simctl is not None:
                bench_drivers = [d for _, d in drivers.items()]
                clock = SimControlClock(  # a served simulated bench
                    drivers.simctl,
                    traffic=lambda: sum(d.transactions for d in bench_drivers))
                sim_t0 = clock.now()
            if resume is not None:
                _check_identities(drivers, resume)
            cal_warnings = list(files.calibration_warnings)
            if files.calibration is not None:  # before any output is enabled
                warning = check_calibration_instruments(
                    files.calibration, {role: d.idn or "" for role, d in drivers.items()},
                    accept=files.accept_calibration)
                cal_warnings += [warning] if warning else []
            seq = files.sequence
            if resume is None:
                run_id = uninterrupted(
                    store.create_run,
                    sequence_path=str(files.sequence_path),
                    sequence_text=files.sequence_text,
                    bench_path=str(files.bench_path),
                    bench_text=files.bench_text,
                    simulated=sim_bench is not None,
                    operator=seq.about.operator,
                    part=seq.part.id,
                    serial=seq.part.serial,
                    tags=seq.about.tags,
                    title=seq.about.title,
                    points_total=total,
                    status="running",
                    files=files.sequence_files,
                )
                run_lock = uninterrupted(hold_run_lock, store_path, run_id,
                                         f"a run of {files.sequence_path}")
                raise_pending()  # a stop while the run was being recorded ends it here
            else:
                run_id = resume.run_id
                store.set_status(run_id, "running")
            log_path = run_log_path(store_path, run_id, log_dir)
            logger = _file_logger(log_path, run_id)
            if resume is None:
                logger.info("run %d: %s on %s (%d points, predicted %.0f s on a real bench)",
                            run_id, files.sequence_path, files.bench_path, total, predicted)
            else:
                message = (f"resumed: {len(resume.done)} of {total} points were stored; "
                           f"measuring the other {total - len(resume.done)}"
                           + (f" (it had ended {resume.previous})" if resume.previous else ""))
                logger.info("run %d %s", run_id, message)
                store.log_event(run_id, "info", "resume", message)
            if resume is None:
                for warning in files.report.warnings:
                    store.log_event(run_id, "warning", "preflight", warning)
            for role, texts in drivers.startup_errors.items():
                store.log_event(run_id, "info", "error_queue",
                                f"role {role!r} queue held at start: " + "; ".join(texts))
            for note in drivers.timebase_notes:
                store.log_event(run_id, "warning", "timebase", note)
            for note, details in drivers.companion_notes:
                store.log_event(run_id, "warning", "status", note, details)
            store.record_instruments(run_id, [
                InstrumentRecord(role, d.resource, d.profile.name, d.idn or "")
                for role, d in drivers.items()
            ])
            if files.calibration is not None:
                store.log_event(run_id, "info", "calibration", files.calibration.describe(),
                                {"path": files.calibration.path,
                                 "text": files.calibration.text})
            for warning in cal_warnings:
                store.log_event(run_id, "warning", "calibration", warning)
            for warning in files.sim_warnings:
                store.log_event(run_id, "warning", "sim_part", warning)
            store.heartbeat(run_id)
            if on_start is not None:
                on_start(run_id, total, files)

            def point_done(result: PointResult) -> None:
                if bus:
                    store.log_bus(run_id, list(bus))  # type: ignore[arg-type]
                    bus.clear()
                if on_point is not None:
                    on_point(result)

            rec = seq.recovery
            policy = RecoveryPolicy(
                on_error=rec.on_error, point_attempts=rec.point_attempts,
                reconnect_attempts=rec.reconnect_attempts, backoff_s=float(rec.backoff),
                reset_check=rec.reset_check,
            )
            runner = Runner(
                sequence=seq, bench=files.bench, drivers=drivers, store=store, run_id=run_id,
                clock=clock, on_point=point_done, policy=policy,
                log=(logger.info if logger is not None else lambda _m: None), on_wait=on_wait,
                eta=EtaTracker(estimate, total, len(resume.done) if resume is not None else 0),
            )
            points = iter_points(seq, files.bench, planned=files.report.points)
            if resume is not None:
                skip = resume.done
                points = (p for p in points if p.index not in skip)
            runner.run(points)
            expected_stored = total - runner.skipped
            status = "complete"
            reason = (f"{runner.skipped} point(s) skipped by the recovery policy"
                      if runner.skipped else None)
    except KeyboardInterrupt:
        status, reason = "aborted", "stopped by SIGINT (Ctrl-C)"
        if run_id is None:
            raise
    except RunStopped as stop:
        status, reason = "aborted", str(stop)
        if run_id is None:
            raise  # stopped before the run was recorded; the finally block cleans up
    except StoreError as exc:  # data can no longer be kept: stop measuring at once
        status, reason, store_failure = "aborted", exc.message(), exc
        if run_id is None:
            raise
    except SweeprigError as exc:
        status, reason = "aborted", exc.message()
        if run_id is None:
            raise  # refused before the run was recorded; the finally block cleans up
    except Exception as exc:  # an unexpected fault still ends in the safe state
        status, reason = "aborted", f"internal error: {type(exc).__name__}: {exc}"
        if logger is not None:
            logger.exception("unexpected error")
        if run_id is None:  # refused before the run was recorded: say so, as one message
            raise SweeprigError(
                f"the run could not start: {type(exc).__name__}: {exc}",
                where=str(files.sequence_path),
                fix="check the files the sequence and bench name; if they look right, this "
                "is a fault in sweeprig: report it with the files",
            ) from exc
    finally:
        sim_elapsed = _elapsed(clock, sim_t0)
        safe = _finish(drivers, sim_bench, files, logger)
        if run_id is not None:
            if bus:
                store_failure = _store_write(store_failure, store.log_bus, run_id, list(bus))
            if safe is not None and not safe.ok:
                reason = (f"{status}{f': {reason}' if reason else ''}; BENCH NOT PROVEN SAFE: "
                          + "; ".join(message for _name, message in safe.failed))
                status = "unsafe"
                store_failure = _store_write(
                    store_failure, store.log_event, run_id, "error", "safe_state",
                    "bench not proven safe: " + ", ".join(name for name, _m in safe.failed),
                    safe.details())
            elif safe is not None:
                store_failure = _store_write(
                    store_failure, store.log_event, run_id, "info", "safe_state",
                    "safe state read back: " + (", ".join(safe.done) or "nothing to do"),
                    safe.details())
            closing = _record_end(store, run_id, status, reason, store_failure,
                                  expected_stored, log_dir)
            status, reason = closing.status, closing.reason
            steps = next_steps(status, run_id, store_label(store_path),
                               bench_path=files.bench_path,
                               simulated=files.simulated, sim_description=sim_description)
            if steps and closing.recorded and closing.note is None:
                _store_write(None, store.log_event, run_id, "info", "next_steps",
                             "next: " + "; then ".join(steps), {"commands": list(steps)})
            if logger is not None:
                logger.info("run %d %s%s", run_id, status, f": {reason}" if reason else "")
                if closing.note is not None:
                    logger.error("the run's end could not be written to the store; it is in %s",
                                 closing.note)
        store.close()
        if logger is not None:
            for handler in list(logger.handlers):
                handler.close()
                logger.removeHandler(handler)
        if sim_bench is not None:
            sim_bench.close()
        if lock is not None:
            lock.release()
        if run_lock is not None:
            run_lock.release()  # after the final status: the run is over
        if run_id is None and safe is not None and not safe.ok:
            refused = sys.exc_info()[1]  # why it did not start, told first
            why = ("" if refused is None else f"{type(refused).__name__}: {refused}"
                   if not isinstance(refused, SweeprigError) else refused.what
                   if refused.where is None else f"{refused.where}: {refused.what}")
            raise BenchUnsafeError(  # refused before the run was recorded, bench unproven
                (f"the run did not start ({why}); and " if why else "")
                + "BENCH NOT PROVEN SAFE: "
                + "; ".join(message for _name, message in safe.failed),
                where=str(files.bench_path),
                fix="make each instrument named here safe by hand now, then run "
                "`sweeprig safe --bench BENCH` to verify; follow your lab's rules")
    assert run_id is not None
    return RunOutcome(
        run_id=run_id, status=status, reason=reason, points_done=closing.points_stored,
        points_total=total, store_path=store_path, log_path=log_path,
        sim_elapsed_s=sim_elapsed, wall_elapsed_s=time.monotonic() - wall0,
        predicted_bench_s=predicted, safe=safe,
        store_error=None if closing.failure is None else closing.failure.message(),
        store_note=closing.note, points_read_back=closing.read_back,
        end_recorded=closing.recorded, next_steps=steps,
    )


@dataclass(frozen=True)
class _Closing:
    """How the end of a run was recorded: final status and reason, the store failure (if
    any), the points read back from the store, and where the end went if not to the store."""

    status: str
    reason: str | None
    failure: StoreError | None
    points_stored: int
    read_back: bool
    note: Path | None
    recorded: bool = True


def _store_write(failure: StoreError | None, write: Callable[..., object],
                 *args: object) -> StoreError | None:
    """Do one store write of the run's end; return the first store failure seen."""
    try:
        write(*args)
    except StoreError as exc:
        return failure or exc
    return failure


def _record_end(store: SqlRunStoreCore, run_id: int, status: str, reason: str | None,
                failure: StoreError | None, expected_stored: int | None,
                log_dir: Path) -> _Closing:
    """Read the run's points back, decide its final status, and record it.

    ``complete`` only when the store is intact and holds every point measured
    (``expected_stored``); any store failure makes the run ``aborted`` with that cause. When
    the status cannot be written to the store it goes to a note beside it.
    """
    stored, read_back = 0, False
    try:
        store.check_file("reading the run back")
        stored, read_back = len(store.done_point_indices(run_id)), True
    except StoreError as exc:
        failure = failure or exc
    if failure is None and expected_stored is not None and stored < expected_stored:
        failure = StoreError(
            f"the store holds {stored} of the {expected_stored} points measured: points went "
            "missing from it during the run",
            where=store.where,
            fix="check what else writes to this store file; `sweeprig resume RUN_ID` "
            "measures the missing points again",
        )
    if failure is not None and (status == "complete" or not reason):
        status, reason = "aborted", failure.message()
    elif failure is not None and failure.message() not in (reason or ""):
        reason = f"{reason}; then the run store failed: {failure.message()}"
    if reason is not None:  # the fix can name the run
        reason = reason.replace("RUN_ID", str(run_id))
    note, recorded = None, True
    try:
        store.set_status(run_id, status, reason)  # type: ignore[arg-type]
    except StoreError as exc:
        failure = failure or exc
        note = _write_failure_note(getattr(store, "path", None) or store.where, log_dir, run_id,
                                   status, reason, exc)
        recorded = note is not None
    return _Closing(status, reason, failure, stored, read_back, note, recorded)


def _write_failure_note(store_path: Path | str, log_dir: Path, run_id: int, status: str,
                        reason: str | None, error: StoreError) -> Path | None:
    """Write how the run ended to ``<store>.run-<id>.failed.txt``: beside the store, else in
    the log's folder, else in the current folder. Returns where, or None if nowhere could."""
    text = (
        f"sweeprig run {run_id}: {status}\n"
        f"when: {datetime.now(UTC).isoformat(timespec='seconds')}\n"
        f"store: {store_label(store_path)}\n"
        f"reason: {reason}\n"
    )
    if error.message().replace("RUN_ID", str(run_id)) not in (reason or ""):
        text += f"this could not be written to the store: {error.message()}\n"
    name = run_file_name(store_path, run_id, ".failed.txt")
    folders: list[Path] = [store_path.parent, log_dir] if isinstance(store_path, Path) \
        else [log_dir]
    with suppress(OSError):  # the current folder itself may have been deleted
        folders.append(Path.cwd())
    for folder in dict.fromkeys(folders):
        path = folder / name
        try:
            with path.open("w", encoding="utf-8") as handle:
                handle.write(text)
                handle.flush()
                os.fsync(handle.fileno())
        except OSError:
            with suppress(OSError):
                path.unlink()  # a partial note (full disk) helps nobody
            continue
        return path.absolute()
    return None


def _bench_resources(bench: Bench, roles: Mapping[str, str]) -> tuple[str, ...]:
    wanted = [*roles, "simctl"]
    return tuple(r.resource for r in (bench.role(n) for n in wanted) if r is not None)


def _check_identities(drivers: BenchDrivers, resume: ResumePlan) -> None:
    """Compare each instrument's ``*IDN?`` with the one the run started with."""
    changed = [
        f"{role}: was {resume.identities[role]!r}, now {d.idn!r}"
        for role, d in drivers.items()
        if role in resume.identities and resume.identities[role] != d.idn
    ]
    if changed and not resume.accept_changes:
        raise InputError(
            f"run {resume.run_id}'s instruments changed since it started: " + "; ".join(changed),
            where=f"run {resume.run_id}",
            fix="reconnect the original instruments, or resume with --accept-changes if the "
            "replacement is equivalent (its identity is recorded with the run)")


def _elapsed(clock: Clock, t0: float) -> float:
    """Bench-clock time since ``t0``, s (0 when the clock cannot be read any more)."""
    try:
        return clock.now() - t0
    except SweeprigError:
        return 0.0


def sim_description_for(sequence: Sequence, sim_description: object) -> object:
    """The simulated bench to serve for ``sequence``: ``sim_description`` (a model, file,
    shipped name or None for the default) with its part replaced by the sequence's
    ``[part] sim_part`` when the sequence names one (already checked by the loader)."""
    if sequence.part.sim_part is None:
        return sim_description
    from sweeprig.sim.bench import resolve_description

    description = resolve_description(sim_description)  # type: ignore[arg-type]
    return description.model_copy(update={"part": sequence.part.sim_part})


def _finish(drivers: BenchDrivers | None, sim_bench: object, files: LoadedFiles,
            logger: logging.Logger | None) -> SafeOutcome | None:
    """Safe state, then close the instruments (idempotent)."""
    if drivers is None:
        return None
    state = files.bench.safe_state
    supply = None if state.supply in (None, "off") else float(state.supply)
    chamber = None if state.chamber in (None, "off") else float(state.chamber)
    outcome = make_safe(drivers, supply_safe_v=supply, chamber_idle_c=chamber,
                        log=(logger.warning if logger is not None else lambda _m: None))
    drivers.close()
    if logger is not None:
        logger.info("safe state read back: %s", ", ".join(outcome.done) or "nothing to do")
        for _name, message in outcome.failed:
            logger.error("BENCH NOT PROVEN SAFE: %s", message)
    return outcome


def _file_logger(path: Path, run_id: int) -> logging.Logger:
    path.parent.mkdir(parents=True, exist_ok=True)
    logger = logging.getLogger(f"sweeprig.run.{run_id}.{id(path)}")
    logger.setLevel(logging.INFO)
    logger.propagate = False
    handler = _QuietFileHandler(path, encoding="utf-8")
    handler.setFormatter(logging.Formatter("%(asctime)s %(levelname)s %(message)s"))
    logger.addHandler(handler)
    return logger


class _QuietFileHandler(logging.FileHandler):
    """A log file that cannot be written (full disk, folder deleted) is not worth a
    traceback on the terminal: the run's messages there say what matters."""

    def handleError(self, record: logging.LogRecord) -> None:
        pass


def _read_text(path: Path) -> str:
    return read_file_text(path)
