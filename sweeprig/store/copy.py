"""Copy runs from one run store into another (a bench's SQLite file into the lab database),
row for row: the run as it was (times, status, files, instruments, points, readings,
events, bus log), under the id the target gives it.

One transaction per run in the target: a run is copied whole or not at all. A run already
copied (same creation time, sequence checksum, part and serial) is not copied twice. A run
still being measured is refused: copy it once it has ended.
"""

from __future__ import annotations

from dataclasses import dataclass

from sweeprig.errors import StoreError
from sweeprig.store.sql import SqlRunStoreCore

_CHILD_TABLES: tuple[tuple[str, str], ...] = (
    ("instruments", "role"),
    ("run_files", "position"),
    ("points", "point_index"),
    ("readings", "point_index, reading_no"),
    ("events", "id"),
    ("bus_log", "id"),
    ("run_figures", "run_id"),
)
"""Tables holding a run's rows, in an order that keeps foreign keys satisfied, with the
order to copy their rows in (event and bus-log ids are the target's own)."""


@dataclass(frozen=True)
class CopiedRun:
    """One run of the source and what became of it: ``target_id`` (None when ``skipped``)."""

    source_id: int
    target_id: int | None
    points: int
    skipped: str | None = None


def _columns(store: SqlRunStoreCore, table: str) -> list[str]:
    """The table's columns as the source has them (``SELECT *`` with no row)."""
    return store._columns(table)


def copy_run(source: SqlRunStoreCore, target: SqlRunStoreCore, run_id: int) -> CopiedRun:
    """Copy run ``run_id`` of ``source`` into ``target`` (see the module docstring)."""
    info = source.run(run_id)
    if info.status == "running":
        raise StoreError(f"run {run_id} is still running", where=source.where,
                         fix="copy it once it has ended (or resume it first)")
    run_columns = [c for c in _columns(source, "runs") if c != "id"]
    row = source._read(f"SELECT {', '.join(run_columns)} FROM runs WHERE id = ?", (run_id,))[0]
    values = dict(zip(run_columns, row, strict=True))
    existing = target._read(
        "SELECT id FROM runs WHERE created_utc = ? AND sequence_sha256 = ? AND part = ? AND "
        "serial = ?",
        (values["created_utc"], values["sequence_sha256"], values["part"], values["serial"]))
    if existing:
        return CopiedRun(run_id, int(existing[0][0]), info.points_done,
                         skipped=f"already in the target as run {existing[0][0]}")
    with target._transaction(f"copying run {run_id}") as conn:
        new_id = target._insert_run(
            conn, f"INSERT INTO runs ({', '.join(run_columns)}) "
            f"VALUES ({', '.join('?' * len(run_columns))})", row)
        for table, order in _CHILD_TABLES:
            if table == "run_figures" and not source._has_table(table):
                continue  # an older store, read as it is: the figures are reduced later
            columns = [c for c in _columns(source, table) if c not in ("id", "run_id")]
            rows = source._read(f"SELECT {', '.join(columns)} FROM {table} WHERE run_id = ? "
                                f"ORDER BY {order}", (run_id,))
            conn.executemany(
                f"INSERT INTO {table} (run_id, {', '.join(columns)}) "
                f"VALUES ({', '.join('?' * (len(columns) + 1))})",
                [(new_id, *r) for r in rows])
    return CopiedRun(run_id, new_id, info.points_done)
