"""What the SQLite and PostgreSQL run stores share: one schema, one set of statements, one
conversion of records to rows and back.

Every statement is written once, with ``?`` placeholders (SQLite's); the PostgreSQL store
turns them into psycopg's ``%s`` (:func:`to_pyformat`) and sends the values separately, so
both backends run the same parameterised SQL. Only the DDL differs where the dialects do
(:func:`schema_statements`: run and event ids are ``INTEGER PRIMARY KEY`` in SQLite, an
identity column in PostgreSQL). Times are ISO 8601 UTC text, booleans 0/1, JSON as text, in
both, so a run copied from one to the other reads back identical.

:class:`SqlRunStoreCore` holds every method of :class:`~sweeprig.store.base.RunStore` that is
only SQL; a backend supplies the plumbing: ``_transaction(what)`` (a write transaction
yielding something with ``execute``/``executemany`` that take ``?`` statements),
``_read(sql, params)``, ``_insert_run(conn, sql, params)`` (the new run's id),
``_lock_held(run_id)`` (whether a live process holds the run), ``where`` (how messages name
the store), ``_host`` and ``stale_after_s``.
"""

from __future__ import annotations

import json
import math
import os
from collections.abc import Iterator, Mapping, Sequence
from contextlib import AbstractContextManager
from dataclasses import dataclass
from datetime import UTC, datetime
from types import MappingProxyType
from typing import TYPE_CHECKING, Any

from sweeprig.errors import StoreError
from sweeprig.files import sha256_text
from sweeprig.store.base import (
    FINAL_STATUSES,
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

if TYPE_CHECKING:
    import pandas as pd

    from sweeprig.store.arrow_reader import ArrowRead
    from sweeprig.store.side_reader import TypedColumns

SCHEMA_VERSION = 4
"""2: run status ``unsafe`` allowed; 3: table ``run_files`` (included fragments and the merged
sequence) and ``runs.activity_json`` (what a live run is waiting for); 4: table
``run_figures`` (a finished run's reduced figures, kept so a lot report need not reduce
every unit again). An older store is migrated when opened (when it can be written)."""

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
    """CREATE TABLE IF NOT EXISTS run_figures (
        run_id INTEGER PRIMARY KEY REFERENCES runs (id) ON DELETE CASCADE,
        reduced_utc TEXT NOT NULL,
        reducer TEXT NOT NULL,
        figures_json TEXT NOT NULL
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
    if type(value) is float:  # the common case first: a point has dozens of these
        return value if math.isfinite(value) else None
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
    if type(value) is int or value is None:
        return value  # type: ignore[return-value]
    try:
        return int(value)  # type: ignore[call-overload]
    except (TypeError, ValueError):
        raise StoreError(f"{name} = {value!r} is not an integer", where=name) from None


def _json(value: Mapping[str, Any] | None, name: str) -> str:
    if not value:
        return "{}"  # json.dumps({}): most records have no extra
    try:
        return _EXTRA_JSON.encode(dict(value or {}))
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


#: ``json.dumps(..., sort_keys=True, default=_json_default)`` made once: the same text
#: (``json.dumps`` builds this encoder on every call when given options)
_EXTRA_JSON = json.JSONEncoder(sort_keys=True, default=_json_default)
#: ``json.dumps(..., default=str)`` made once, for a run's activity
_ACTIVITY_JSON = json.JSONEncoder(default=str)


def _activity(text: str | None) -> Mapping[str, Any] | None:
    """A stored activity (None when measuring, or unreadable: it is a display aid only)."""
    if not text:
        return None
    try:
        value = json.loads(text)
    except ValueError:
        return None
    return MappingProxyType(value) if isinstance(value, dict) else None


_POINT_REALS: tuple[tuple[str, str], ...] = tuple((c, f"point.{c}") for c in POINT_COLUMNS[1:])
"""The point's number columns and the names a message gives them."""
_READING_NUMBERS: tuple[tuple[str, str, bool], ...] = tuple(
    (c, f"reading.{c}", c in ("m", "n", "averages")) for c in READING_COLUMNS[3:])
"""The reading's number columns, the names a message gives them, and whether each is an
integer."""

INSERT_POINT_SQL = (
    f"INSERT INTO points (run_id, point_index, {', '.join(POINT_COLUMNS)}, "
    "wall_start_utc, wall_end_utc, extra_json) "
    f"VALUES ({', '.join('?' * (len(POINT_COLUMNS) + 5))})")
INSERT_POINT_UNLESS_STORED_SQL = INSERT_POINT_SQL + " ON CONFLICT (run_id, point_index) DO NOTHING"
"""A point's row, inserted only when the run has no point of that index (no row changed:
already stored)."""
INSERT_READING_SQL = (
    f"INSERT INTO readings (run_id, point_index, reading_no, "
    f"{', '.join(READING_COLUMNS)}, overload, attenuation_check, extra_json) "
    f"VALUES ({', '.join('?' * (len(READING_COLUMNS) + 6))})")


def schema_statements(dialect: str) -> tuple[str, ...]:
    """The schema's DDL for ``dialect`` (``"sqlite"`` or ``"postgresql"``): the same tables,
    columns and constraints; PostgreSQL's ids are identity columns."""
    if dialect == "sqlite":
        return SCHEMA
    if dialect != "postgresql":
        raise ValueError(f"unknown SQL dialect {dialect!r}")
    return tuple(s.replace("id INTEGER PRIMARY KEY,", "id BIGINT GENERATED BY DEFAULT AS "
                           "IDENTITY PRIMARY KEY,") for s in SCHEMA)


def to_pyformat(sql: str) -> str:
    """A ``?`` statement as psycopg's ``%s`` one (the statements here hold no literal ``?``
    or ``%``; a ``%`` is doubled so it stays a literal)."""
    return sql.replace("%", "%%").replace("?", "%s")


def newer_schema_error(version: int, where: str, fix: str) -> StoreError:
    """The refusal of a store written by a newer sweeprig (never misread)."""
    return StoreError(
        f"the run store has schema version {version}; this sweeprig reads up to "
        f"{SCHEMA_VERSION}",
        where=where,
        fix=fix,
    )


class SqlRunStoreCore:
    """The SQL of :class:`~sweeprig.store.base.RunStore`, shared by both backends (see the
    module docstring for the plumbing a backend supplies)."""

    where: str
    stale_after_s: float
    _host: str

    def _transaction(self, what: str) -> AbstractContextManager[Any]:
        raise NotImplementedError

    def _read(self, sql: str, params: Sequence[object] = ()) -> list[tuple[Any, ...]]:
        raise NotImplementedError

    def _insert_run(self, conn: Any, sql: str, params: Sequence[object]) -> int:
        raise NotImplementedError

    def _lock_held(self, run_id: int) -> bool:
        raise NotImplementedError

    def _has_table(self, name: str) -> bool:
        raise NotImplementedError

    def _columns(self, table: str) -> list[str]:
        """The columns of ``table`` (one of this schema's), in the store's order."""
        raise NotImplementedError

    def _require_run(self, conn: Any, run_id: int) -> None:
        if conn.execute("SELECT 1 FROM runs WHERE id = ?", (run_id,)).fetchone() is None:
            raise self._no_run(run_id)

    def _no_run(self, run_id: int) -> StoreError:
        return StoreError(
            f"there is no run {run_id}",
            where=self.where,
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
            run_id = self._insert_run(
                conn,
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

    def save_figures(self, run_id: int, reducer: str, figures_json: str) -> None:
        """Keep run ``run_id``'s reduced figures (``figures_json``, made by ``reducer``: what
        made them and in which format, so a later sweeprig can tell they are not its own);
        figures kept before for the run are replaced."""
        with self._transaction("keeping the run's figures") as conn:
            self._require_run(conn, run_id)
            conn.execute(
                "INSERT INTO run_figures (run_id, reduced_utc, reducer, figures_json) "
                "VALUES (?, ?, ?, ?) ON CONFLICT (run_id) DO UPDATE SET "
                "reduced_utc = excluded.reduced_utc, reducer = excluded.reducer, "
                "figures_json = excluded.figures_json",
                (run_id, _iso(utc_now()), reducer, figures_json))

    def stored_figures(self, run_ids: Sequence[int]) -> dict[int, tuple[str, str]]:
        """The kept figures of those of ``run_ids`` that have them: ``{run_id: (reducer,
        figures_json)}`` (empty for a store without the table, opened read-only)."""
        ids = [int(r) for r in run_ids]
        if not ids:
            return {}
        try:
            rows = self._read(
                "SELECT run_id, reducer, figures_json FROM run_figures WHERE run_id IN "
                f"({', '.join('?' * len(ids))})", ids)
        except StoreError:
            if self._has_table("run_figures"):
                raise
            return {}
        return {int(r[0]): (str(r[1]), str(r[2])) for r in rows}

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
        reading_rows = [  # the index as the point row has it (a numpy integer made an int)
            self._reading_row(run_id, point_row[1], number, reading)  # type: ignore[arg-type]
            for number, reading in enumerate(readings)
        ]
        with self._transaction(f"writing point {point.index}") as conn:
            self._write_point_rows(conn, run_id, point_row, reading_rows, activity)

    def _write_point_rows(self, conn: Any, run_id: int, point_row: Sequence[object],
                          reading_rows: Sequence[Sequence[object]],
                          activity: Mapping[str, Any] | None) -> None:
        """The statements of one point, inside its transaction: the heartbeat (the point is
        the heartbeat: no separate write per point), the point row, its readings. A missing
        run (the heartbeat updates no row) or a point already stored (its row is not
        inserted) raises, and the transaction is rolled back: the two checks cost no
        statement of their own."""
        heartbeat = conn.execute(
            "UPDATE runs SET heartbeat_utc = ?, activity_json = ? WHERE id = ?",
            (_iso(utc_now()), None if activity is None
             else _ACTIVITY_JSON.encode(dict(activity)), run_id))
        if heartbeat.rowcount == 0:
            raise self._no_run(run_id)
        if conn.execute(INSERT_POINT_UNLESS_STORED_SQL, point_row).rowcount == 0:
            raise self._point_already_stored(run_id, int(point_row[1]))  # type: ignore[call-overload]
        conn.executemany(INSERT_READING_SQL, reading_rows)

    def _point_already_stored(self, run_id: int, index: int) -> StoreError:
        return StoreError(
            f"point {index} of run {run_id} is already stored",
            where=self.where,
            fix="skip the points listed by done_point_indices() when resuming",
        )

    @staticmethod
    def _point_row(run_id: int, p: PointRecord) -> tuple[object, ...]:
        return (run_id, _int(p.index, "point.index"), str(p.study),
                *[_real(getattr(p, column), name) for column, name in _POINT_REALS],
                _iso(p.wall_start), _iso(p.wall_end), _json(p.extra, "point.extra"))

    @staticmethod
    def _reading_row(run_id: int, index: int, number: int, r: ReadingRecord) -> tuple[object, ...]:
        return (run_id, index, number, str(r.name), str(r.kind), str(r.port),
                *[(_int if integer else _real)(getattr(r, column), name)
                  for column, name, integer in _READING_NUMBERS],
                int(bool(r.overload)),
                None if r.attenuation_check is None else int(bool(r.attenuation_check)),
                _json(r.extra, "reading.extra"))

    def force_owed_log(self) -> None:
        """Nothing owed: every commit is as durable as the server makes it."""

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
        if self._lock_held(run_id):
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
                where=self.where,
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
        import pandas as pd

        frames = []
        for rows in self._sliced_by_point("points", POINTS_SELECT, POINTS_ORDER, run_id,
                                          POINT_SLICE_POINTS, POINT_KINDS):
            frames.append(pd.DataFrame.from_records(rows, columns=POINT_FRAME_COLUMNS)
                          if isinstance(rows, list)
                          else _frame_of_columns(rows, POINT_FRAME_COLUMNS, POINT_KINDS))
            del rows  # (before the next slice is read)
        return typed_points(_concatenated(frames, POINT_FRAME_COLUMNS))

    def _sliced_by_point(self, table: str, select: str, order: str, run_id: int,
                         slice_points: int, kinds: str
                         ) -> Iterator[list[tuple[Any, ...]] | TypedColumns]:
        """The rows of ``select`` (``... WHERE run_id = ?`` of ``table``) in ``order``, a
        slice of ``slice_points`` point indices per query (:meth:`_typed_slices`): a large
        run's rows as Python tuples would take several times the memory of the typed table
        they become."""
        return self._typed_slices(*self._point_slices(table, select, order, run_id,
                                                      slice_points), kinds)

    def _point_slices(self, table: str, select: str, order: str, run_id: int,
                      slice_points: int) -> tuple[str, list[tuple[object, ...]]]:
        """The query of :meth:`_sliced_by_point` and its parameter tuples, one a slice."""
        # the first and the last by the key's order, each one step of its index (SQLite's
        # MIN and MAX together in one query read every entry of the run instead: about
        # a second for a million points' readings)
        bounds = self._read(
            f"SELECT (SELECT point_index FROM {table} WHERE run_id = ? ORDER BY point_index "
            f"LIMIT 1), (SELECT point_index FROM {table} WHERE run_id = ? ORDER BY "
            "point_index DESC LIMIT 1)", (run_id, run_id))
        low, high = bounds[0] if bounds else (None, None)
        if low is None:
            return select + order, [(run_id,)]
        params: list[tuple[object, ...]] = [
            (run_id, start, start + slice_points)
            for start in range(int(low), int(high) + 1, slice_points)]
        return select + " AND point_index >= ? AND point_index < ?" + order, params

    def readings_frame(self, run_id: int) -> pd.DataFrame:
        """The run's readings: ``run_id``, ``point_index``, ``reading_no``, the reading's
        fields; ``m``/``n``/``averages`` as nullable integers, ``attenuation_check`` as a
        nullable boolean."""
        import pandas as pd

        frames = []
        for rows in self._sliced_by_point("readings", READINGS_SELECT, READINGS_ORDER, run_id,
                                          READING_SLICE_POINTS, READING_KINDS):
            frames.append(
                _typed_readings(pd.DataFrame.from_records(rows, columns=READING_FRAME_COLUMNS))
                if isinstance(rows, list)
                else _frame_of_columns(rows, READING_FRAME_COLUMNS, READING_KINDS))
            del rows  # (before the next slice is read)
        return _concatenated(frames, READING_FRAME_COLUMNS)

    def run_tables(self, run_id: int) -> tuple[pd.DataFrame, pd.DataFrame]:
        """The run's points and readings (:meth:`points_frame`, :meth:`readings_frame`),
        read together: a store may read a large run's in a child process
        (:meth:`_tables_elsewhere`)."""
        return self.begin_run_tables(run_id).result()

    def begin_run_tables(self, run_id: int) -> RunTablesRead:
        """:meth:`run_tables` begun now (a large run's points and readings started in a
        child process) and taken later (:meth:`RunTablesRead.result`), the caller going on
        meanwhile: ``sweeprig report`` imports the analysis while the child starts."""
        return RunTablesRead(self, run_id, self._tables_elsewhere(run_id))

    def _tables_elsewhere(self, run_id: int) -> ArrowRead | None:
        """A child process reading the run's points and readings (None: read by
        :meth:`points_frame` and :meth:`readings_frame`)."""
        return None

    def _typed_slices(self, sql: str, params: Sequence[Sequence[object]], kinds: str
                      ) -> Iterator[list[tuple[Any, ...]] | TypedColumns]:
        """The rows of ``sql`` run with each of ``params`` in turn; a store may read some of
        them elsewhere, as columns already typed by the column ``kinds``
        (:func:`sweeprig.store.side_reader.typed_slices`)."""
        for p in params:
            yield self._read(sql, p)

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



@dataclass
class RunTablesRead:
    """A run's points and readings being read (:meth:`SqlRunStoreCore.begin_run_tables`):
    ``elsewhere`` the child reading them, if any. :meth:`result` takes them (read here when
    there is no child, or it gave none); :meth:`stop` ends the child unused (it may be
    called again, or after :meth:`result`)."""

    store: SqlRunStoreCore
    run_id: int
    elsewhere: ArrowRead | None

    def result(self) -> tuple[pd.DataFrame, pd.DataFrame]:
        """The run's points and readings frames (read here after all when the child gave
        none)."""
        try:
            tables = None if self.elsewhere is None else self.elsewhere.tables()
        finally:
            self.stop()
        if tables is None:
            return (self.store.points_frame(self.run_id),
                    self.store.readings_frame(self.run_id))
        from sweeprig.store.arrow_reader import frame_of_table

        points, readings = tables
        return (typed_points(frame_of_table(points, POINT_FRAME_COLUMNS, POINT_KINDS)),
                frame_of_table(readings, READING_FRAME_COLUMNS, READING_KINDS))

    def stop(self) -> None:
        """End the child, if there is one and it is still running."""
        if self.elsewhere is not None:
            self.elsewhere.stop()


#: Points whose readings :meth:`SqlRunStoreCore.readings_frame` reads per query.
READING_SLICE_POINTS = 5000


#: The columns of ``readings_frame``, the query reading them and their order.
READING_FRAME_COLUMNS = ["run_id", "point_index", "reading_no", *READING_COLUMNS, "overload",
                         "attenuation_check", "extra_json"]
READINGS_SELECT = (f"SELECT run_id, point_index, reading_no, {', '.join(READING_COLUMNS)}, "
                   "overload, attenuation_check, extra_json FROM readings WHERE run_id = ?")
READINGS_ORDER = " ORDER BY point_index, reading_no"

#: The kinds of the columns ``readings_frame`` reads (:data:`sweeprig.store.side_reader.KINDS`):
#: ids, text, numbers, nullable integers, the overload flag, the nullable check flag, text.
READING_KINDS = "iiitttfffIIffffIbBt"


#: The kinds of the columns ``points_frame`` reads: ids, the study, the settings and
#: measurements, the wall times and the extra data as text.
POINT_KINDS = "iit" + "f" * (len(POINT_COLUMNS) - 1) + "ttt"

#: Points whose rows :meth:`SqlRunStoreCore.points_frame` reads per query.
POINT_SLICE_POINTS = 20_000
#: The columns of ``points_frame``, the query reading them and their order.
POINT_FRAME_COLUMNS: list[str] = ["run_id", "point_index", *POINT_COLUMNS, "wall_start",
                                  "wall_end", "extra_json"]
POINTS_SELECT = (f"SELECT run_id, point_index, {', '.join(POINT_COLUMNS)}, wall_start_utc, "
                 "wall_end_utc, extra_json FROM points WHERE run_id = ?")
POINTS_ORDER = " ORDER BY point_index"


def typed_points(frame: pd.DataFrame) -> pd.DataFrame:
    """The points' rows (:data:`POINT_FRAME_COLUMNS`, as read) typed as ``points_frame``
    gives them: the settings and measurements float64 (NaN where not used), the ids int64,
    the study objects, the wall times UTC timestamps."""
    import pandas as pd

    for column in POINT_COLUMNS[1:]:
        frame[column] = frame[column].astype("float64")
    frame["run_id"] = frame["run_id"].astype("int64")
    frame["point_index"] = frame["point_index"].astype("int64")
    frame["study"] = frame["study"].astype("object")
    for column in ("wall_start", "wall_end"):
        frame[column] = pd.to_datetime(frame[column], utc=True, format="ISO8601")
    return frame


def _frame_of_columns(slice_: TypedColumns, columns: list[str], kinds: str) -> pd.DataFrame:
    """A slice typed by the child (``kinds``: :data:`sweeprig.store.side_reader.KINDS`) as
    the frame ``from_records`` makes of its rows, typed as the caller types that: the same
    columns, types and values."""
    import numpy as np
    import pandas as pd

    data: dict[str, object] = {}
    for k, (name, kind) in enumerate(zip(columns, kinds, strict=True)):
        values, mask = slice_.values[k], slice_.masks[k]
        if kind == "t":
            # (as objects: the frame infers their type as from_records does, text or not)
            data[name] = np.array(values, dtype=object)
        elif kind == "I":
            data[name] = pd.arrays.IntegerArray(values, mask)
        elif kind == "B":
            data[name] = pd.arrays.BooleanArray(values, mask)
        else:
            data[name] = values
    return pd.DataFrame(data)


def _concatenated(frames: list[pd.DataFrame], columns: list[str]) -> pd.DataFrame:
    """The slices' frames as one, each column typed as one read would have typed it."""
    import pandas as pd

    if len(frames) == 1:
        return frames[0]
    frame = pd.concat(frames, ignore_index=True)
    for column in columns:
        if len({str(f[column].dtype) for f in frames}) > 1:
            # a text column empty in one slice came out as objects there: inferred
            # again over all rows, as one read would
            frame[column] = pd.Series(frame[column].tolist(), index=frame.index)
    return frame


def _typed_readings(frame: pd.DataFrame) -> pd.DataFrame:
    """The readings table's columns in their types (see ``readings_frame``)."""
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
