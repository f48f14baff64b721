"""The SQLite run store (stdlib ``sqlite3``).

Settings and why:

* ``journal_mode=WAL``: readers (``sweeprig status`` in another terminal, the analysis) see every
  committed point while the engine keeps writing, and never block it.
* ``synchronous=FULL`` by default: each committed point is on disk before the engine moves on,
  so even a power cut loses at most the point in flight. The cost is one fsync per point,
  small next to a real bench's settling and sweep times. ``durable=False`` selects ``NORMAL``
  (still safe against a crash of the process, but a power cut may drop the last commits) for
  simulated runs where thousands of points a minute are written.
* ``foreign_keys=ON``; ``busy_timeout`` of 5 s for concurrent access.
* One transaction per point: the point row and all its readings, or nothing.
* The file is watched: before and after every write transaction the store's path is checked
  (one ``stat``) against the file it opened. SQLite writes through the descriptors it holds,
  so a store whose file or folder was deleted, moved or replaced would go on "committing"
  into a file nobody can reach; instead the write is a :class:`StoreError` naming what
  happened, and every later write is refused with it. SQLite's own write failures (disk
  full, read-only, I/O error) become a :class:`StoreError` carrying that first cause, never
  the secondary failure of the rollback.

The SQL is kept portable (INTEGER, DOUBLE PRECISION, TEXT columns; times as ISO 8601 UTC
text; booleans as 0/1; JSON as TEXT; no upserts), so a server database can be added behind the
same :class:`~sweeprig.store.base.RunStore` interface. Run ids come from ``INTEGER PRIMARY
KEY``; a server database would use an identity column. The tables are described in
``docs/run-store.md``.
"""

from __future__ import annotations

import errno
import json
import math
import os
import socket
import sqlite3
import threading
from collections.abc import Iterator, Mapping, Sequence
from contextlib import contextmanager, suppress
from datetime import UTC, datetime
from pathlib import Path
from types import MappingProxyType
from typing import TYPE_CHECKING, Any

from sweeprig.errors import StoreError
from sweeprig.files import sha256_text
from sweeprig.signals import deferred
from sweeprig.store.base import (
    FINAL_STATUSES,
    HEARTBEAT_STALE_S,
    RUN_STATUSES,
    SEVERITIES,
    BusRecord,
    EventRecord,
    InstrumentRecord,
    PointRecord,
    ReadingRecord,
    RunFile,
    RunInfo,
    RunStatus,
    RunSummary,
    Severity,
    utc_now,
)
from sweeprig.store.runlock import run_lock_held

if TYPE_CHECKING:
    import pandas as pd

SCHEMA_VERSION = 3
"""2: run status ``unsafe`` allowed; 3: table ``run_files`` (included fragments and the merged
sequence) and ``runs.activity_json`` (what a live run is waiting for). An older store is
migrated when opened (when it can be written)."""

_STATUS_CHECK = ", ".join(f"'{s}'" for s in RUN_STATUSES)

SCHEMA: tuple[str, ...] = (
    """CREATE TABLE IF NOT EXISTS store_meta (
        name TEXT PRIMARY KEY,
        setting TEXT NOT NULL
    )""",
    f"""CREATE TABLE IF NOT EXISTS runs (
        id INTEGER PRIMARY KEY,
        created_utc TEXT NOT NULL,
        finished_utc TEXT,
        status TEXT NOT NULL CHECK (status IN ({_STATUS_CHECK})),
        reason TEXT,
        title TEXT NOT NULL,
        sequence_path TEXT NOT NULL,
        sequence_sha256 TEXT NOT NULL,
        sequence_text TEXT NOT NULL,
        bench_path TEXT,
        bench_sha256 TEXT,
        bench_text TEXT,
        simulated INTEGER NOT NULL,
        operator TEXT NOT NULL,
        part TEXT NOT NULL,
        serial TEXT NOT NULL,
        tags_json TEXT NOT NULL,
        points_total INTEGER,
        heartbeat_utc TEXT,
        pid INTEGER,
        host TEXT,
        activity_json TEXT
    )""",
    """CREATE TABLE IF NOT EXISTS instruments (
        run_id INTEGER NOT NULL REFERENCES runs (id) ON DELETE CASCADE,
        role TEXT NOT NULL,
        resource TEXT NOT NULL,
        profile TEXT NOT NULL,
        idn TEXT NOT NULL,
        PRIMARY KEY (run_id, role)
    )""",
    """CREATE TABLE IF NOT EXISTS points (
        run_id INTEGER NOT NULL REFERENCES runs (id) ON DELETE CASCADE,
        point_index INTEGER NOT NULL,
        study TEXT NOT NULL,
        temperature_c DOUBLE PRECISION,
        supply_v DOUBLE PRECISION,
        lo_freq_hz DOUBLE PRECISION,
        lo_power_dbm DOUBLE PRECISION,
        rf_freq_hz DOUBLE PRECISION,
        rf_power_dbm DOUBLE PRECISION,
        rf2_freq_hz DOUBLE PRECISION,
        rf2_power_dbm DOUBLE PRECISION,
        probe_temperature_c DOUBLE PRECISION,
        supply_current_a DOUBLE PRECISION,
        sim_start_s DOUBLE PRECISION,
        sim_end_s DOUBLE PRECISION,
        wall_start_utc TEXT,
        wall_end_utc TEXT,
        extra_json TEXT NOT NULL,
        PRIMARY KEY (run_id, point_index)
    )""",
    """CREATE TABLE IF NOT EXISTS readings (
        run_id INTEGER NOT NULL,
        point_index INTEGER NOT NULL,
        reading_no INTEGER NOT NULL,
        name TEXT NOT NULL,
        kind TEXT NOT NULL,
        port TEXT NOT NULL,
        freq_hz DOUBLE PRECISION,
        level_dbm DOUBLE PRECISION,
        noise_floor_dbm DOUBLE PRECISION,
        m INTEGER,
        n INTEGER,
        span_hz DOUBLE PRECISION,
        rbw_hz DOUBLE PRECISION,
        attenuation_db DOUBLE PRECISION,
        ref_level_dbm DOUBLE PRECISION,
        averages INTEGER,
        overload INTEGER NOT NULL,
        attenuation_check INTEGER,
        extra_json TEXT NOT NULL,
        PRIMARY KEY (run_id, point_index, reading_no),
        FOREIGN KEY (run_id, point_index) REFERENCES points (run_id, point_index)
            ON DELETE CASCADE
    )""",
    """CREATE TABLE IF NOT EXISTS run_files (
        run_id INTEGER NOT NULL REFERENCES runs (id) ON DELETE CASCADE,
        position INTEGER NOT NULL,
        role TEXT NOT NULL,
        path TEXT NOT NULL,
        sha256 TEXT NOT NULL,
        text TEXT NOT NULL,
        PRIMARY KEY (run_id, position)
    )""",
    """CREATE TABLE IF NOT EXISTS events (
        id INTEGER PRIMARY KEY,
        run_id INTEGER NOT NULL REFERENCES runs (id) ON DELETE CASCADE,
        time_utc TEXT NOT NULL,
        severity TEXT NOT NULL,
        kind TEXT NOT NULL,
        message TEXT NOT NULL,
        details_json TEXT NOT NULL,
        point_index INTEGER
    )""",
    """CREATE TABLE IF NOT EXISTS bus_log (
        id INTEGER PRIMARY KEY,
        run_id INTEGER NOT NULL REFERENCES runs (id) ON DELETE CASCADE,
        time_utc TEXT NOT NULL,
        role TEXT NOT NULL,
        sent TEXT NOT NULL,
        received TEXT,
        duration_s DOUBLE PRECISION NOT NULL
    )""",
    "CREATE INDEX IF NOT EXISTS events_by_run ON events (run_id, id)",
    "CREATE INDEX IF NOT EXISTS bus_log_by_run ON bus_log (run_id, id)",
)

POINT_COLUMNS: tuple[str, ...] = (
    "study", "temperature_c", "supply_v", "lo_freq_hz", "lo_power_dbm", "rf_freq_hz",
    "rf_power_dbm", "rf2_freq_hz", "rf2_power_dbm", "probe_temperature_c", "supply_current_a",
    "sim_start_s", "sim_end_s",
)
READING_COLUMNS: tuple[str, ...] = (
    "name", "kind", "port", "freq_hz", "level_dbm", "noise_floor_dbm", "m", "n", "span_hz",
    "rbw_hz", "attenuation_db", "ref_level_dbm", "averages",
)

_FIX_OPEN = "check the path (a folder you can write to) or give another one with --store"

_FIX_RESUME = ("the points committed before this are kept; continue the run afterwards with "
               "`sweeprig resume RUN_ID` (same --store)")

WRITE_FAILURES: tuple[tuple[str, str, str], ...] = (
    # (SQLite result code prefix, what it means for the user, what to do)
    ("SQLITE_FULL", "the disk holding the run store is full",
     "free space on that disk; " + _FIX_RESUME),
    ("SQLITE_READONLY", "the run store cannot be written (the file, its folder or its disk is "
     "read-only, or it was opened read-only)",
     "make the store file, its folder and its disk writable; " + _FIX_RESUME),
    ("SQLITE_IOERR", "the disk reported an I/O error while the run store was written",
     "check the disk and its connection (a removed or failing drive, a lost network share); "
     "copy the store somewhere safe before anything else; " + _FIX_RESUME),
    ("SQLITE_PERM", "the operating system refused access to the run store",
     "check the permissions of the store file and its folder; " + _FIX_RESUME),
    ("SQLITE_CANTOPEN", "a file of the run store (its write-ahead log) cannot be opened",
     "check that the store's folder still exists and is writable; " + _FIX_RESUME),
    ("SQLITE_CORRUPT", "the run store file is damaged",
     "stop writing to it; copy it somewhere safe and check it with `sqlite3 FILE "
     "'PRAGMA integrity_check'`; start new runs in another --store file"),
    ("SQLITE_NOTADB", "the run store file is no longer an SQLite database (overwritten?)",
     "stop writing to it; start new runs in another --store file"),
)
"""What each SQLite write failure means and what to do, by result-code prefix (the extended
codes, ``SQLITE_IOERR_WRITE``..., share their primary code's prefix)."""


# -- value conversions ------------------------------------------------------------------------


def _iso(value: datetime | None) -> str | None:
    if value is None:
        return None
    if value.tzinfo is None:
        value = value.replace(tzinfo=UTC)
    return value.astimezone(UTC).isoformat(timespec="microseconds")


def _dt(text: str | None) -> datetime | None:
    return None if text is None else datetime.fromisoformat(text)


def _real(value: object, name: str) -> float | None:
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, int | float):
        try:
            value = float(value)  # numpy scalars
        except (TypeError, ValueError):
            raise StoreError(f"{name} = {value!r} is not a number", where=name) from None
    number = float(value)
    return number if math.isfinite(number) else None


def _int(value: object, name: str) -> int | None:
    if value is None:
        return None
    try:
        return int(value)  # type: ignore[call-overload]
    except (TypeError, ValueError):
        raise StoreError(f"{name} = {value!r} is not an integer", where=name) from None


def _json(value: Mapping[str, Any] | None, name: str) -> str:
    try:
        return json.dumps(dict(value or {}), sort_keys=True, default=_json_default)
    except (TypeError, ValueError) as exc:
        raise StoreError(f"{name} cannot be stored as JSON: {exc}", where=name) from None


def _json_default(value: object) -> object:
    if hasattr(value, "item"):
        return value.item()  # numpy scalar
    if hasattr(value, "tolist"):
        return value.tolist()  # numpy array
    if isinstance(value, datetime):
        return _iso(value)
    raise TypeError(f"{type(value).__name__} is not JSON-able")


def _activity(text: str | None) -> Mapping[str, Any] | None:
    """A stored activity (None when measuring, or unreadable: it is a display aid only)."""
    if not text:
        return None
    try:
        value = json.loads(text)
    except ValueError:
        return None
    return MappingProxyType(value) if isinstance(value, dict) else None


# -- the store --------------------------------------------------------------------------------


class SqliteRunStore:
    """A :class:`~sweeprig.store.base.RunStore` in one SQLite file.

    ``path``: the database file. ``create``: create it (and its folder) if missing; otherwise
    a missing file is a :class:`StoreError`. ``durable``: ``synchronous=FULL`` (True) or
    ``NORMAL``. A ``running`` run is shown as ``interrupted`` when its run lock is free
    (:mod:`sweeprig.store.runlock`); ``stale_after_s``: for a run on another host, whose lock
    this host may not see, the heartbeat age after which it is. Safe to share between threads
    (one lock).
    """

    def __init__(
        self,
        path: Path | str,
        *,
        create: bool = True,
        durable: bool = True,
        stale_after_s: float = HEARTBEAT_STALE_S,
    ) -> None:
        self.path = Path(path)
        self.stale_after_s = stale_after_s
        self._lock = threading.RLock()
        self._host = socket.gethostname()
        if self.path.is_dir():
            raise StoreError(
                "this is a folder, not a run store file",
                where=str(self.path),
                fix="give a file path such as results/sweeprig.sqlite",
            )
        if not self.path.exists():
            if not create:
                raise StoreError(
                    "no run store here",
                    where=str(self.path),
                    fix="check the path, or run a sequence first (runs are stored in "
                    "results/sweeprig.sqlite by default); use --store to point elsewhere",
                )
            try:
                self.path.parent.mkdir(parents=True, exist_ok=True)
            except OSError as exc:
                raise StoreError(
                    f"cannot create the folder: {exc.strerror or exc}",
                    where=str(self.path.parent),
                    fix=_FIX_OPEN,
                ) from None
        try:
            self._conn = sqlite3.connect(
                str(self.path), timeout=5.0, isolation_level=None, check_same_thread=False
            )
        except sqlite3.Error as exc:
            raise StoreError(f"cannot open the run store: {exc}", where=str(self.path),
                             fix=_FIX_OPEN) from None
        try:
            self._setup(create=create, durable=durable)
        except StoreError:
            self._conn.close()
            raise
        except sqlite3.Error as exc:
            self._conn.close()
            raise StoreError(
                f"cannot use this file as a run store: {exc}",
                where=str(self.path),
                fix="give the path of a sweeprig run store (or of a new file)",
            ) from None
        self._lost: StoreError | None = None
        self._identity: tuple[int, int] | None = None
        self._size_floor_bytes = 0
        with suppress(OSError):
            st = os.stat(self.path)
            self._identity = (st.st_dev, st.st_ino)
            self._size_floor_bytes = st.st_size

    def _setup(self, *, create: bool, durable: bool) -> None:
        conn = self._conn
        conn.execute("PRAGMA foreign_keys = ON")
        conn.execute("PRAGMA busy_timeout = 5000")
        mode = conn.execute("PRAGMA journal_mode = WAL").fetchone()[0]
        self.journal_mode = str(mode).lower()
        conn.execute(f"PRAGMA synchronous = {'FULL' if durable else 'NORMAL'}")
        tables = {r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type='table'")}
        if "runs" not in tables:
            if tables and "store_meta" not in tables:
                raise StoreError(
                    "this SQLite file is not a sweeprig run store",
                    where=str(self.path),
                    fix="give the path of a sweeprig run store (or of a new file)",
                )
            if not create:
                raise StoreError("this file is not a sweeprig run store", where=str(self.path),
                                 fix="give the path of a sweeprig run store")
            conn.execute("BEGIN IMMEDIATE")
            try:
                for statement in SCHEMA:
                    conn.execute(statement)
                conn.execute(
                    "INSERT INTO store_meta (name, setting) VALUES ('schema_version', ?)",
                    (str(SCHEMA_VERSION),),
                )
                conn.execute("COMMIT")
            except BaseException:
                conn.execute("ROLLBACK")
                raise
        row = conn.execute(
            "SELECT setting FROM store_meta WHERE name = 'schema_version'"
        ).fetchone()
        version = int(row[0]) if row else 0
        if version > SCHEMA_VERSION:
            raise StoreError(
                f"the run store has schema version {version}; this sweeprig reads up to "
                f"{SCHEMA_VERSION}",
                where=str(self.path),
                fix="use a newer sweeprig, or another store file",
            )
        if version == 1:
            self._migrate_to_v2()
        if version in (1, 2):
            self._migrate_to_v3()

    def _migrate_to_v3(self) -> None:
        """Add the ``run_files`` table (runs recorded before it simply have no files) and the
        ``runs.activity_json`` column. A store that cannot be written is left as it is and
        can still be read."""
        create = next(s for s in SCHEMA if "TABLE IF NOT EXISTS run_files (" in s)
        with self._migration() as conn:
            if conn is None:
                return
            conn.execute(create)
            if "activity_json" not in {r[1] for r in conn.execute("PRAGMA table_info(runs)")}:
                conn.execute("ALTER TABLE runs ADD COLUMN activity_json TEXT")
            conn.execute("UPDATE store_meta SET setting = ? WHERE name = 'schema_version' "
                         "AND CAST(setting AS INTEGER) < ?", (str(SCHEMA_VERSION), SCHEMA_VERSION))

    @contextmanager
    def _migration(self) -> Iterator[sqlite3.Connection | None]:
        """One migration step as one write transaction: yields the connection, or None when
        the store cannot be written now (read-only or busy: it is read as it is). Committed
        when the block ends, rolled back on any error (a read-only refusal is swallowed)."""
        conn = self._conn
        try:
            conn.execute("BEGIN IMMEDIATE")
        except sqlite3.OperationalError:
            yield None
            return
        try:
            yield conn
            conn.execute("COMMIT")
        except sqlite3.OperationalError:
            conn.execute("ROLLBACK")  # read-only: read it as it is
        except BaseException:
            conn.execute("ROLLBACK")
            raise

    def _migrate_to_v2(self) -> None:
        """Allow the status ``unsafe`` in a version-1 store: rebuild ``runs`` with the new
        CHECK, as SQLite's documented way of changing a table's constraints (create, copy,
        drop, rename, with foreign keys off so the children rows stay). A store that cannot
        be written (read-only file) is left as it is and can still be read."""
        create = next(s for s in SCHEMA if "TABLE IF NOT EXISTS runs (" in s)
        self._conn.execute("PRAGMA foreign_keys = OFF")
        try:
            with self._migration() as conn:
                if conn is None:
                    return
                row = conn.execute(
                    "SELECT setting FROM store_meta WHERE name = 'schema_version'").fetchone()
                if row is not None and int(row[0]) == 1:  # not migrated meanwhile
                    conn.execute(create.replace("TABLE IF NOT EXISTS runs (", "TABLE runs_v2 ("))
                    columns = ", ".join(r[1] for r in conn.execute("PRAGMA table_info(runs)"))
                    conn.execute(f"INSERT INTO runs_v2 ({columns}) SELECT {columns} FROM runs")
                    conn.execute("DROP TABLE runs")
                    conn.execute("ALTER TABLE runs_v2 RENAME TO runs")
                    if conn.execute("PRAGMA foreign_key_check").fetchall():
                        raise sqlite3.IntegrityError("foreign keys broken by the migration")
                    conn.execute("UPDATE store_meta SET setting = '2' WHERE name = "
                                 "'schema_version'")
        finally:
            self._conn.execute("PRAGMA foreign_keys = ON")

    # -- plumbing ---------------------------------------------------------------------------

    @contextmanager
    def _transaction(self, what: str) -> Iterator[sqlite3.Connection]:
        """One write transaction, with the file checked before it and after its commit.

        A failure inside is rolled back if SQLite has not already done so (on a full disk or
        an I/O error it rolls back by itself, and a second ROLLBACK would only say "no
        transaction is active"); the first error is the one reported.
        """
        with self._lock, deferred():  # a stop signal waits for the COMMIT or ROLLBACK
            self.check_file(what)
            conn = self._conn
            try:
                conn.execute("BEGIN IMMEDIATE")
            except sqlite3.Error as exc:
                raise self._error(exc, what) from None
            try:
                yield conn
                conn.execute("COMMIT")
            except BaseException as exc:
                self._rollback()
                if isinstance(exc, sqlite3.Error):
                    raise self._error(exc, what) from None
                raise
            self.check_file(what, committed=True)

    def _rollback(self) -> None:
        """Roll back the open transaction, if any; a failure here never hides the first one."""
        with suppress(sqlite3.Error):
            if self._conn.in_transaction:
                self._conn.execute("ROLLBACK")

    @property
    def lost(self) -> StoreError | None:
        """Why the store's file can no longer be reached (deleted, moved, replaced), or None.

        Once set, every write is refused with this error: what SQLite would still write goes
        to a file nobody can find, and nothing it says about that file can be trusted.
        """
        return self._lost

    def check_file(self, what: str = "using the run store", *, committed: bool = False) -> None:
        """Raise :class:`StoreError` unless ``self.path`` is still the file this store opened
        and can still be written.

        One ``stat`` (and one ``access``): the path's device and inode against the ones of the
        file opened, and its size against the largest seen (SQLite never shrinks a store
        that is not vacuumed, and sweeprig never vacuums: a smaller file was overwritten in
        place). ``committed``: the check follows a commit (the message then says the data
        just written is not kept).
        """
        if self._lost is not None:
            raise self._lost
        if self._identity is None:
            return
        try:
            st = os.stat(self.path)
        except OSError as exc:
            if exc.errno in (errno.EACCES, errno.EPERM):
                raise StoreError(
                    f"{what} failed: the run store file can no longer be reached "
                    f"({exc.strerror}); its folder's permissions changed",
                    where=str(self.path),
                    fix="give the folder back its permissions; " + _FIX_RESUME,
                ) from None
            cause = self._why_missing()
        else:
            if (st.st_dev, st.st_ino) == self._identity and st.st_size < self._size_floor_bytes:
                # the same file, so no log may be copied into it: that would write into
                # whatever was put there
                self._lost = StoreError(
                    f"{what} failed: the run store file was overwritten in place (it shrank "
                    f"from {self._size_floor_bytes} to {st.st_size} bytes); nothing more is "
                    "written to it",
                    where=str(self.path),
                    fix="keep the store file untouched while a run writes to it; copy the file "
                    "aside now, before anything else opens it, then start the run again in "
                    "another --store file",
                )
                raise self._lost
            if (st.st_dev, st.st_ino) == self._identity:
                self._size_floor_bytes = max(self._size_floor_bytes, st.st_size)
                if not os.access(self.path, os.W_OK):
                    raise StoreError(
                        f"{what} failed: the run store file is read-only now (its permissions "
                        "changed while the run was writing)",
                        where=str(self.path),
                        fix="make the file writable again; " + _FIX_RESUME,
                    )
                return
            cause = ("the run store file was replaced: another file now has its name (the file "
                     "the run was writing was deleted, moved or overwritten by a move)")
        kept = ("what was just written is not in the store at this path"
                if committed else "nothing more can be kept")
        self._settle_orphan()
        self._lost = StoreError(
            f"{what} failed: {cause}; {kept}",
            where=str(self.path),
            fix="keep the store's file and folder in place while a run writes to them; if they "
            "were moved on purpose, `sweeprig resume RUN_ID --store NEW_PATH` continues the run "
            "from the points committed before the move, otherwise start the run again",
        )
        raise self._lost

    def _settle_orphan(self) -> None:
        """Copy the write-ahead log into the file this store opened, wherever it is now.

        SQLite does not do this on close once the file has moved, and its log stays under the
        old name: a store moved on its own would lack every point not yet checkpointed. The
        copy goes through SQLite's own descriptors, so a file now at the path is not touched.
        """
        with suppress(sqlite3.Error):
            self._conn.execute("PRAGMA wal_checkpoint(TRUNCATE)").fetchall()

    def _why_missing(self) -> str:
        """Which part of the store's path has gone: the file, or a folder above it."""
        folder = self.path.parent
        if folder.is_dir():
            return "the run store file disappeared (deleted or moved)"
        top = folder  # the highest folder of the path that is missing
        while top.parent != top and not top.parent.exists():
            top = top.parent
        if top.exists():
            return f"the run store's folder {top} was replaced by a file"
        return f"the run store's folder {top} disappeared (deleted or moved)"

    def _read(self, sql: str, params: Sequence[object] = ()) -> list[tuple[Any, ...]]:
        with self._lock:
            try:
                return self._conn.execute(sql, params).fetchall()
            except sqlite3.Error as exc:
                raise self._error(exc, "reading") from None

    def _error(self, exc: sqlite3.Error, what: str) -> StoreError:
        """The user's view of an SQLite error: what it means (by result code) and what to do.
        When the file has gone as well, that is the cause named."""
        text = str(exc)
        code = str(getattr(exc, "sqlite_errorname", "") or "")
        with suppress(StoreError):
            self.check_file(what)
        if self._lost is not None:
            return self._lost
        for prefix, meaning, fix in WRITE_FAILURES:
            if code.startswith(prefix):
                return StoreError(f"{what} failed: {meaning} (SQLite: {text}, {code})",
                                  where=str(self.path), fix=fix)
        if "locked" in text or "busy" in text:
            fix = "another process holds the store; wait for it or use another --store file"
        elif isinstance(exc, sqlite3.IntegrityError):
            fix = "this is a bug in the caller: the record clashes with one already stored"
        else:
            fix = "check the disk (space, permissions) and the store file"
        return StoreError(f"{what} failed: {text}", where=str(self.path), fix=fix)

    def _require_run(self, conn: sqlite3.Connection, run_id: int) -> None:
        if conn.execute("SELECT 1 FROM runs WHERE id = ?", (run_id,)).fetchone() is None:
            raise StoreError(
                f"there is no run {run_id}",
                where=str(self.path),
                fix="list the runs with `sweeprig runs`",
            )

    # -- writing ----------------------------------------------------------------------------

    def create_run(
        self,
        *,
        sequence_path: str,
        sequence_text: str,
        bench_path: str | None = None,
        bench_text: str | None = None,
        simulated: bool = False,
        operator: str = "",
        part: str = "",
        serial: str = "",
        tags: Sequence[str] = (),
        title: str = "",
        points_total: int | None = None,
        status: RunStatus = "planned",
        files: Sequence[RunFile] = (),
    ) -> int:
        """Record a new run (with the full text and SHA-256 of its sequence and bench files,
        the ``files`` its inputs came from, this process's id and host) and return its id."""
        self._check_status(status)
        now = _iso(utc_now())
        with self._transaction("creating a run") as conn:
            cursor = conn.execute(
                """INSERT INTO runs (created_utc, status, title, sequence_path, sequence_sha256,
                    sequence_text, bench_path, bench_sha256, bench_text, simulated, operator,
                    part, serial, tags_json, points_total, heartbeat_utc, pid, host)
                VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)""",
                (
                    now, status, title, str(sequence_path), sha256_text(sequence_text),
                    sequence_text, None if bench_path is None else str(bench_path),
                    None if bench_text is None else sha256_text(bench_text), bench_text,
                    int(bool(simulated)), operator, part, serial,
                    json.dumps([str(t) for t in tags]), _int(points_total, "points_total"),
                    now, os.getpid(), self._host,
                ),
            )
            run_id = cursor.lastrowid
            assert run_id is not None
            conn.executemany(
                "INSERT INTO run_files (run_id, position, role, path, sha256, text) "
                "VALUES (?, ?, ?, ?, ?, ?)",
                [(run_id, k, f.role, f.path, f.sha256, f.text) for k, f in enumerate(files)],
            )
        return int(run_id)

    def run_files(self, run_id: int) -> tuple[RunFile, ...]:
        """The files recorded with a run, in order (empty for a store without the table)."""
        try:
            rows = self._read("SELECT role, path, sha256, text FROM run_files WHERE run_id = ? "
                              "ORDER BY position", (run_id,))
        except StoreError:
            if self._has_table("run_files"):
                raise
            return ()  # an older store opened read-only: no files were recorded
        return tuple(RunFile(*row) for row in rows)

    def _has_table(self, name: str) -> bool:
        rows = self._read("SELECT 1 FROM sqlite_master WHERE type = 'table' AND name = ?",
                          (name,))
        return bool(rows)

    def record_instruments(self, run_id: int, instruments: Sequence[InstrumentRecord]) -> None:
        """Record the run's instruments; a role recorded before is replaced."""
        with self._transaction("recording instruments") as conn:
            self._require_run(conn, run_id)
            for inst in instruments:
                conn.execute("DELETE FROM instruments WHERE run_id = ? AND role = ?",
                             (run_id, inst.role))
                conn.execute(
                    "INSERT INTO instruments (run_id, role, resource, profile, idn) "
                    "VALUES (?, ?, ?, ?, ?)",
                    (run_id, inst.role, inst.resource, inst.profile, inst.idn),
                )

    def write_point(
        self, run_id: int, point: PointRecord, readings: Sequence[ReadingRecord],
        *, activity: Mapping[str, Any] | None = None,
    ) -> None:
        """Store ``point`` and its ``readings`` in one transaction (all or nothing).

        ``activity``: what the run is doing now (e.g. its ETA), written with the heartbeat
        in the same transaction.

        A point index already stored for this run is a :class:`StoreError`.
        """
        point_row = self._point_row(run_id, point)
        reading_rows = [
            self._reading_row(run_id, point.index, number, reading)
            for number, reading in enumerate(readings)
        ]
        with self._transaction(f"writing point {point.index}") as conn:
            self._require_run(conn, run_id)
            exists = conn.execute(
                "SELECT 1 FROM points WHERE run_id = ? AND point_index = ?",
                (run_id, point.index),
            ).fetchone()
            if exists is not None:
                raise StoreError(
                    f"point {point.index} of run {run_id} is already stored",
                    where=str(self.path),
                    fix="skip the points listed by done_point_indices() when resuming",
                )
            # the point is the heartbeat: no separate write per point
            conn.execute("UPDATE runs SET heartbeat_utc = ?, activity_json = ? WHERE id = ?",
                         (_iso(utc_now()), None if activity is None
                          else json.dumps(dict(activity), default=str), run_id))
            conn.execute(
                f"INSERT INTO points (run_id, point_index, {', '.join(POINT_COLUMNS)}, "
                "wall_start_utc, wall_end_utc, extra_json) "
                f"VALUES ({', '.join('?' * (len(POINT_COLUMNS) + 5))})",
                point_row,
            )
            conn.executemany(
                f"INSERT INTO readings (run_id, point_index, reading_no, "
                f"{', '.join(READING_COLUMNS)}, overload, attenuation_check, extra_json) "
                f"VALUES ({', '.join('?' * (len(READING_COLUMNS) + 6))})",
                reading_rows,
            )

    @staticmethod
    def _point_row(run_id: int, p: PointRecord) -> tuple[object, ...]:
        index = _int(p.index, "point.index")
        values: list[object] = [run_id, index, str(p.study)]
        for column in POINT_COLUMNS[1:]:
            values.append(_real(getattr(p, column), f"point.{column}"))
        values += [_iso(p.wall_start), _iso(p.wall_end), _json(p.extra, "point.extra")]
        return tuple(values)

    @staticmethod
    def _reading_row(run_id: int, index: int, number: int, r: ReadingRecord) -> tuple[object, ...]:
        values: list[object] = [run_id, index, number, str(r.name), str(r.kind), str(r.port)]
        for column in READING_COLUMNS[3:]:
            if column in ("m", "n", "averages"):
                values.append(_int(getattr(r, column), f"reading.{column}"))
            else:
                values.append(_real(getattr(r, column), f"reading.{column}"))
        values.append(int(bool(r.overload)))
        values.append(None if r.attenuation_check is None else int(bool(r.attenuation_check)))
        values.append(_json(r.extra, "reading.extra"))
        return tuple(values)

    def done_point_indices(self, run_id: int) -> set[int]:
        """Indices of the points stored for ``run_id``."""
        rows = self._read("SELECT point_index FROM points WHERE run_id = ?", (run_id,))
        return {int(r[0]) for r in rows}

    @staticmethod
    def _check_status(status: str) -> None:
        if status not in RUN_STATUSES:
            raise StoreError(
                f"{status!r} is not a run status",
                where="run status",
                fix=f"use one of {', '.join(RUN_STATUSES)}",
            )

    def set_status(self, run_id: int, status: RunStatus, reason: str | None = None) -> None:
        """Change the status. ``complete``/``aborted``/``unsafe`` set the finish time;
        ``running`` also records this process (pid, host) and a heartbeat."""
        self._check_status(status)
        now = _iso(utc_now())
        with self._transaction("setting the run status") as conn:
            self._require_run(conn, run_id)
            if status in FINAL_STATUSES:
                conn.execute(
                    "UPDATE runs SET status = ?, reason = ?, finished_utc = ?, heartbeat_utc = ?, "
                    "activity_json = NULL WHERE id = ?",
                    (status, reason, now, now, run_id),
                )
            elif status == "running":
                conn.execute(
                    "UPDATE runs SET status = ?, reason = ?, finished_utc = NULL, "
                    "heartbeat_utc = ?, pid = ?, host = ? WHERE id = ?",
                    (status, reason, now, os.getpid(), self._host, run_id),
                )
            else:
                conn.execute("UPDATE runs SET status = ?, reason = ? WHERE id = ?",
                             (status, reason, run_id))

    def set_points_total(self, run_id: int, points_total: int) -> None:
        """Record how many points the run's plan has."""
        with self._transaction("setting the point total") as conn:
            self._require_run(conn, run_id)
            conn.execute("UPDATE runs SET points_total = ? WHERE id = ?",
                         (_int(points_total, "points_total"), run_id))

    def heartbeat(self, run_id: int, activity: Mapping[str, Any] | None = None) -> None:
        """Record that this process is alive and running ``run_id``, and what it is doing
        (``activity``: what it waits for, see :class:`~sweeprig.store.base.RunInfo`; None
        while it measures)."""
        text = None if activity is None else json.dumps(dict(activity), default=str)
        with self._transaction("heartbeat") as conn:
            conn.execute(
                "UPDATE runs SET heartbeat_utc = ?, pid = ?, host = ?, activity_json = ? "
                "WHERE id = ?",
                (_iso(utc_now()), os.getpid(), self._host, text, run_id),
            )

    def log_event(
        self,
        run_id: int,
        severity: Severity,
        kind: str,
        message: str,
        details: Mapping[str, Any] | None = None,
        *,
        point_index: int | None = None,
    ) -> None:
        """Append an event (severity debug/info/warning/error; JSON-able details)."""
        if severity not in SEVERITIES:
            raise StoreError(f"{severity!r} is not a severity", where="event",
                             fix=f"use one of {', '.join(SEVERITIES)}")
        details_json = _json(details, "event.details")
        with self._transaction("logging an event") as conn:
            conn.execute(
                "INSERT INTO events (run_id, time_utc, severity, kind, message, details_json, "
                "point_index) VALUES (?, ?, ?, ?, ?, ?, ?)",
                (run_id, _iso(utc_now()), severity, kind, message, details_json,
                 _int(point_index, "point_index")),
            )

    def log_bus(self, run_id: int, entries: Sequence[BusRecord]) -> None:
        """Append SCPI exchanges to the bus log, in one transaction."""
        if not entries:
            return
        rows = [
            (run_id, _iso(e.time), e.role, e.sent, e.received, float(e.duration_s))
            for e in entries
        ]
        with self._transaction("writing the bus log") as conn:
            conn.executemany(
                "INSERT INTO bus_log (run_id, time_utc, role, sent, received, duration_s) "
                "VALUES (?, ?, ?, ?, ?, ?)",
                rows,
            )

    # -- reading ----------------------------------------------------------------------------

    _SUMMARY_SQL = """
        SELECT r.id, r.status, r.reason, r.created_utc, r.finished_utc, r.heartbeat_utc,
               r.sequence_path, r.bench_path, r.simulated, r.operator, r.part, r.serial,
               r.tags_json, r.title, r.points_total, r.pid, r.host,
               (SELECT COUNT(*) FROM points p WHERE p.run_id = r.id),
               (SELECT MAX(p.wall_end_utc) FROM points p WHERE p.run_id = r.id)
        FROM runs r
    """

    def _effective_status(
        self, run_id: int, status: str, heartbeat: datetime | None, host: str | None
    ) -> str:
        """A ``running`` run is alive while its run lock is held (the kernel drops it when the
        process ends). From another host that lock may not be visible: there the heartbeat
        decides."""
        if status != "running":
            return status
        if run_lock_held(self.path, run_id):
            return status
        if host == self._host:
            return "interrupted"
        if heartbeat is None or (utc_now() - heartbeat).total_seconds() > self.stale_after_s:
            return "interrupted"
        return status

    def _summary_fields(self, row: tuple[Any, ...]) -> dict[str, Any]:
        heartbeat = _dt(row[5])
        return {
            "id": int(row[0]),
            "status": self._effective_status(int(row[0]), row[1], heartbeat, row[16]),
            "stored_status": row[1],
            "reason": row[2],
            "created": _dt(row[3]),
            "finished": _dt(row[4]),
            "heartbeat": heartbeat,
            "sequence_path": row[6],
            "bench_path": row[7],
            "simulated": bool(row[8]),
            "operator": row[9],
            "part": row[10],
            "serial": row[11],
            "tags": tuple(json.loads(row[12])),
            "title": row[13],
            "points_total": row[14],
            "points_done": int(row[17]),
            "last_point_end": _dt(row[18]),
        }

    def runs(self) -> list[RunSummary]:
        """Every run, newest first (``status`` shows stale running runs as interrupted)."""
        rows = self._read(self._SUMMARY_SQL + " ORDER BY r.id DESC")
        return [RunSummary(**self._summary_fields(row)) for row in rows]

    def run(self, run_id: int) -> RunInfo:
        """One run in full; :class:`StoreError` if there is none with this id."""
        rows = self._read(self._SUMMARY_SQL + " WHERE r.id = ?", (run_id,))
        if not rows:
            raise StoreError(
                f"there is no run {run_id}",
                where=str(self.path),
                fix="list the runs with `sweeprig runs`",
            )
        extra = self._read(
            "SELECT sequence_sha256, sequence_text, bench_sha256, bench_text, pid, host, "
            "activity_json FROM runs WHERE id = ?",
            (run_id,),
        )[0]
        instruments = tuple(
            InstrumentRecord(*r)
            for r in self._read(
                "SELECT role, resource, profile, idn FROM instruments WHERE run_id = ? "
                "ORDER BY role",
                (run_id,),
            )
        )
        return RunInfo(
            **self._summary_fields(rows[0]),
            sequence_sha256=extra[0],
            sequence_text=extra[1],
            bench_sha256=extra[2],
            bench_text=extra[3],
            pid=extra[4],
            host=extra[5],
            activity=_activity(extra[6]),
            instruments=instruments,
        )

    def points_frame(self, run_id: int) -> pd.DataFrame:
        """The run's points: ``run_id``, ``point_index``, the settings and measurements
        (NaN where not used), ``wall_start``/``wall_end`` (UTC), ``extra_json``."""
        columns = ["run_id", "point_index", *POINT_COLUMNS, "wall_start", "wall_end",
                   "extra_json"]
        import pandas as pd

        rows = self._read(
            f"SELECT run_id, point_index, {', '.join(POINT_COLUMNS)}, wall_start_utc, "
            "wall_end_utc, extra_json FROM points WHERE run_id = ? ORDER BY point_index",
            (run_id,),
        )
        frame = pd.DataFrame.from_records(rows, columns=columns)
        for column in POINT_COLUMNS[1:]:
            frame[column] = frame[column].astype("float64")
        frame["run_id"] = frame["run_id"].astype("int64")
        frame["point_index"] = frame["point_index"].astype("int64")
        frame["study"] = frame["study"].astype("object")
        for column in ("wall_start", "wall_end"):
            frame[column] = pd.to_datetime(frame[column], utc=True, format="ISO8601")
        return frame

    def readings_frame(self, run_id: int) -> pd.DataFrame:
        """The run's readings: ``run_id``, ``point_index``, ``reading_no``, the reading's
        fields; ``m``/``n``/``averages`` as nullable integers, ``attenuation_check`` as a
        nullable boolean."""
        columns = ["run_id", "point_index", "reading_no", *READING_COLUMNS, "overload",
                   "attenuation_check", "extra_json"]
        import pandas as pd

        rows = self._read(
            f"SELECT run_id, point_index, reading_no, {', '.join(READING_COLUMNS)}, overload, "
            "attenuation_check, extra_json FROM readings WHERE run_id = ? "
            "ORDER BY point_index, reading_no",
            (run_id,),
        )
        frame = pd.DataFrame.from_records(rows, columns=columns)
        for column in ("run_id", "point_index", "reading_no"):
            frame[column] = frame[column].astype("int64")
        for column in ("freq_hz", "level_dbm", "noise_floor_dbm", "span_hz", "rbw_hz",
                       "attenuation_db", "ref_level_dbm"):
            frame[column] = frame[column].astype("float64")
        for column in ("m", "n", "averages"):
            frame[column] = frame[column].astype("Int64")
        frame["overload"] = frame["overload"].astype(bool)
        frame["attenuation_check"] = frame["attenuation_check"].astype("boolean")
        return frame

    def events(self, run_id: int) -> list[EventRecord]:
        """The run's events, oldest first."""
        rows = self._read(
            "SELECT time_utc, severity, kind, message, details_json, point_index FROM events "
            "WHERE run_id = ? ORDER BY id",
            (run_id,),
        )
        return [
            EventRecord(_dt(r[0]) or utc_now(), r[1], r[2], r[3], json.loads(r[4]), r[5])
            for r in rows
        ]

    def bus_log(self, run_id: int, *, limit: int | None = None,
                since: datetime | None = None, until: datetime | None = None,
                role: str | None = None) -> list[BusRecord]:
        """The run's bus log, oldest first; only the last ``limit`` entries if given, only
        exchanges between ``since`` and ``until`` (UTC, inclusive) and of ``role`` if given."""
        sql = "SELECT time_utc, role, sent, received, duration_s FROM bus_log WHERE run_id = ?"
        params: tuple[object, ...] = (run_id,)
        if since is not None:
            sql += " AND time_utc >= ?"
            params += (_iso(since),)
        if until is not None:
            sql += " AND time_utc <= ?"
            params += (_iso(until),)
        if role is not None:
            sql += " AND role = ?"
            params += (role,)
        sql += " ORDER BY id DESC"
        if limit is not None:
            sql += " LIMIT ?"
            params += (int(limit),)
        rows = self._read(sql, params)
        return [BusRecord(_dt(r[0]) or utc_now(), r[1], r[2], r[3], r[4]) for r in reversed(rows)]

    def close(self) -> None:
        """Close the database (idempotent)."""
        with self._lock, suppress(sqlite3.Error):
            self._conn.close()

    def __enter__(self) -> SqliteRunStore:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


def open_store(
    path: Path | str, *, create: bool = True, durable: bool = True
) -> SqliteRunStore:
    """Open the run store at ``path`` (an SQLite file)."""
    return SqliteRunStore(path, create=create, durable=durable)
