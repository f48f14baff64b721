"""One instrument, one run: locks held by the operating system, on what an instrument is.

A run locks every instrument it drives, for its whole length, twice over:

- by **resource**, before connecting: the resource string reduced to what it reaches
  (:func:`sweeprig.transport.resources.lock_keys`: host resolved, "this machine" one host,
  keywords and numbers canonical), so ``TCPIP0::127.0.0.1::5025::SOCKET`` and
  ``tcpip::localhost::5025::socket`` are one lock;
- by **identity**, right after ``*IDN?`` and before any output is enabled: maker, model and
  serial number, so one instrument reached through two interfaces is still one lock.

Each key is a file in the lock folder (``$SWEEPRIG_LOCK_DIR``, else ``sweeprig-locks`` in the
system's temporary folder) locked with :class:`sweeprig.oslock.FileLock`: the kernel holds it
and releases it when the process ends, however it ends, so there is no stale lock to detect. A
second run that wants a held instrument is refused (:class:`BenchBusy`) naming the holder from
the note in the file.
"""

from __future__ import annotations

import hashlib
import os
import socket
import tempfile
from collections.abc import Iterable, Mapping
from datetime import UTC, datetime
from pathlib import Path

from sweeprig.errors import InputError
from sweeprig.oslock import FileLock, read_note
from sweeprig.transport.resources import ResourceNameError, lock_keys

LOCK_DIR_ENV = "SWEEPRIG_LOCK_DIR"

#: Serial numbers that do not tell one unit from another (no identity lock is taken on them).
_NO_SERIAL = frozenset({"", "0", "none", "n/a", "na", "unknown", "-"})


def lock_dir() -> Path:
    """The folder holding the instrument locks."""
    configured = os.environ.get(LOCK_DIR_ENV)
    return Path(configured) if configured else Path(tempfile.gettempdir()) / "sweeprig-locks"


def lock_file(key: str, folder: Path | None = None) -> Path:
    """The file that holds the lock of ``key`` (a hash of it: keys hold host names)."""
    name = hashlib.sha256(key.encode("utf-8")).hexdigest()[:32] + ".lock"
    return (folder if folder is not None else lock_dir()) / name


class BenchBusy(InputError):
    """An instrument is held by another live run."""

    exit_code = 7


def identity_key(idn: str) -> str | None:
    """The lock key of an instrument's ``*IDN?`` reply (maker, model, serial without case),
    or None when the reply names no serial number that tells one unit from another."""
    fields = [f.strip().casefold() for f in idn.split(",")]
    if len(fields) < 3 or fields[2] in _NO_SERIAL or not fields[0] or not fields[1]:
        return None
    return "idn " + ",".join(fields[:3])


def holder_text(note: Mapping[str, object] | None) -> str:
    """Who holds a lock, from its note: ``run 3 (store …) (process 812 on lab-pc, since …)``."""
    if not note:
        return "another run (its lock note cannot be read)"
    return (f"{note.get('run', 'another run')} (process {note.get('pid')} on "
            f"{note.get('host')}, since {note.get('since')})")


class BenchLock:
    """Locks on the instruments of one run. :meth:`acquire` takes the resource locks (all or
    none); :meth:`hold_identity` adds an instrument's identity once it has answered;
    :meth:`release` lets them all go. Usable as a context manager."""

    def __init__(self, resources: Iterable[str], run_label: str,
                 folder: Path | None = None) -> None:
        self.resources = tuple(resources)
        self.run_label = run_label
        self.folder = folder if folder is not None else lock_dir()
        self._held: dict[str, FileLock] = {}

    @property
    def keys(self) -> tuple[str, ...]:
        """The keys held now."""
        return tuple(self._held)

    def acquire(self) -> BenchLock:
        """Take the lock of every resource, or none (raises :class:`BenchBusy` naming the
        holder, :class:`InputError` for a text that is not a resource name)."""
        wanted: dict[str, str] = {}
        for resource in self.resources:
            try:
                keys = lock_keys(resource)
            except ResourceNameError as exc:
                raise InputError(f"{resource!r} is not a VISA resource name: {exc}",
                                 where="bench file, roles",
                                 fix='write e.g. "TCPIP0::192.0.2.10::5025::SOCKET"') from None
            for key in keys:
                wanted.setdefault(key, resource)
        self._take_all(wanted)
        return self

    def hold_identity(self, role: str, idn: str | None) -> None:
        """Lock the instrument that answered ``idn`` for role ``role`` (nothing when the reply
        names no serial number). Raises :class:`BenchBusy` when another run holds it."""
        key = identity_key(idn or "")
        if key is not None:
            self._take_all({key: f"role {role!r} ({idn!r})"})

    def release(self) -> None:
        """Release every lock this object holds (idempotent)."""
        held, self._held = self._held, {}
        for lock in held.values():
            lock.release()

    def __enter__(self) -> BenchLock:
        return self.acquire()

    def __exit__(self, *_exc: object) -> None:
        self.release()

    def _take_all(self, wanted: Mapping[str, str]) -> None:
        """Take every key of ``wanted`` (key → what it locks, for messages) or none of them."""
        taken: list[str] = []
        try:
            self.folder.mkdir(parents=True, exist_ok=True)
            for key in sorted(wanted):
                if key in self._held:
                    continue
                self._take(key, wanted[key])
                taken.append(key)
        except OSError as exc:
            self._drop(taken)
            raise BenchBusy(
                f"cannot use the lock folder: {exc.strerror or exc}",
                where=str(self.folder),
                fix=f"make it writable, or point {LOCK_DIR_ENV} at a folder you can write") \
                from None
        except BaseException:
            self._drop(taken)
            raise

    def _take(self, key: str, what: str) -> None:
        path = lock_file(key, self.folder)
        lock = FileLock(path)
        note = {"key": key, "resource": what, "run": self.run_label, "pid": os.getpid(),
                "host": socket.gethostname(), "since": datetime.now(UTC).isoformat()}
        if not lock.try_acquire(note):
            raise BenchBusy(
                f"{what} is in use by {holder_text(read_note(path))}",
                where=f"instrument lock {key!r}",
                fix="wait for that run to finish or stop it; two runs must never drive the "
                "same instrument, whatever their bench files call it")
        self._held[key] = lock

    def _drop(self, keys: Iterable[str]) -> None:
        for key in keys:
            lock = self._held.pop(key, None)
            if lock is not None:
                lock.release()

