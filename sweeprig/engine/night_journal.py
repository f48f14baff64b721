"""A night's journal: which part ran as which run and how it ended, so a night that was
stopped (Ctrl-C, a power cut, a killed process) can be resumed as a night.

Night K of store ``results/lot7.sqlite`` keeps ``lot7.sqlite.night-K.json`` (the journal,
rewritten atomically after every change) and ``lot7.sqlite.night-K.lock`` (held by the
operating system while the night's process lives, so a live night is never resumed), and
writes its summary into ``lot7.sqlite.night-K/``. The journal records the plan's path and the
SHA-256 of its text: a night resumes only with the plan it started with.

Resuming walks the parts in order: a part recorded ``complete`` is kept as it ended; a part
with a run that did not complete is resumed (``sweeprig resume`` semantics: only the points
not yet stored); a part that never started runs now.
"""

from __future__ import annotations

import json
import os
import re
from dataclasses import asdict, dataclass, field
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from sweeprig.errors import InputError
from sweeprig.oslock import FileLock
from sweeprig.store.paths import night_path

JOURNAL_FORMAT = 1
_JOURNAL = re.compile(r"\.night-(\d+)\.json$")


@dataclass(frozen=True)
class PartEnd:
    """How one part of the night ended (``run_id`` None: it did not run)."""

    serial: str
    sequence: str
    run_id: int | None
    status: str
    verdict: str | None = None
    reason: str | None = None
    bench_s: float = 0.0
    report: str | None = None


@dataclass
class NightJournal:
    """An open journal of night ``number``; :meth:`close` lets its lock go."""

    store: Path
    number: int
    plan: str
    plan_sha256: str
    parts: list[PartEnd]
    started_utc: str
    state: str = "running"
    resumed: bool = False
    _lock: FileLock | None = field(default=None, repr=False)

    @property
    def path(self) -> Path:
        return night_path(self.store, self.number, ".json")

    @property
    def folder(self) -> Path:
        """Where the night's summary goes."""
        return night_path(self.store, self.number)

    def record(self, index: int, end: PartEnd) -> None:
        """Part ``index`` is now ``end``; the journal is rewritten at once."""
        self.parts[index] = end
        self._write()

    def finish(self, state: str) -> None:
        """The night ended (``complete``, ``partial``, ``unsafe``); write it and unlock."""
        self.state = state
        self._write()
        self.close()

    def close(self) -> None:
        if self._lock is not None:
            self._lock.release()
            self._lock = None

    def _write(self) -> None:
        document = {
            "format": JOURNAL_FORMAT,
            "number": self.number,
            "plan": self.plan,
            "plan_sha256": self.plan_sha256,
            "started_utc": self.started_utc,
            "written_utc": _now(),
            "state": self.state,
            "parts": [asdict(p) for p in self.parts],
        }
        tmp = self.path.with_name(self.path.name + ".tmp")
        tmp.write_text(json.dumps(document, indent=2) + "\n", encoding="utf-8")
        tmp.replace(self.path)


def start_journal(store: Path, plan: Path, plan_sha256: str,
                  parts: list[tuple[str, str]]) -> NightJournal:
    """A new night's journal beside ``store`` (the next free number), locked, every part
    ``not run`` yet. ``parts``: (serial, sequence) in order."""
    store.parent.mkdir(parents=True, exist_ok=True)
    number = max((n for n, _ in _journals(store)), default=0) + 1
    while True:  # a number taken meanwhile by another night: the next one
        try:
            fd = os.open(night_path(store, number, ".json"), os.O_CREAT | os.O_EXCL | os.O_WRONLY)
        except FileExistsError:
            number += 1
            continue
        os.close(fd)
        break
    journal = NightJournal(store, number, str(plan.resolve()), plan_sha256,
                           [PartEnd(s, q, None, "not run") for s, q in parts], _now())
    journal._lock = _take_lock(store, number)
    journal._write()
    return journal


def resume_journal(store: Path, plan: Path, plan_sha256: str,
                   number: int | None = None) -> NightJournal:
    """The journal of the night to resume, locked: night ``number``, or the latest night of
    ``plan`` in ``store`` that did not complete. Refused (:class:`InputError`) when there is
    none, when it is live, complete, or of another plan, or when the plan has changed."""
    where = f"{store}: nights"
    mine = [(n, d) for n, d in _journals(store)
            if number == n or (number is None and d.get("plan") == str(plan.resolve()))]
    if not mine:
        what = (f"no night {number} in this store" if number is not None
                else f"no night of the plan {plan} in this store")
        raise InputError(what, where=where,
                         fix="give the store the night used (--store) and its plan; or start "
                         "the night without --resume")
    if number is None:
        unfinished = [(n, d) for n, d in mine if d.get("state") != "complete"]
        if not unfinished:
            raise InputError(f"every night of the plan {plan} in this store completed (the "
                             f"latest is night {mine[-1][0]})", where=where,
                             fix="nothing to resume; start a new night without --resume")
        mine = unfinished
    n, doc = mine[-1]
    if doc.get("plan") != str(plan.resolve()):
        raise InputError(f"night {n} ran the plan {doc.get('plan')}, not {plan}", where=where,
                         fix="give the night's own plan file")
    if doc.get("state") == "complete":
        raise InputError(f"night {n} is already complete", where=where,
                         fix="nothing to resume; start a new night without --resume")
    if doc.get("plan_sha256") != plan_sha256:
        raise InputError(f"the night plan {plan} changed since night {n} started", where=where,
                         fix="put the plan back as it was, or start a new night with the new "
                         "plan (each part's own run can still be resumed with `sweeprig resume`)")
    lock = _take_lock(store, n)
    try:
        parts = [PartEnd(**p) for p in doc["parts"]]
    except (KeyError, TypeError) as exc:
        lock.release()
        raise InputError(f"night {n}'s journal cannot be read ({exc})", where=where,
                         fix="resume each part's run with `sweeprig resume RUN_ID`") from None
    journal = NightJournal(store, n, doc["plan"], plan_sha256, parts, doc.get("started_utc",
                           _now()))
    journal._lock = lock
    journal.resumed = True
    journal.state = "running"
    return journal


def night_of_run(store: Path, run_id: int) -> tuple[int, str] | None:
    """(night number, plan path) of the latest night that ran ``run_id``, or None."""
    found = None
    for n, doc in _journals(store):
        if any(p.get("run_id") == run_id for p in doc.get("parts", [])):
            found = (n, str(doc.get("plan")))
    return found


def _take_lock(store: Path, number: int) -> FileLock:
    lock = FileLock(night_path(store, number, ".lock"))
    if not lock.try_acquire({"pid": os.getpid(), "night": number}):
        raise InputError(f"night {number} is still running in another process",
                         where=f"{night_path(store, number, '.lock')}",
                         fix="wait for it to end, or stop it first (Ctrl-C or SIGTERM in its "
                         "terminal)")
    return lock


def _journals(store: Path) -> list[tuple[int, dict[str, Any]]]:
    """The readable journals beside ``store``, by number."""
    found = []
    for path in store.parent.glob(f"{store.name}.night-*.json"):
        match = _JOURNAL.search(path.name)
        if match is None:
            continue
        try:
            doc = json.loads(path.read_text(encoding="utf-8") or "{}")
        except (OSError, ValueError):
            continue
        found.append((int(match.group(1)), doc if isinstance(doc, dict) else {}))
    return sorted(found, key=lambda item: item[0])


def _now() -> str:
    return datetime.now(UTC).isoformat(timespec="seconds")
