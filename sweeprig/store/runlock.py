"""Whether a run is alive: a lock per run, held by the process that runs it.

The process running (or resuming) run ``N`` of a store holds an operating-system lock
(:class:`sweeprig.oslock.FileLock`) on ``<store file>.run-N.lock`` beside the store for as
long as it runs. The kernel releases it when that process ends, however it ends. So:

- a run is alive exactly when its lock is held (:func:`run_lock_held`); a run stored as
  ``running`` whose lock is free was interrupted — no process id is probed;
- ``resume`` takes the lock before anything else (:func:`hold_run_lock`), so two resumes of
  one run cannot both start, simulated or not: the second is refused (:class:`RunBusy`).

The lock file sits beside the store so that every process that sees the store sees its locks
(the file is deleted when the run ends; one left by a killed run is harmless).
"""

from __future__ import annotations

import os
import socket
from datetime import UTC, datetime
from pathlib import Path

from sweeprig.errors import InputError, StoreError
from sweeprig.oslock import FileLock, is_locked, read_note
from sweeprig.store.paths import run_file_name
from sweeprig.store.postgres import PgRunLock, is_database_url, redact_url

PROBE_RETRIES = 10
"""Attempts at taking a run lock that a status probe (``sweeprig runs``) may hold for an
instant; 20 ms apart."""


class RunBusy(InputError):
    """The run is being run or resumed by another live process."""

    exit_code = 7


def run_lock_path(store_path: Path | str, run_id: int) -> Path:
    """The lock file of run ``run_id`` of the store at ``store_path`` (links resolved)."""
    real = Path(os.path.realpath(store_path))
    return real.with_name(run_file_name(real, run_id, ".lock"))


def run_lock_held(store_path: Path | str, run_id: int) -> bool:
    """Whether a live process holds run ``run_id`` (this process included). For a lab
    database (a URL) the lock is the server's advisory lock (:mod:`sweeprig.store.postgres`)."""
    if is_database_url(store_path):
        from sweeprig.store.postgres import PostgresRunStore

        with PostgresRunStore(str(store_path), create=False) as store:
            return store._lock_held(run_id)
    return is_locked(run_lock_path(store_path, run_id))


def hold_run_lock(store_path: Path | str, run_id: int, label: str) -> FileLock | PgRunLock:
    """Take run ``run_id``'s lock for this process and return it (release it when the run
    ends). Raises :class:`RunBusy` naming the holder when another process runs it, and
    :class:`StoreError` when the lock file cannot be created beside the store."""
    if is_database_url(store_path):
        return _hold_database_lock(str(store_path), run_id)
    path = run_lock_path(store_path, run_id)
    lock = FileLock(path, retries=PROBE_RETRIES)
    note = {"run": f"run {run_id}", "by": label, "pid": os.getpid(),
            "host": socket.gethostname(), "since": datetime.now(UTC).isoformat()}
    try:
        taken = lock.try_acquire(note)
    except OSError as exc:
        raise StoreError(f"cannot create the run's lock file: {exc.strerror or exc}",
                         where=str(path),
                         fix="make the store's folder writable (the run needs it anyway)") \
            from None
    if not taken:
        holder = read_note(path) or {}
        who = (f"{holder.get('by', 'another process')} (process {holder.get('pid')} on "
               f"{holder.get('host')}, since {holder.get('since')})") if holder \
            else "another process"
        raise RunBusy(
            f"run {run_id} is being run by {who}",
            where=f"{store_path}: run {run_id}",
            fix="only one process may run or resume a run at a time: wait for that one to "
            "end, or stop it first (Ctrl-C or SIGTERM in its terminal)")
    return lock


def _hold_database_lock(url: str, run_id: int) -> PgRunLock:
    """Run ``run_id``'s advisory lock in the lab database (see :class:`PgRunLock`)."""
    lock = PgRunLock(url, run_id)
    if not lock.try_acquire():
        raise RunBusy(
            f"run {run_id} is being run by another live process",
            where=f"{redact_url(url)}: run {run_id}",
            fix="only one process may run or resume a run at a time: wait for it to end, or "
            "stop it first")
    return lock
