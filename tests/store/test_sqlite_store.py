"""The run store's contract, on both backends (SQLite file and PostgreSQL server): atomic
points, concurrent readers, interrupted runs; and the SQLite store's own settings (WAL,
migrations of old files)."""

from __future__ import annotations

import sqlite3
from datetime import UTC, datetime, timedelta

import pandas as pd
import pytest

from sweeprig.errors import StoreError
from sweeprig.store import (
    DEFAULT_STORE_PATH,
    BusRecord,
    InstrumentRecord,
    PointRecord,
    ReadingRecord,
    RunFile,
    RunStore,
    SqliteRunStore,
)
from sweeprig.store.runlock import hold_run_lock
from sweeprig.store.sql import SCHEMA_VERSION
from sweeprig.store.sqlite import sha256_text

SEQUENCE = 'title = "demo"\n[[study]]\nkind = "gain"\n'


def _point(index: int, **kw) -> PointRecord:
    return PointRecord(index, "gain", rf_freq_hz=2.4e9 + index * 1e6, rf_power_dbm=-20.0,
                       lo_freq_hz=2.33e9, lo_power_dbm=7.0, temperature_c=25.0, supply_v=5.0,
                       wall_start=datetime.now(UTC), wall_end=datetime.now(UTC),
                       sim_start_s=index, sim_end_s=index + 0.5, **kw)


def _readings(index: int) -> list[ReadingRecord]:
    return [
        ReadingRecord("if", "marker", "if", 70e6, -27.5 + index, -95.0, 1, 1, 1e6, 10e3, 10.0,
                      0.0, 4, overload=False, attenuation_check=True),
        ReadingRecord("lo_leak_if", "marker", "if", 2.33e9, -40.0, None, 1, 0),
    ]


@pytest.fixture(params=["sqlite", "postgresql"])
def store(request, tmp_path):
    """The store under test: an SQLite file, then a database of the test PostgreSQL server."""
    if request.param == "postgresql":
        from sweeprig.store.postgres import PostgresRunStore

        db = PostgresRunStore(request.getfixturevalue("pg_url"))
    else:
        db = SqliteRunStore(tmp_path / "results" / "runs.sqlite")
    yield db
    db.close()


@pytest.fixture
def sqlite_store(tmp_path):
    db = SqliteRunStore(tmp_path / "results" / "runs.sqlite")
    yield db
    db.close()


def _target(store):
    """What opens the same store again: the file path or the database URL."""
    return getattr(store, "url", None) or store.path


def _reopen(store):
    from sweeprig.store.open import open_run_store

    return open_run_store(_target(store), create=False)


def _run(store: SqliteRunStore, **kw) -> int:
    return store.create_run(sequence_path="sequences/demo.toml", sequence_text=SEQUENCE,
                            bench_path="benches/sim.toml", bench_text="[bench]\n",
                            simulated=True, part="MX-100", serial="S-001", tags=("night",),
                            points_total=5, **kw)


def test_default_path_constant():
    assert DEFAULT_STORE_PATH.as_posix() == "results/sweeprig.sqlite"


def test_protocol(store):
    assert isinstance(store, RunStore)


def test_pragmas(sqlite_store):
    store = sqlite_store
    assert store.journal_mode == "wal"
    conn = sqlite3.connect(store.path)
    assert conn.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
    conn.close()


def test_a_durable_store_forces_its_log_now_and_then_not_per_point(sqlite_store, monkeypatch):
    """Every commit is safe against a crash of the process (WAL, synchronous=NORMAL); the log
    is forced to disk every SYNC_EVERY_POINTS points or SYNC_EVERY_S, and by any other
    write, so a power cut loses fewer than SYNC_EVERY_POINTS points, which resume measures
    again. A point's forcing is owed to the run's next wait (force_owed_log) from the point
    before the count's, and paid by the next commit if the run never waits."""
    import os

    from sweeprig.store import sqlite as sqlite_module

    store = sqlite_store
    assert store.journal_mode == "wal"
    assert store._conn.execute("PRAGMA synchronous").fetchone()[0] == 1  # NORMAL
    forced: list[str] = []
    real_fsync = os.fsync
    monkeypatch.setattr(sqlite_module.os, "fsync",
                        lambda fd: (forced.append("fsync"), real_fsync(fd))[1])
    monkeypatch.setattr(sqlite_module, "SYNC_EVERY_S", 3600.0)  # only the count decides
    run_id = _run(store)
    assert len(forced) == 1  # a run created: forced at once
    every = sqlite_module.SYNC_EVERY_POINTS
    for i in range(2 * every):
        store.write_point(run_id, _point(i), _readings(i))
    assert len(forced) == 1 + 2  # two groups of points
    store.write_point(run_id, _point(2 * every), _readings(2 * every))
    assert len(forced) == 3  # the next group is not forced yet ...
    store.log_event(run_id, "info", "note", "an event")
    assert len(forced) == 4  # ... until any other write
    store.force_owed_log()
    assert len(forced) == 4  # nothing owed: nothing forced
    monkeypatch.setattr(sqlite_module, "SYNC_EVERY_S", 0.0)
    store.write_point(run_id, _point(2 * every + 1), _readings(2 * every + 1))
    assert len(forced) == 4  # half a second old (here: any age): owed ...
    store.force_owed_log()
    assert len(forced) == 5  # ... and forced while the run waits (the bench settling)
    store.force_owed_log()
    assert len(forced) == 5  # once
    store.write_point(run_id, _point(2 * every + 2), _readings(2 * every + 2))
    store.write_point(run_id, _point(2 * every + 3), _readings(2 * every + 3))
    assert len(forced) == 6  # owed and not paid: the next commit forces it
    reopened = _reopen(store)
    assert len(reopened.points_frame(run_id)) == 2 * every + 4
    reopened.close()
    relaxed = SqliteRunStore(store.path.parent / "sim.sqlite", durable=False)
    assert relaxed._conn.execute("PRAGMA synchronous").fetchone()[0] == 1
    relaxed.write_point(_run(relaxed), _point(0), _readings(0))
    relaxed.force_owed_log()
    relaxed.close()
    assert len(forced) == 6  # not durable: never forced


def test_run_round_trip(store):
    run_id = _run(store)
    store.record_instruments(run_id, [InstrumentRecord("sa", "TCPIP0::127.0.0.1::1::SOCKET",
                                                       "scpi-analyzer", "Tarnwick Labs,TW-SA13")])
    store.record_instruments(run_id, [InstrumentRecord("sa", "TCPIP0::127.0.0.1::2::SOCKET",
                                                       "scpi-analyzer", "Tarnwick Labs,TW-SA13")])
    info = store.run(run_id)
    assert info.sequence_text == SEQUENCE
    assert len(info.sequence_sha256) == 64
    assert info.bench_text == "[bench]\n"
    assert info.tags == ("night",) and info.simulated and info.part == "MX-100"
    assert info.status == "planned"
    assert [i.resource for i in info.instruments] == ["TCPIP0::127.0.0.1::2::SOCKET"]


def test_every_point_once_and_frames(store):
    run_id = _run(store)
    store.set_status(run_id, "running")
    for index in range(5):
        store.write_point(run_id, _point(index), _readings(index))
    assert store.done_point_indices(run_id) == set(range(5))
    with pytest.raises(StoreError, match="already stored"):
        store.write_point(run_id, _point(3), _readings(3))
    points = store.points_frame(run_id)
    assert list(points["point_index"]) == [0, 1, 2, 3, 4]
    assert points["rf_freq_hz"].iloc[1] == 2.401e9
    assert points["rf2_freq_hz"].isna().all()
    readings = store.readings_frame(run_id)
    assert len(readings) == 10
    assert readings["m"].dtype == "Int64"
    assert bool(readings["attenuation_check"].iloc[0]) is True
    assert pd.isna(readings["attenuation_check"].iloc[1])
    summary = store.runs()[0]
    assert (summary.points_done, summary.points_total) == (5, 5)
    store.set_status(run_id, "complete")
    info = store.run(run_id)
    assert info.status == "complete" and info.finished is not None


def test_readings_read_in_slices_of_points_are_the_whole_table(store, monkeypatch):
    """readings_frame reads a slice of points per query (bounded memory): the table is the
    same as one read, whatever the slice."""
    import dataclasses

    import sweeprig.store.sql as sql

    run_id = _run(store)
    for index in range(5):
        readings = _readings(index)
        if index == 4:  # extra data only in the last slice
            readings = [dataclasses.replace(r, extra={"repeat_of": "if"}) for r in readings]
        store.write_point(run_id, _point(index), readings)
    whole = store.readings_frame(run_id)
    for size in (1, 2, 3):
        monkeypatch.setattr(sql, "READING_SLICE_POINTS", size)
        sliced = store.readings_frame(run_id)
        pd.testing.assert_frame_equal(sliced, whole)
    empty_run = _run(store)
    monkeypatch.setattr(sql, "READING_SLICE_POINTS", 1)
    assert store.readings_frame(empty_run).empty


def test_crash_mid_point_leaves_nothing(store):
    run_id = _run(store)
    store.write_point(run_id, _point(0), _readings(0))
    bad = [*_readings(1), ReadingRecord("spur", "marker", level_dbm=object())]  # type: ignore[arg-type]
    with pytest.raises(StoreError):
        store.write_point(run_id, _point(1), bad)
    assert store.done_point_indices(run_id) == {0}
    assert len(store.readings_frame(run_id)) == 2


def test_failure_inside_the_transaction_rolls_back(sqlite_store, monkeypatch):
    store = sqlite_store
    run_id = _run(store)
    store.write_point(run_id, _point(0), _readings(0))
    conn = store._conn

    class FailsOnReadings:
        """The point row goes in, then writing the readings fails (a crash mid-point)."""

        def __getattr__(self, name):
            return getattr(conn, name)

        def executemany(self, *args):
            raise sqlite3.OperationalError("disk I/O error (simulated)")

    monkeypatch.setattr(store, "_conn", FailsOnReadings())
    with pytest.raises(StoreError, match="disk I/O"):
        store.write_point(run_id, _point(1), _readings(1))
    monkeypatch.setattr(store, "_conn", conn)
    assert store.done_point_indices(run_id) == {0}
    assert len(store.readings_frame(run_id)) == 2


def test_reader_sees_committed_points_while_writer_open(store):
    run_id = _run(store)
    reader = _reopen(store)
    try:
        assert reader.done_point_indices(run_id) == set()
        store.write_point(run_id, _point(0), _readings(0))
        assert reader.done_point_indices(run_id) == {0}
        store.write_point(run_id, _point(1), _readings(1))
        assert len(reader.readings_frame(run_id)) == 4
    finally:
        reader.close()


def test_a_running_run_is_alive_exactly_while_its_run_lock_is_held(store):
    run_id = _run(store)
    store.set_status(run_id, "running")
    lock = hold_run_lock(_target(store), run_id, "this test")
    try:
        assert store.run(run_id).status == "running"
        assert store.runs()[0].status == "running"
    finally:
        lock.release()
    info = store.run(run_id)  # no process holds it: interrupted, whatever its pid says
    assert (info.status, info.stored_status) == ("interrupted", "running")


def test_a_run_on_another_host_falls_back_to_its_heartbeat(sqlite_store):
    store = sqlite_store
    other = _run(store)
    store.set_status(other, "running")
    conn = sqlite3.connect(store.path)
    old = (datetime.now(UTC) - timedelta(hours=1)).isoformat()
    with conn:
        conn.execute("UPDATE runs SET heartbeat_utc = ?, host = 'elsewhere' WHERE id = ?",
                     (old, other))
    assert store.run(other).status == "interrupted"
    with conn:
        conn.execute("UPDATE runs SET heartbeat_utc = ? WHERE id = ?",
                     (datetime.now(UTC).isoformat(), other))
    assert store.run(other).status == "running"
    conn.close()


def test_events_and_bus_log(store):
    run_id = _run(store)
    store.log_event(run_id, "warning", "retry", "sa timed out; reconnected",
                    {"attempt": 2, "role": "sa"}, point_index=3)
    store.log_event(run_id, "info", "skip", "point skipped")
    events = store.events(run_id)
    assert [e.kind for e in events] == ["retry", "skip"]
    assert events[0].details == {"attempt": 2, "role": "sa"} and events[0].point_index == 3
    now = datetime.now(UTC)
    store.log_bus(run_id, [BusRecord(now, "sa", "*IDN?", "Tarnwick Labs,TW-SA13", 0.001),
                           BusRecord(now, "sa", "INIT:IMM", None, 0.0005)])
    log = store.bus_log(run_id)
    assert [b.sent for b in log] == ["*IDN?", "INIT:IMM"]
    assert [b.sent for b in store.bus_log(run_id, limit=1)] == ["INIT:IMM"]
    with pytest.raises(StoreError):
        store.log_event(run_id, "loud", "x", "y")  # type: ignore[arg-type]


def test_bad_status_and_unknown_run(store):
    run_id = _run(store)
    with pytest.raises(StoreError):
        store.set_status(run_id, "finished")  # type: ignore[arg-type]
    with pytest.raises(StoreError, match="no run 99"):
        store.run(99)
    with pytest.raises(StoreError, match="no run 99"):
        store.write_point(99, _point(0), [])


def test_open_errors(tmp_path):
    with pytest.raises(StoreError, match="no run store here"):
        SqliteRunStore(tmp_path / "missing.sqlite", create=False)
    with pytest.raises(StoreError, match="folder"):
        SqliteRunStore(tmp_path)
    junk = tmp_path / "junk.sqlite"
    junk.write_bytes(b"this is not a database at all" * 100)
    with pytest.raises(StoreError) as err:
        SqliteRunStore(junk)
    assert str(junk) in str(err.value) and "fix:" in str(err.value)
    other = tmp_path / "other.sqlite"
    conn = sqlite3.connect(other)
    conn.execute("CREATE TABLE t (x INTEGER)")
    conn.commit()
    conn.close()
    with pytest.raises(StoreError, match="not a sweeprig run store"):
        SqliteRunStore(other)


def test_unsafe_is_a_final_status_of_its_own(store):
    run_id = _run(store)
    store.set_status(run_id, "running")
    store.set_status(run_id, "unsafe", "complete; BENCH NOT PROVEN SAFE: role 'rf' ...")
    info = store.run(run_id)
    assert info.status == info.stored_status == "unsafe"  # never shown as interrupted
    assert info.finished is not None and "BENCH NOT PROVEN SAFE" in info.reason
    assert [r.status for r in store.runs()] == ["unsafe"]


def _downgrade_to_version_1(path) -> None:
    """Make ``path`` a store as the previous sweeprig wrote it: schema 1, whose ``runs``
    table refuses the status 'unsafe' (rebuilt with the old CHECK, rows kept)."""
    with sqlite3.connect(path, isolation_level=None) as db:
        sql = db.execute("SELECT sql FROM sqlite_master WHERE name = 'runs'").fetchone()[0]
        assert ", 'unsafe'" in sql
        db.execute("PRAGMA foreign_keys = OFF")
        db.execute("BEGIN")
        db.execute(sql.replace(", 'unsafe'", "").replace("TABLE runs (", "TABLE runs_v1 (", 1)
                   .replace("TABLE IF NOT EXISTS runs (", "TABLE runs_v1 (", 1))
        db.execute("INSERT INTO runs_v1 SELECT * FROM runs")
        db.execute("DROP TABLE runs")
        db.execute("ALTER TABLE runs_v1 RENAME TO runs")
        db.execute("DROP TABLE run_files")  # added in version 3
        db.execute("DROP TABLE run_figures")  # added in version 4
        db.execute("UPDATE store_meta SET setting = '1' WHERE name = 'schema_version'")
        db.execute("COMMIT")
        with pytest.raises(sqlite3.IntegrityError):
            db.execute("UPDATE runs SET status = 'unsafe'")


def test_a_version_1_store_is_migrated_and_keeps_its_runs(tmp_path):
    path = tmp_path / "old.sqlite"
    with SqliteRunStore(path) as db:
        run_id = _run(db)
        db.write_point(run_id, _point(0), _readings(0))
        db.log_event(run_id, "warning", "retry", "one retry")
    _downgrade_to_version_1(path)
    with SqliteRunStore(path, create=False) as db:
        db.set_status(run_id, "unsafe", "BENCH NOT PROVEN SAFE: role 'dc'")
        assert db.run(run_id).status == "unsafe"
        assert db.done_point_indices(run_id) == {0}  # children kept, not cascaded away
        assert len(db.readings_frame(run_id)) == 2
        assert [e.kind for e in db.events(run_id)] == ["retry"]
    with sqlite3.connect(path) as db:
        version = db.execute(
            "SELECT setting FROM store_meta WHERE name = 'schema_version'").fetchone()
        assert version == (str(SCHEMA_VERSION),)
        assert db.execute("PRAGMA foreign_key_check").fetchall() == []
    with SqliteRunStore(path, create=False) as db:
        assert db.run_files(run_id) == ()  # recorded before files were kept


def test_a_version_2_store_gains_the_run_files_table_and_reads_without_it(tmp_path):
    path = tmp_path / "v2.sqlite"
    with SqliteRunStore(path) as db:
        run_id = _run(db)
    with sqlite3.connect(path, isolation_level=None) as db:
        db.execute("DROP TABLE run_files")
        db.execute("DROP TABLE run_figures")
        db.execute("UPDATE store_meta SET setting = '2' WHERE name = 'schema_version'")
    path.chmod(0o444)
    try:
        with SqliteRunStore(path, create=False) as db:  # read-only: read as it is
            assert db.run_files(run_id) == () and db.run(run_id).id == run_id
    finally:
        path.chmod(0o644)
    with SqliteRunStore(path, create=False) as db:
        assert db.run_files(run_id) == ()
        files = (RunFile("include", "parts/x.toml", sha256_text("a = 1\n"), "a = 1\n"),)
        second = db.create_run(sequence_path="s.toml", sequence_text="", files=files)
        assert db.run_files(second) == files
    with sqlite3.connect(path) as db:
        assert db.execute("SELECT setting FROM store_meta WHERE name = 'schema_version'"
                          ).fetchone() == (str(SCHEMA_VERSION),)


def test_a_version_3_store_gains_the_run_figures_table_and_reads_without_it(tmp_path):
    path = tmp_path / "v3.sqlite"
    with SqliteRunStore(path) as db:
        run_id = _run(db)
    with sqlite3.connect(path, isolation_level=None) as db:
        db.execute("DROP TABLE run_figures")
        db.execute("UPDATE store_meta SET setting = '3' WHERE name = 'schema_version'")
    path.chmod(0o444)
    try:
        with SqliteRunStore(path, create=False) as db:  # read-only: read as it is
            assert db.stored_figures([run_id]) == {}
    finally:
        path.chmod(0o644)
    with SqliteRunStore(path, create=False) as db:
        assert db.stored_figures([run_id]) == {}
        db.save_figures(run_id, "lot-figures 1", "[]")
        db.save_figures(run_id, "lot-figures 1", '[{"name": "gain"}]')  # replaced
        assert db.stored_figures([run_id, 99]) == {run_id: ("lot-figures 1",
                                                            '[{"name": "gain"}]')}
    with sqlite3.connect(path) as db:
        assert db.execute("SELECT setting FROM store_meta WHERE name = 'schema_version'"
                          ).fetchone() == (str(SCHEMA_VERSION),)


def _mixed_run(store, without_repeat) -> int:
    """A run of 8 points whose readings hold every kind of column value: numbers, a supply
    current, a repeated IM3 reading with m, n and its check flag (left out of the points
    for which ``without_repeat`` says so), an overload at point 5."""
    run_id = _run(store)
    for index in range(8):
        readings = [
            *_readings(index),
            ReadingRecord("supply_current", "supply_current", "dc", extra={"current_a": 0.04}),
            ReadingRecord("im3.lower.att10", "im3", "if", 69e6, -80.25 - index, -100.0, 2, -1,
                          1e6, 1e3, 20.0, -10.0, None, overload=index == 5,
                          attenuation_check=True, extra={"repeat_of": "im3.lower"}),
        ]
        if without_repeat(index):
            readings = readings[1:3]
        store.write_point(run_id, _point(index), readings)
    return run_id


def _same_bit_for_bit(got: pd.DataFrame, want: pd.DataFrame) -> None:
    """The same columns, types and values, every float the same bits."""
    import numpy as np

    pd.testing.assert_frame_equal(got, want, check_exact=True)
    assert list(got.dtypes) == list(want.dtypes)
    for column in want.columns:
        if want[column].dtype == np.float64:
            assert np.array_equal(got[column].to_numpy().view(np.uint64),
                                  want[column].to_numpy().view(np.uint64)), column


def test_readings_the_side_reader_types_make_the_same_table(sqlite_store, monkeypatch):
    """The child process types its slices of readings and points
    (sweeprig.store.side_reader); the tables made of them are the ones made of rows read
    here: columns, types, values, bits."""

    import sweeprig.store.side_reader as side_reader
    import sweeprig.store.sql as sql

    store = sqlite_store
    # (a slice with no repeat: its check column holds no flag at all)
    run_id = _mixed_run(store, lambda index: index == 6)
    monkeypatch.setattr(side_reader, "SIDE_READ_MIN_SLICES", 10**6)
    here = store.readings_frame(run_id)
    points_here = store.points_frame(run_id)
    monkeypatch.undo()
    typed = []
    made = sql._frame_of_columns
    monkeypatch.setattr(sql, "_frame_of_columns",
                        lambda *a: typed.append(a[2]) or made(*a))
    monkeypatch.setattr(sql, "READING_SLICE_POINTS", 1)
    monkeypatch.setattr(sql, "POINT_SLICE_POINTS", 2)
    sliced = store.readings_frame(run_id)
    points = store.points_frame(run_id)
    # the child's half of the 8 slices of readings, and of the 4 of points, came typed
    assert typed == [sql.READING_KINDS] * 4 + [sql.POINT_KINDS] * 2
    for got, want in ((sliced, here), (points, points_here)):
        _same_bit_for_bit(got, want)
    assert here["averages"].isna().any() and here["attenuation_check"].isna().any()
    assert here["level_dbm"].isna().any() and here["overload"].any()
    assert points_here["rf2_freq_hz"].isna().all() and points_here["wall_start"].notna().all()


def test_a_large_runs_readings_read_into_arrow_columns_make_the_same_tables(sqlite_store,
                                                                            monkeypatch):
    """run_tables reads a large run's readings in a child process through the ADBC driver
    (sweeprig.store.arrow_reader) while the points are read here: the same tables as
    points_frame and readings_frame, bit for bit; and the same again when the child finds
    a value it cannot type (read here instead)."""

    import sweeprig.store.arrow_reader as arrow_reader
    import sweeprig.store.sql as sql

    store = sqlite_store
    # (the first slices: no repeat, so no check flag and no m, n at all)
    run_id = _mixed_run(store, lambda index: index < 3)
    points_here, here = store.points_frame(run_id), store.readings_frame(run_id)
    made = []
    monkeypatch.setattr(sql, "READING_SLICE_POINTS", 1)
    original = arrow_reader.frame_of_table
    monkeypatch.setattr(arrow_reader, "frame_of_table",
                        lambda *a: made.append(a[0].num_rows) or original(*a))
    points, readings = store.run_tables(run_id)
    assert made == [len(points_here), len(here)]  # read by the child, all of them
    for got, want in ((readings, here), (points, points_here)):
        _same_bit_for_bit(got, want)
    assert here["averages"].isna().any() and here["attenuation_check"].isna().any()
    assert here["m"].isna().any() and here["overload"].any()
    # a flag that is neither 0 nor 1: the child gives up, the readings are read here
    with sqlite3.connect(store.path) as db:
        db.execute("UPDATE readings SET overload = 2 WHERE point_index = 6")
    here = store.readings_frame(run_id)
    made.clear()
    points, readings = store.run_tables(run_id)
    assert made == []
    pd.testing.assert_frame_equal(readings, here, check_exact=True)
    # few slices: no child at all
    monkeypatch.setattr(sql, "READING_SLICE_POINTS", 5000)
    monkeypatch.setattr(arrow_reader, "start_read", lambda *a: pytest.fail("started"))
    store.run_tables(run_id)


def test_a_run_s_point_slices_are_found_in_a_few_index_steps(sqlite_store):
    """The slices a large run's tables are read in start from the run's first and last point
    index, found at the ends of the key's index (not by reading every entry of the run:
    SQLite's MIN and MAX together in one query did, about a second for a million points'
    readings). Counted in SQLite virtual-machine instructions, not time."""
    from sweeprig.store.sql import READINGS_ORDER, READINGS_SELECT

    store = sqlite_store
    run_id = _run(store)
    for i in range(400):
        store.write_point(run_id, _point(i), _readings(i))
    steps = [0]

    def count() -> int:
        steps[0] += 1
        return 0

    store._conn.set_progress_handler(count, 1)
    try:
        sql, params = store._point_slices("readings", READINGS_SELECT, READINGS_ORDER,
                                          run_id, 100)
    finally:
        store._conn.set_progress_handler(None, 1)
    assert [p[1:] for p in params] == [(0, 100), (100, 200), (200, 300), (300, 400)]
    assert "point_index >= ?" in sql
    assert steps[0] < 200  # (800 readings: reading each entry would take thousands)
    empty = _run(store)
    assert store._point_slices("readings", READINGS_SELECT, READINGS_ORDER, empty, 100)[1] \
        == [(empty,)]
