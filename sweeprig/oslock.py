"""An exclusive lock on a file, held by the operating system.

The kernel decides who holds a lock, and it releases it when the holding process ends, however
it ends (``kill -9``, power cut of the process, crash): there is no stale lock to detect and no
race between reading a lock file and deleting it. POSIX systems use ``flock`` (a lock on the
open file description, so two opens in one process exclude each other too); Windows uses
``msvcrt.locking`` on the file's first byte.

The file may carry a short JSON note about the holder (who, since when) for the message a
refused caller prints; whether the lock is held is decided only by the operating system,
never by the note. A holder deletes the file while it still holds the lock (POSIX), and a
taker checks that the file it locked is still the one at the path, so a deletion can never
let two holders in.
"""

from __future__ import annotations

import contextlib
import json
import os
import time
from collections.abc import Mapping
from pathlib import Path

if os.name == "nt":  # pragma: no cover - exercised on Windows only
    import msvcrt

    def _try_lock(fd: int) -> bool:
        os.lseek(fd, 0, os.SEEK_SET)
        try:
            msvcrt.locking(fd, msvcrt.LK_NBLCK, 1)  # type: ignore[attr-defined]
        except OSError:
            return False
        return True

    def _unlock(fd: int) -> None:
        os.lseek(fd, 0, os.SEEK_SET)
        with contextlib.suppress(OSError):
            msvcrt.locking(fd, msvcrt.LK_UNLCK, 1)  # type: ignore[attr-defined]

    def _probe(fd: int) -> bool:
        if not _try_lock(fd):
            return True
        _unlock(fd)
        return False

    _PROBE_FLAGS = os.O_RDWR | getattr(os, "O_BINARY", 0)
    _DELETE_ON_RELEASE = False  # an open file cannot be deleted there
else:
    import fcntl

    def _try_lock(fd: int) -> bool:
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except (BlockingIOError, PermissionError):
            return False
        return True

    def _unlock(fd: int) -> None:
        with contextlib.suppress(OSError):
            fcntl.flock(fd, fcntl.LOCK_UN)

    def _probe(fd: int) -> bool:
        # A shared lock: probes never exclude each other, only a holder excludes them.
        try:
            fcntl.flock(fd, fcntl.LOCK_SH | fcntl.LOCK_NB)
        except (BlockingIOError, PermissionError):
            return True
        _unlock(fd)
        return False

    _PROBE_FLAGS = os.O_RDONLY
    _DELETE_ON_RELEASE = True

NOTE_MAX_BYTES = 4096
"""A note longer than this is not read (it is only ever a few hundred bytes)."""


class FileLock:
    """An exclusive, non-blocking lock on ``path`` (created if missing; its folder must exist).

    ``retries``: further attempts, ``retry_s`` apart, when the lock is taken; for locks that
    other processes probe with :func:`is_locked` (a probe holds a shared lock for a moment).
    """

    def __init__(self, path: Path | str, *, retries: int = 0, retry_s: float = 0.02) -> None:
        self.path = Path(path)
        self.retries = retries
        self.retry_s = retry_s
        self._fd: int | None = None

    @property
    def held(self) -> bool:
        """Whether this object holds the lock."""
        return self._fd is not None

    def try_acquire(self, note: Mapping[str, object] | None = None) -> bool:
        """Take the lock if it is free and write ``note`` (JSON) into the file.

        Returns False when another holder has it. Raises :class:`OSError` when the file
        cannot be created or opened. Taking a lock this object already holds returns True.
        """
        if self._fd is not None:
            return True
        for attempt in range(self.retries + 1):
            fd = self._take_once()
            if fd is not None:
                self._fd = fd
                self._write_note(note)
                return True
            if attempt < self.retries:
                time.sleep(self.retry_s)
        return False

    def release(self) -> None:
        """Let the lock go (idempotent). The file is deleted first, while still held."""
        fd, self._fd = self._fd, None
        if fd is None:
            return
        try:
            if _DELETE_ON_RELEASE and _same_file(fd, self.path):
                with contextlib.suppress(OSError):
                    self.path.unlink()
            _unlock(fd)
        finally:
            os.close(fd)

    def __enter__(self) -> FileLock:
        return self

    def __exit__(self, *_exc: object) -> None:
        self.release()

    def _take_once(self) -> int | None:
        # The path may be deleted (by a releasing holder) between our open and our lock; the
        # lock we got is then on a file no one else will open: check and start again.
        for _ in range(100):
            fd = os.open(self.path, os.O_RDWR | os.O_CREAT | getattr(os, "O_BINARY", 0), 0o644)
            if not _try_lock(fd):
                os.close(fd)
                return None
            if _same_file(fd, self.path):
                return fd
            _unlock(fd)
            os.close(fd)
        return None  # pragma: no cover - a path deleted a hundred times in a row

    def _write_note(self, note: Mapping[str, object] | None) -> None:
        assert self._fd is not None
        # A leading space: JSON ignores it, and on Windows the locked first byte is not read.
        data = b" " + json.dumps(dict(note or {}), default=str).encode("utf-8")
        with contextlib.suppress(OSError):  # the note is a courtesy, the lock is what counts
            os.lseek(self._fd, 0, os.SEEK_SET)
            os.write(self._fd, data)
            os.ftruncate(self._fd, len(data))


def _same_file(fd: int, path: Path) -> bool:
    try:
        now = os.stat(path)
    except OSError:
        return False
    mine = os.fstat(fd)
    return (mine.st_dev, mine.st_ino) == (now.st_dev, now.st_ino)


def is_locked(path: Path | str) -> bool:
    """Whether some process holds the lock on ``path`` now (a missing file is not locked).

    Takes nothing: on POSIX it holds a shared lock for a moment, which a holder's exclusive
    lock refuses. A lock this very process holds through a :class:`FileLock` counts as held.
    """
    try:
        fd = os.open(path, _PROBE_FLAGS)
    except FileNotFoundError:
        return False
    except OSError:
        return False  # unreadable: no holder we can see
    try:
        return _probe(fd)
    finally:
        os.close(fd)


def read_note(path: Path | str) -> dict[str, object] | None:
    """The holder's note in a lock file, if it can be read (it says nothing about liveness)."""
    try:
        with open(path, "rb") as handle:
            handle.seek(1)
            data = handle.read(NOTE_MAX_BYTES + 1)
    except OSError:
        return None
    if len(data) > NOTE_MAX_BYTES:
        return None
    try:
        note = json.loads(data.decode("utf-8"))
    except (UnicodeDecodeError, ValueError):
        return None
    return note if isinstance(note, dict) else None
