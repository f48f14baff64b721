"""One bench, one run: a lock per instrument, held for the whole run.

A lock is a small JSON file (run id, store, process id, host, start time) created atomically
(``O_CREAT | O_EXCL``) in the lock folder — ``$SWEEPRIG_LOCK_DIR``, else ``sweeprig-locks`` in
the system's temporary folder — one file per VISA resource. A second run that wants an
instrument a live run holds is refused with a message naming the holding run. A lock left by
a run whose process is gone (same host, process id no longer alive) is stale: it is released
and taken over, and that is said in the run's log.
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import os
import socket
import tempfile
from collections.abc import Iterable
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path

from sweeprig.errors import InputError
from sweeprig.store.sqlite import pid_alive

LOCK_DIR_ENV = "SWEEPRIG_LOCK_DIR"


def lock_dir() -> Path:
    """The folder holding the instrument locks."""
    configured = os.environ.get(LOCK_DIR_ENV)
    return Path(configured) if configured else Path(tempfile.gettempdir()) / "sweeprig-locks"


class BenchBusy(InputError):
    """An instrument is held by another live run."""

    exit_code = 7


@dataclass
class BenchLock:
    """Locks on a set of VISA resources for one run. Use :meth:`acquire` / :meth:`release`
    (or ``with``). ``released_stale`` lists the stale locks taken over."""

    resources: tuple[str, ...]
    run_label: str
    folder: Path = field(default_factory=lock_dir)
    held: list[Path] = field(default_factory=list)
    released_stale: list[str] = field(default_factory=list)

    def acquire(self) -> BenchLock:
        """Take every lock or none (raises :class:`BenchBusy` naming the holder)."""
        self.folder.mkdir(parents=True, exist_ok=True)
        try:
            for resource in sorted(set(self.resources)):
                self._take(resource)
        except BaseException:
            self.release()
            raise
        return self

    def release(self) -> None:
        """Release every lock this object holds (idempotent)."""
        for path in self.held:
            with contextlib.suppress(FileNotFoundError):
                path.unlink()
        self.held.clear()

    def __enter__(self) -> BenchLock:
        return self.acquire()

    def __exit__(self, *_exc: object) -> None:
        self.release()

    def _take(self, resource: str) -> None:
        path = self.folder / (hashlib.sha256(resource.encode()).hexdigest()[:24] + ".lock")
        record = {
            "resource": resource, "run": self.run_label, "pid": os.getpid(),
            "host": socket.gethostname(), "since": datetime.now(UTC).isoformat(),
        }
        for _ in range(3):
            try:
                fd = os.open(path, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o644)
            except FileExistsError:
                holder = _read(path)
                young = _age_s(path) < 5.0  # an unreadable lock may be being written now
                if (holder is None and young) or (holder is not None and not _stale(holder)):
                    holder = holder or {}
                    raise BenchBusy(
                        f"{resource} is in use by {holder.get('run', 'another run')} "
                        f"(process {holder.get('pid')} on {holder.get('host')}, since "
                        f"{holder.get('since')})",
                        where=f"lock {path}",
                        fix="wait for that run to finish or stop it; two runs must never "
                        "drive the same instrument",
                    ) from None
                with contextlib.suppress(FileNotFoundError):
                    path.unlink()
                self.released_stale.append(
                    f"{resource} (left by {holder.get('run') if holder else 'an unreadable lock'})")
                continue
            with os.fdopen(fd, "w", encoding="utf-8") as handle:
                json.dump(record, handle)
            self.held.append(path)
            return
        raise BenchBusy(f"could not take the lock for {resource}", where=f"lock {path}",
                        fix=f"remove {path} if no run is using the instrument")


def _age_s(path: Path) -> float:
    try:
        return datetime.now(UTC).timestamp() - path.stat().st_mtime
    except OSError:
        return 0.0


def _read(path: Path) -> dict[str, object] | None:
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    return data if isinstance(data, dict) else None


def _stale(holder: dict[str, object]) -> bool:
    """A lock is stale when its process, on this host, is gone."""
    pid = holder.get("pid")
    if holder.get("host") != socket.gethostname() or not isinstance(pid, int):
        return False
    return not pid_alive(pid)


def resources_of(roles: Iterable[str], resources: dict[str, str]) -> tuple[str, ...]:
    """The resource strings of ``roles`` (those present in ``resources``)."""
    return tuple(resources[r] for r in roles if r in resources)
