"""The SQLite run store (stdlib ``sqlite3``).

Settings and why:

* ``journal_mode=WAL``: readers (``sweeprig status`` in another terminal, the analysis) see every
  committed point while the engine keeps writing, and never block it.
* Durable by default: with WAL, ``synchronous=NORMAL`` (every commit is safe against a crash
  of the process at once) and the log itself forced to disk (fsync) by the first point
  committed :data:`SYNC_EVERY_S` after the last forcing or :data:`SYNC_EVERY_POINTS` points
  after it, and by every other write (a run's status, its events, a heartbeat): a power cut
  loses at most the points committed since the last forcing (fewer than 50; while points
  keep coming, about half a second's worth), which ``resume`` measures again, and a run no
  longer pays an fsync per point (several milliseconds on a loaded disk). A point's forcing
  is owed rather than done at its commit (from the point before the count's): the run loop
  pays it while the bench settles for the next point (:meth:`SqliteRunStore.force_owed_log`),
  before that point is measured, and the next commit pays it if nobody did. Without WAL,
  ``FULL``. ``durable=False`` selects ``NORMAL`` without forcing
  (a power cut may drop the last commits) for simulated runs.
* ``foreign_keys=ON``; ``busy_timeout`` of 5 s for concurrent access.
* One transaction per point: the point row and all its readings, or nothing.
* The file is watched: before and after every write transaction the store's path is checked
  (one ``stat``) against the file it opened. SQLite writes through the descriptors it holds,
  so a store whose file or folder was deleted, moved or replaced would go on "committing"
  into a file nobody can reach; instead the write is a :class:`StoreError` naming what
  happened, and every later write is refused with it. SQLite's own write failures (disk
  full, read-only, I/O error) become a :class:`StoreError` carrying that first cause, never
  the secondary failure of the rollback.

The SQL is portable and shared with the PostgreSQL store (:mod:`sweeprig.store.sql`: INTEGER,
DOUBLE PRECISION, TEXT columns; times as ISO 8601 UTC text; booleans as 0/1; JSON as TEXT; no
upserts); this module adds what is SQLite's own (the file, WAL, its locks and failures). The
tables are described in ``docs/run-store.md``.
"""

from __future__ import annotations

import errno
import os
import socket
import sqlite3
import threading
import time
from collections.abc import Iterator, Mapping, Sequence
from contextlib import contextmanager, suppress
from pathlib import Path
from typing import TYPE_CHECKING, Any

from sweeprig.errors import StoreError
from sweeprig.files import sha256_text  # noqa: F401  (re-exported: older imports name it here)
from sweeprig.signals import deferred
from sweeprig.store.base import HEARTBEAT_STALE_S, PointRecord, ReadingRecord
from sweeprig.store.runlock import run_lock_held

if TYPE_CHECKING:
    from sweeprig.store.arrow_reader import ArrowRead
    from sweeprig.store.side_reader import TypedColumns

from sweeprig.store.sql import (  # noqa: F401  (re-exported: older imports name them here)
    POINT_COLUMNS,
    READING_COLUMNS,
    SCHEMA,
    SCHEMA_VERSION,
    SqlRunStoreCore,
    newer_schema_error,
)

#: A durable store forces its log to disk at least this often while points are written, s
#: (and after this many points), instead of after every point: common practice for a
#: journal's group commit, no source.
SYNC_EVERY_S = 0.5
SYNC_EVERY_POINTS = 50
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


# -- the store --------------------------------------------------------------------------------


class SqliteRunStore(SqlRunStoreCore):
    """A :class:`~sweeprig.store.base.RunStore` in one SQLite file.

    ``path``: the database file. ``create``: create it (and its folder) if missing; otherwise
    a missing file is a :class:`StoreError`. ``durable``: commits forced to disk (see the
    module docstring) or left to the operating system. A ``running`` run is shown as
    ``interrupted`` when its run lock is free (:mod:`sweeprig.store.runlock`);
    ``stale_after_s``: for a run on another host, whose lock this host may not see, the
    heartbeat age after which it is. Safe to share between threads (one lock).
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
        #: the log is forced to disk by this store (durable WAL), not by SQLite per commit
        self._forces_log = durable and self.journal_mode == "wal"
        self._writing_point = False
        self._unforced_points = 0
        self._forced_at = time.monotonic()
        #: a point's commit found the log due for forcing and left it to
        #: :meth:`force_owed_log` (or the next commit)
        self._log_owed = False
        conn.execute(f"PRAGMA synchronous = "
                     f"{'FULL' if durable and not self._forces_log else 'NORMAL'}")
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
            raise newer_schema_error(version, str(self.path),
                                     "use a newer sweeprig, or another store file")
        if version == 1:
            self._migrate_to_v2()
        if version in (1, 2):
            self._migrate_to_v3()
        if version in (1, 2, 3):
            self._migrate_to_v4()

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
            conn.execute("UPDATE store_meta SET setting = '3' WHERE name = 'schema_version' "
                         "AND CAST(setting AS INTEGER) < 3")

    def _migrate_to_v4(self) -> None:
        """Add the ``run_figures`` table (runs finished before it have no kept figures: they
        are reduced when first asked for). A store that cannot be written is read as it is."""
        create = next(s for s in SCHEMA if "TABLE IF NOT EXISTS run_figures (" in s)
        with self._migration() as conn:
            if conn is None:
                return
            conn.execute(create)
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
            if self._forces_log:
                self._force_log(what)

    def _force_log(self, what: str) -> None:
        """After a commit: force the write-ahead log to disk, unless this commit is a point
        and the last forcing is less than :data:`SYNC_EVERY_S` and
        :data:`SYNC_EVERY_POINTS` points old. A point that finds it due leaves it owed to
        :meth:`force_owed_log` (the run loop calls it while the bench settles for the next
        point); a second point that finds it still owed forces it at once."""
        if self._writing_point:
            self._unforced_points += 1
            # owed one point early, so the count's bound holds when nobody pays what is owed
            if self._unforced_points < SYNC_EVERY_POINTS - 1 \
                    and time.monotonic() - self._forced_at < SYNC_EVERY_S:
                return
            if not self._log_owed:
                self._log_owed = True
                return
        self._fsync_log(what)

    def force_owed_log(self) -> None:
        """Force the write-ahead log to disk now if a point's commit left that owed (see the
        module docstring); nothing otherwise. The run loop calls it while it waits anyway
        (the bench settling), so the points' forcing costs them no time of their own."""
        with self._lock:
            if self._log_owed and self._forces_log:
                self.check_file("forcing the run store's log")
                self._fsync_log("forcing the run store's log")

    def _fsync_log(self, what: str) -> None:
        """Force the write-ahead log to disk (fsync), whatever is due."""
        now = time.monotonic()
        try:
            fd = os.open(f"{self.path}-wal", os.O_RDONLY)
        except FileNotFoundError:  # checkpointed and removed: the database file holds it
            fd = None
        except OSError as exc:
            raise self._unforced(what, exc) from None
        if fd is not None:
            try:
                os.fsync(fd)
            except OSError as exc:
                raise self._unforced(what, exc) from None
            finally:
                os.close(fd)
        self._unforced_points = 0
        self._forced_at = now
        self._log_owed = False

    def _unforced(self, what: str, exc: OSError) -> StoreError:
        return StoreError(
            f"{what}: the run store's log could not be forced to disk "
            f"({exc.strerror or exc})",
            where=str(self.path),
            fix="check the disk (full, failing, or unmounted); " + _FIX_RESUME)

    def write_point(self, run_id: int, point: PointRecord, readings: Sequence[ReadingRecord],
                    *, activity: Mapping[str, Any] | None = None) -> None:
        """As :meth:`SqlRunStoreCore.write_point`; its commit forces the log only now and
        then (see the module docstring)."""
        with self._lock:
            self._writing_point = True
            try:
                super().write_point(run_id, point, readings, activity=activity)
            finally:
                self._writing_point = False

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

    def _typed_slices(self, sql: str, params: Sequence[Sequence[object]], kinds: str
                      ) -> Iterator[list[tuple[Any, ...]] | TypedColumns]:
        """The rows of ``sql`` per parameter tuple, the second half of a long read by a
        child process on the other core, which types its slices' columns
        (:func:`sweeprig.store.side_reader.typed_slices`)."""
        from sweeprig.store.side_reader import typed_slices

        return typed_slices(self.path, sql, params, self._read, kinds)

    def _tables_elsewhere(self, run_id: int) -> ArrowRead | None:
        """A large run's points and readings (at least :data:`~sweeprig.store.side_reader.
        SIDE_READ_MIN_SLICES` slices of readings) read into Arrow columns by a child
        process, when the ``fast`` extra is installed (:mod:`sweeprig.store.arrow_reader`)."""
        from sweeprig.store.arrow_reader import arrow_read_available, start_read
        from sweeprig.store.side_reader import SIDE_READ_MIN_SLICES
        from sweeprig.store.sql import (
            POINT_KINDS,
            POINT_SLICE_POINTS,
            POINTS_ORDER,
            POINTS_SELECT,
            READING_KINDS,
            READING_SLICE_POINTS,
            READINGS_ORDER,
            READINGS_SELECT,
        )

        if not arrow_read_available():
            return None
        sql, params = self._point_slices("readings", READINGS_SELECT, READINGS_ORDER, run_id,
                                         READING_SLICE_POINTS)
        if len(params) < SIDE_READ_MIN_SLICES:
            return None
        points = self._point_slices("points", POINTS_SELECT, POINTS_ORDER, run_id,
                                    POINT_SLICE_POINTS)
        return start_read(self.path, [(*points, POINT_KINDS), (sql, params, READING_KINDS)])

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

    def _insert_run(self, conn: sqlite3.Connection, sql: str, params: Sequence[object]) -> int:
        run_id = conn.execute(sql, params).lastrowid
        assert run_id is not None
        return int(run_id)

    def _lock_held(self, run_id: int) -> bool:
        return run_lock_held(self.path, run_id)

    def _columns(self, table: str) -> list[str]:
        with self._lock:
            cursor = self._conn.execute(f"SELECT * FROM {table} WHERE 1 = 0")
            return [d[0] for d in cursor.description]

    @property
    def where(self) -> str:
        """How messages name this store: its path."""
        return str(self.path)

    def _has_table(self, name: str) -> bool:
        rows = self._read("SELECT 1 FROM sqlite_master WHERE type = 'table' AND name = ?",
                          (name,))
        return bool(rows)

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
