"""The store notices when its file or folder goes away or is replaced, and when SQLite cannot
write (disk full, read-only), and says the real cause: real files, real SQLite errors."""

from __future__ import annotations

import os
import shutil
import sqlite3

import pytest

from sweeprig.errors import StoreError
from sweeprig.store import SqliteRunStore
from tests.store.test_sqlite_store import _point, _readings, _run
from tests.support import skip_unless_permissions_hold


@pytest.fixture
def opened(tmp_path):
    db = SqliteRunStore(tmp_path / "results" / "runs.sqlite")
    run_id = _run(db)
    db.write_point(run_id, _point(0), _readings(0))
    yield db, run_id
    db.close()


def test_deleted_file_is_noticed_and_every_later_write_refused(opened):
    store, run_id = opened
    os.remove(store.path)
    # SQLite alone would go on committing into the unlinked file
    with pytest.raises(StoreError, match="run store file disappeared") as caught:
        store.write_point(run_id, _point(1), _readings(1))
    assert caught.value.exit_code == 5
    assert store.lost is caught.value
    with pytest.raises(StoreError, match="disappeared"):
        store.set_status(run_id, "aborted", "x")
    assert not store.path.exists()


def test_deleted_folder_is_named(opened):
    store, run_id = opened
    shutil.rmtree(store.path.parent)
    with pytest.raises(StoreError, match=r"folder .*results disappeared"):
        store.heartbeat(run_id)
    assert not store.path.parent.exists()  # nothing recreated behind the user's back


def test_folder_replaced_by_a_file_is_named(opened):
    store, run_id = opened
    shutil.rmtree(store.path.parent)
    store.path.parent.write_text("not a folder\n")
    with pytest.raises(StoreError, match="replaced by a file"):
        store.write_point(run_id, _point(1), _readings(1))


def test_replaced_file_is_noticed_and_left_untouched(opened, tmp_path):
    store, run_id = opened
    other = tmp_path / "other.bin"
    other.write_bytes(b"someone else's file\n")
    os.replace(other, store.path)
    with pytest.raises(StoreError, match="replaced"):
        store.write_point(run_id, _point(1), _readings(1))
    with pytest.raises(StoreError, match="replaced"):
        store.log_event(run_id, "error", "x", "y")
    store.close()
    assert store.path.read_bytes() == b"someone else's file\n"


def test_moved_file_is_noticed(opened, tmp_path):
    store, run_id = opened
    moved = tmp_path / "moved.sqlite"
    os.rename(store.path, moved)
    with pytest.raises(StoreError, match=r"(?s)disappeared.*resume RUN_ID --store NEW_PATH"):
        store.write_point(run_id, _point(1), _readings(1))
    store.close()
    with SqliteRunStore(moved, create=False) as again:  # what the fix says to resume from
        assert again.done_point_indices(run_id) == {0}


def test_disk_full_says_so_not_cannot_rollback(opened):
    store, run_id = opened
    conn = store._conn
    pages = conn.execute("PRAGMA page_count").fetchone()[0]
    conn.execute(f"PRAGMA max_page_count = {pages}")  # SQLite itself reports SQLITE_FULL
    with pytest.raises(StoreError) as caught:
        for index in range(1, 200):
            store.write_point(run_id, _point(index), _readings(index))
    message = caught.value.message()
    assert "disk holding the run store is full" in message and "SQLITE_FULL" in message
    assert "cannot rollback" not in message
    assert "sweeprig resume" in message  # what to do
    stored = store.done_point_indices(run_id)
    assert stored == set(range(len(stored)))  # the failed point left nothing behind
    # not a lost file: once there is room again, the store works on
    conn.execute("PRAGMA max_page_count = 1073741823")
    store.write_point(run_id, _point(500), _readings(500))
    assert 500 in store.done_point_indices(run_id)


def test_read_only_connection_says_it_cannot_be_written(opened):
    store, run_id = opened
    store._conn.execute("PRAGMA query_only = ON")  # SQLite's own SQLITE_READONLY
    with pytest.raises(StoreError, match=r"cannot be written.*SQLITE_READONLY"):
        store.write_point(run_id, _point(1), _readings(1))
    assert store.lost is None
    assert store.done_point_indices(run_id) == {0}


def test_file_made_read_only_stops_the_writes(opened, tmp_path):
    store, run_id = opened
    skip_unless_permissions_hold(tmp_path)
    os.chmod(store.path, 0o444)
    try:
        with pytest.raises(StoreError, match="read-only now"):
            store.write_point(run_id, _point(1), _readings(1))
    finally:
        os.chmod(store.path, 0o644)


def test_failed_rollback_never_hides_the_first_error(opened, monkeypatch):
    """A write that fails after SQLite rolled back by itself reports the write's error."""
    store, run_id = opened
    conn = store._conn

    class FullOnReadings:
        def __getattr__(self, name):
            return getattr(conn, name)

        def executemany(self, *args):
            conn.execute("ROLLBACK")  # what SQLite does itself on SQLITE_FULL
            raise sqlite3.OperationalError("database or disk is full")

    monkeypatch.setattr(store, "_conn", FullOnReadings())
    with pytest.raises(StoreError, match="database or disk is full") as caught:
        store.write_point(run_id, _point(1), _readings(1))
    assert "cannot rollback" not in caught.value.message()




def test_file_overwritten_in_place_by_a_smaller_one_is_noticed(opened, tmp_path):
    store, run_id = opened
    for index in range(1, 40):  # make the file grow past what the copy will be
        store.write_point(run_id, _point(index), _readings(index))
    store._conn.execute("PRAGMA wal_checkpoint(TRUNCATE)").fetchall()
    other = tmp_path / "small.txt"
    other.write_text("hello\n")
    shutil.copyfile(other, store.path)  # same inode, new (smaller) content
    with pytest.raises(StoreError, match="overwritten in place"):
        store.write_point(run_id, _point(100), _readings(100))
    with pytest.raises(StoreError, match="overwritten in place"):
        store.heartbeat(run_id)
