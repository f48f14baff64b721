"""The bench worker: one process per bench takes queued runs it can serve, one at a time.

``sweeprig lab worker --bench BENCH.toml``:

* holds the bench's advisory lock in the lab database for as long as it runs (a second
  worker for the same bench name is refused);
* listens to the queue ``bench-<name>`` and to each ``seq-<hash>`` queue whose sequence its
  bench can serve — the same check as ``sweeprig check``/``run``: every role the sequence
  needs, with a driver profile that does it, and every planned power within the bench's
  limits (:func:`sweeprig.engine.session.load_run_files`); a run it cannot serve stays in the
  queue for another bench;
* takes a job with procrastinate (``fetch_job``: by priority, never two benches one job),
  refuses a run whose files changed since submission (SHA-256), runs it into the lab
  database (the engine, as ``sweeprig run``: pre-flight, safe state, one transaction per
  point), and records which bench ran it (``lab_runs.bench`` and the run's tags);
* before each take, resumes its own bench's runs that a killed worker left (state
  ``running``, the run's lock free): their jobs go back to ``bench-<name>``, so only this
  bench resumes them (the part is physically there); resume measures only the points not yet
  stored, so each point is stored exactly once;
* when its bench has a run that a killed worker cut short, first puts the bench in its safe
  state and reads it back (as ``sweeprig safe``): the instruments kept their last settings,
  RF on included; a bench not proven safe stops the worker before anything is resumed;
* survives a database restart: the failed run is aborted (the engine makes the bench safe),
  the worker reconnects and resumes it.
"""

from __future__ import annotations

import time
import zlib
from collections.abc import Callable
from contextlib import suppress
from dataclasses import dataclass, field, replace
from datetime import timedelta
from pathlib import Path
from typing import TYPE_CHECKING, Any

from sweeprig.errors import BenchUnsafeError, InputError, StoreError, SweeprigError
from sweeprig.lab.queue import (
    MAX_ATTEMPTS,
    LabQueue,
    LabRun,
    bench_queue,
    changed_files,
)
from sweeprig.store.base import utc_now
from sweeprig.store.postgres import connect, redact_url

if TYPE_CHECKING:
    from sweeprig.engine.safe import SafeOutcome


BENCH_LOCK_SPACE = 0x535A
"""First key of a bench's advisory lock (second: CRC-32 of the bench name, as int4)."""

STALLED_S = 60.0
"""A job taken by a worker whose procrastinate heartbeat is older than this, and whose run
no bench has claimed yet, goes back to its queue, s."""

HEARTBEAT_EVERY_S = 5.0
"""How often the worker tells procrastinate it is alive (also between points), s."""


@dataclass
class WorkerSummary:
    """What a worker did: the submissions it finished, by outcome."""

    done: list[int] = field(default_factory=list)
    failed: list[int] = field(default_factory=list)
    interrupted: list[int] = field(default_factory=list)
    idle_reason: str | None = None


def _int4(value: int) -> int:
    return value - 2**32 if value >= 2**31 else value


class BenchWorker:
    """The worker of one bench (see the module docstring). ``once``: take what it can serve
    now and stop when none is left (otherwise poll every ``poll_s``)."""

    def __init__(self, url: str, bench_path: str | Path, *, name: str | None = None,
                 log_dir: str | Path = ".", poll_s: float = 2.0, once: bool = False,
                 say: Callable[[str], None] = print, max_runs: int | None = None) -> None:
        from sweeprig.formats.bench import load_bench
        from sweeprig.instruments import available_profiles

        self.url = url
        self.bench_path = Path(bench_path)
        bench = load_bench(self.bench_path, known_profiles=available_profiles())
        self.name = name or bench.name
        self.log_dir = Path(log_dir)
        self.poll_s = poll_s
        self.once = once
        self.say = say
        self.max_runs = max_runs
        self.queue = LabQueue(url)
        self._bench_conn: Any = None
        self._worker_id: int | None = None
        self._worker_ids: set[int] = set()  # every id this process registered under
        self._last_beat = 0.0
        self._verdicts: dict[str, str | None] = {}  # queue -> None (can serve) or why not
        self.safe_at_start: SafeOutcome | None = None
        """The safe state read back at start, after a run on this bench was cut short."""

    # -- locks and heartbeat ----------------------------------------------------------------

    def _hold_bench(self) -> None:
        """Take (or, after a server restart, take again) this bench's lock."""
        if self._bench_conn is not None:
            try:  # a server restart drops the lock without a word: ask
                self._bench_conn.execute("SELECT 1")
                return
            except Exception:
                with suppress(Exception):
                    self._bench_conn.close()
                self._bench_conn = None
        conn = connect(self.url, what="taking the bench's lock")
        key = _int4(zlib.crc32(self.name.encode()))
        if not conn.execute("SELECT pg_try_advisory_lock(%s, %s)",
                            (BENCH_LOCK_SPACE, key)).fetchone()[0]:
            conn.close()
            raise InputError(f"another worker already serves bench {self.name!r}",
                             where=redact_url(self.url),
                             fix="run one worker per bench (give --name when two bench files "
                             "share a name)")
        self._bench_conn = conn

    def _beat(self, force: bool = False) -> None:
        now = time.monotonic()
        if self._worker_id is None or (not force and now - self._last_beat < HEARTBEAT_EVERY_S):
            return
        self._last_beat = now
        with suppress(StoreError):  # the database is away: the run's own writes say so
            self.queue.run(self.queue.jobs.update_heartbeat(self._worker_id))

    # -- the loop ---------------------------------------------------------------------------

    def run(self) -> WorkerSummary:
        """Serve the queue until stopped (or, with ``once``, until nothing is left)."""
        summary = WorkerSummary()
        taken = 0
        try:
            self._hold_bench()
            self.safe_at_start = self._make_safe_if_cut_short()
            self._register()
            while self.max_runs is None or taken < self.max_runs:
                try:
                    self._hold_bench()
                    self._beat(force=True)
                    self._requeue_dead()
                    queues = self._queues()
                    job = self.queue.run(self.queue.jobs.fetch_job(queues, self._worker_id))
                except StoreError as exc:
                    self.say(f"lab database unavailable, retrying: {exc.what}")
                    self._recover()
                    continue
                if job is None:
                    if self.once:
                        summary.idle_reason = self._why_idle()
                        break
                    time.sleep(self.poll_s)
                    continue
                taken += 1
                self._take(job, summary)
        finally:
            self.close()
        return summary

    def _recover(self) -> None:
        time.sleep(1.0)
        self.queue.reopen()
        self._worker_id_refresh()

    def _register(self) -> None:
        self._worker_id = int(self.queue.run(self.queue.jobs.register_worker()))
        self._worker_ids.add(self._worker_id)

    def _worker_id_refresh(self) -> None:
        with suppress(StoreError):
            self._register()

    def _queues(self) -> list[str]:
        """``bench-<name>`` and every waiting ``seq-`` queue this bench can serve."""
        rows = self.queue.store._read(
            "SELECT queue_name, MIN(id) FROM lab_runs WHERE state = 'queued' AND queue_name "
            "LIKE 'seq-%' GROUP BY queue_name")
        queues = [bench_queue(self.name)]
        for queue_name, lab_id in rows:
            if queue_name not in self._verdicts:
                self._verdicts[queue_name] = self._cannot_serve(self.queue.get(int(lab_id)))
            if self._verdicts[queue_name] is None:
                queues.append(queue_name)
        return queues

    def _cannot_serve(self, entry: LabRun) -> str | None:
        """Why this bench cannot serve ``entry``'s sequence (None: it can). A sequence whose
        files changed is taken (and refused, with the reason, so it leaves the queue)."""
        from sweeprig.engine.session import load_run_files

        if changed_files(entry.files):
            return None
        try:
            load_run_files(entry.sequence_path, self.bench_path, sim=False)
        except SweeprigError as exc:
            return exc.what
        return None

    def _why_idle(self) -> str:
        waiting = self.queue.list(states=("queued",))
        if not waiting:
            return "the queue is empty"
        reasons = sorted({
            f"run {e.id} ({e.sequence_path}): "
            + (self._verdicts.get(e.queue_name) or f"for bench {e.bench_constraint} only")
            for e in waiting})
        return (f"no queued run this bench ({self.name}) can serve; {len(waiting)} waiting, "
                "left in the queue for other benches: " + "; ".join(reasons))

    # -- resuming what a killed worker left -------------------------------------------------

    def _cut_short(self) -> list[LabRun]:
        """This bench's runs left ``running`` by a worker that is gone (their run lock free)."""
        rows = self.queue.store._read(
            "SELECT id FROM lab_runs WHERE bench = ? AND state = 'running'", (self.name,))
        entries = [self.queue.get(int(lab_id)) for (lab_id,) in rows]
        return [e for e in entries
                if e.run_id is None or not self.queue.store._lock_held(e.run_id)]

    def _make_safe_if_cut_short(self) -> SafeOutcome | None:
        """Before anything else, when a worker of this bench died mid-run (SIGKILL, power
        cut): its instruments kept their last settings, RF on included. Put the bench in its
        safe state and read it back (:func:`sweeprig.engine.safe.make_bench_safe`, as
        ``sweeprig safe``); a bench not proven safe stops the worker (nothing resumed on it).
        None when no run was cut short (or the bench is the in-process simulated one)."""
        from sweeprig.engine.safe import make_bench_safe
        from sweeprig.formats.bench import load_bench
        from sweeprig.instruments import available_profiles

        cut = self._cut_short()
        if not cut:
            return None
        bench = load_bench(self.bench_path, known_profiles=available_profiles())
        if bench.is_simulated():
            return None
        runs = ", ".join(f"queued run {e.id}" + (f" (run {e.run_id})" if e.run_id else "")
                         for e in cut)
        self.say(f"bench {self.name}: {runs} was cut short; putting the bench in its safe state "
                 "before resuming")
        outcome = make_bench_safe(bench, log=lambda _m: None)
        for entry in cut:
            if entry.run_id is not None:
                with suppress(StoreError):
                    self.queue.store.log_event(
                        entry.run_id, "info" if outcome.ok else "error", "safe",
                        "bench made safe by its worker before resuming" if outcome.ok else
                        "the bench's worker could not prove the bench safe",
                        outcome.details())
        if not outcome.ok:
            failed = "; ".join(message for _name, message in outcome.failed)
            raise BenchUnsafeError(
                f"bench {self.name} is not proven safe after a run was cut short: {failed}",
                where=str(self.bench_path),
                fix="make it safe by hand (see each instrument above), check it, then start "
                "the worker again; RF power, supplies and chambers can hurt, and your lab's "
                "rules come first")
        self.say(f"bench {self.name}: safe state read back: "
                 + (", ".join(outcome.done) or "nothing to do"))
        return outcome

    def _requeue_dead(self) -> None:
        """This bench's runs left ``running`` by a worker that died go back to this bench's
        queue (this worker is idle and is the bench's only worker, so none of them is alive);
        jobs taken by a dead worker before any bench claimed their run go back to their own
        queue."""
        jobs = self.queue.jobs
        mine = self.queue.store._read(
            "SELECT id FROM lab_runs WHERE bench = ? AND state = 'running'", (self.name,))
        for (lab_id,) in mine:
            entry = self.queue.get(int(lab_id))
            if entry.run_id is not None and self.queue.store._lock_held(entry.run_id):
                continue  # (cannot be ours; another worker of this name on another server?)
            if entry.attempts >= MAX_ATTEMPTS:
                self.queue._set(entry.id, state="failed",
                                message=f"not complete after {entry.attempts} attempts: "
                                f"{entry.message or 'interrupted'}")
                continue
            self._requeue(entry, bench_queue(self.name))
        for job in self.queue.run(jobs.get_stalled_jobs(seconds_since_heartbeat=STALLED_S)):
            lab_id = int(job.task_kwargs.get("lab_run", 0))
            rows = self.queue.store._read("SELECT bench, state FROM lab_runs WHERE id = ?",
                                          (lab_id,))
            # never claimed by a bench, or taken again (after a resume was queued on its bench)
            # by a worker killed before it marked the run: back to the job's own queue
            if rows and (rows[0][0] is None or rows[0][1] == "queued"):
                self.queue.run(jobs.retry_job_by_id_async(job.id, retry_at=utc_now(),
                                                          queue=job.queue))
        self._hand_back_unstarted()
        with_dead_workers = self.queue.run(jobs.prune_stalled_workers(STALLED_S * 2))
        del with_dead_workers

    def _hand_back_unstarted(self) -> None:
        """Jobs whose run never started though the job is ``doing``, handed back to their
        queue at once. Called while idle, when this process holds no job: those it took under
        any id it registered (the database failed between taking the job and marking its run;
        the job stays ``doing`` under a live worker, which procrastinate never calls stalled),
        and those of this bench's own queue (a killed worker of this bench took one; this is
        the bench's only worker, so no live one holds it)."""
        rows = self.queue.store._read(
            "SELECT j.id, j.queue_name, j.priority FROM procrastinate_jobs j "
            "JOIN lab_runs l ON l.job_id = j.id WHERE j.status = 'doing' "
            "AND l.state = 'queued' AND (j.worker_id = ANY(?) OR j.queue_name = ?)",
            (sorted(self._worker_ids), bench_queue(self.name)))
        for job_id, queue_name, priority in rows:
            self.queue.run(self.queue.jobs.retry_job_by_id_async(
                int(job_id), retry_at=utc_now() - timedelta(seconds=1), priority=int(priority),
                queue=queue_name))
            self.say(f"job {job_id} was taken but its run never started; back in its queue")

    def _requeue(self, entry: LabRun, queue_name: str) -> None:
        jobs = self.queue.jobs
        if entry.job_id is not None and entry.job_status in ("doing", "failed"):
            self.queue.run(jobs.retry_job_by_id_async(
                entry.job_id, retry_at=utc_now() - timedelta(seconds=1),
                priority=entry.priority, queue=queue_name))
            job_id = entry.job_id
        else:
            job_id = self.queue._defer(entry.id, queue_name, entry.priority)
        self.queue._set(entry.id, state="queued", job_id=job_id, queue_name=queue_name)
        self.say(f"queued run {entry.id} (run {entry.run_id}) was interrupted; resuming it "
                 f"on this bench")

    # -- one run ----------------------------------------------------------------------------

    def _take(self, job: Any, summary: WorkerSummary) -> None:
        from procrastinate.jobs import Status

        lab_id = int(job.task_kwargs["lab_run"])
        status = Status.SUCCEEDED
        try:
            outcome = self._measure(lab_id)
        except StoreError as exc:  # the database went away mid-run: resumed afterwards
            self.say(f"queued run {lab_id}: the lab database failed: {exc.what}")
            summary.interrupted.append(lab_id)
            self._recover()
            return
        if outcome == "done":
            summary.done.append(lab_id)
        elif outcome == "failed":
            summary.failed.append(lab_id)
        else:
            summary.interrupted.append(lab_id)
            status = Status.FAILED
        try:
            self.queue.run(self.queue.jobs.finish_job(job, status, delete_job=False))
        except StoreError:
            self._recover()

    def _measure(self, lab_id: int) -> str:
        """Run (or resume) one submission; ``done``, ``failed`` (refused: it leaves the
        queue) or ``interrupted`` (resumed on this bench later)."""
        from sweeprig.engine.session import load_run_files, resume_run, run_loaded

        entry = self.queue.get(lab_id)
        if entry.state in ("cancelled", "done", "failed"):
            return "done" if entry.state == "done" else "failed"
        if entry.bench not in (None, self.name):  # a job meant for another bench
            raise StoreError(f"queued run {lab_id} belongs to bench {entry.bench}",
                             where=self.queue.where, fix="this is a bug in the queue")
        self.queue._set(lab_id, state="running", bench=self.name, attempts=entry.attempts + 1)
        changed = changed_files(entry.files)
        if changed:
            return self._refuse(lab_id, "refused: " + "; ".join(changed)
                                + " (submit it again to measure the new files)")
        run_id = entry.run_id if entry.run_id is not None else self._adopt(lab_id)
        tag = f"lab:{lab_id}"
        self.log_dir.mkdir(parents=True, exist_ok=True)
        try:
            if run_id is None:
                files = load_run_files(entry.sequence_path, self.bench_path, sim=False)
                seq = files.sequence
                seq = seq.model_copy(update={
                    "part": seq.part.model_copy(update={"serial": entry.serial}),
                    "about": seq.about.model_copy(update={"tags": (
                        *seq.about.tags, tag, f"lot:{entry.lot}", f"bench:{self.name}")}),
                })
                files = replace(files, sequence=seq)
                self.say(f"queued run {lab_id}: {entry.sequence_path} for {entry.part} "
                         f"{entry.serial} on bench {self.name}")
                outcome = run_loaded(
                    files, store_path=self.url, log_dir=self.log_dir,
                    on_start=lambda rid, _n, _f: self.queue._set(lab_id, run_id=rid),
                    on_point=lambda _p: self._beat(), on_wait=lambda _a: self._beat())
            else:
                self.queue._set(lab_id, run_id=run_id)
                if self.queue.store.run(run_id).stored_status == "complete":
                    self.queue._set(lab_id, state="done", message=None)
                    return "done"
                self.say(f"queued run {lab_id}: resuming run {run_id} on bench {self.name}")
                outcome = resume_run(run_id, store_path=self.url, log_dir=self.log_dir,
                                     on_point=lambda _p: self._beat(),
                                     on_wait=lambda _a: self._beat())
        except StoreError:
            raise
        except SweeprigError as exc:  # refused before any output was enabled
            return self._refuse(lab_id, exc.message())
        if outcome.status == "complete":
            self._keep_figures(outcome.run_id)
            self.queue._set(lab_id, state="done", message=None, run_id=outcome.run_id)
            self.say(f"queued run {lab_id}: run {outcome.run_id} complete "
                     f"({outcome.points_done} points)")
            return "done"
        self.queue._set(lab_id, message=f"{outcome.status}: {outcome.reason}")
        if (outcome.reason or "").startswith("stopped by"):
            raise KeyboardInterrupt  # the run was stopped (and made safe): so is the worker
        if outcome.store_error is not None:
            raise StoreError(outcome.store_error, where=self.queue.where)
        return "interrupted"

    def _keep_figures(self, run_id: int) -> None:
        """Reduce the finished run once and keep its figures with it, for the lot report (a
        failure here is said and left: the lot report reduces the run itself)."""
        from sweeprig.analysis.reduce import reduce_run
        from sweeprig.lab.figures import keep_figures

        try:
            kept = keep_figures(self.queue.store, run_id,
                                reduce_run(self.queue.store, run_id))  # type: ignore[arg-type]
        except SweeprigError as exc:
            self.say(f"run {run_id}: figures not kept ({exc.what}); the lot report will "
                     "reduce it")
            return
        if not kept:
            self.say(f"run {run_id}: figures not kept; the lot report will reduce it")

    def _adopt(self, lab_id: int) -> int | None:
        """The run a killed worker recorded for ``lab_id`` before it could say so (found by
        its ``lab:<id>`` tag), or None."""
        rows = self.queue.store._read(
            "SELECT id FROM runs WHERE tags_json LIKE ? ORDER BY id DESC LIMIT 1",
            (f'%"lab:{int(lab_id)}"%',))
        return int(rows[0][0]) if rows else None

    def _refuse(self, lab_id: int, why: str) -> str:
        self.queue._set(lab_id, state="failed", message=why)
        self.say(f"queued run {lab_id} refused: {why}")
        return "failed"

    def close(self) -> None:
        """Unregister, release the bench and close the connections."""
        if self._worker_id is not None:
            with suppress(StoreError):
                self.queue.run(self.queue.jobs.unregister_worker(self._worker_id))
            self._worker_id = None
        if self._bench_conn is not None:
            # Unlocked explicitly before the close: a closed connection's server process
            # frees its advisory locks only as it exits, a moment later, so a worker started
            # right after a clean stop could be refused the bench meanwhile.
            with suppress(Exception):
                self._bench_conn.execute("SELECT pg_advisory_unlock(%s, %s)",
                                         (BENCH_LOCK_SPACE, _int4(zlib.crc32(self.name.encode()))))
            with suppress(Exception):
                self._bench_conn.close()
            self._bench_conn = None
        self.queue.close()
