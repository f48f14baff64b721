"""A long read of an SQLite store into Arrow columns by a child process
(sweeprig.store.arrow_reader): the frame is the one ``sqlite3``'s rows make, column for
column, type for type, bit for bit; whatever the child meets that it cannot type, or
whatever happens to it, there is no table (the caller reads the rows itself), and the child
is never left running."""

from __future__ import annotations

import math
import sqlite3
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from sweeprig.store import arrow_reader
from sweeprig.store.arrow_reader import frame_of_table, start_read

SQL = "SELECT k, x, n, f, g, t, z, e FROM typed WHERE k >= ? AND k < ? ORDER BY k"
KINDS = "ifIbBtft"
COLUMNS = ["k", "x", "n", "f", "g", "t", "z", "e"]
PARAMS = [(start, start + 51) for start in range(0, 408, 51)]


@pytest.fixture
def typed_table(tmp_path: Path) -> Path:
    """Every column kind, missing values included; ``z`` (a number) and ``e`` (text) never
    hold a value, the nullable columns none in the first slices (the driver types a column
    by the values it sees)."""
    path = tmp_path / "typed.sqlite"
    conn = sqlite3.connect(path)
    conn.execute("PRAGMA journal_mode=WAL")
    conn.execute("CREATE TABLE typed (k INTEGER, x REAL, n INTEGER, f INTEGER, g INTEGER, "
                 "t TEXT, z REAL, e TEXT)")
    conn.executemany("INSERT INTO typed VALUES (?, ?, ?, ?, ?, ?, NULL, NULL)",
                     [(k, None if k % 6 == 0 or k < 60 else k / 7.0 - 1e-17 * k,
                       None if k % 4 or k < 110 else -k, k % 2,
                       None if k % 3 == 0 or k < 160 else (k // 3) % 2,
                       None if k % 5 == 0 else f"é{k % 9}") for k in range(400)])
    conn.execute("INSERT INTO typed VALUES (400, 12, 3, 1, 0, 'last', NULL, NULL)")
    conn.commit()
    conn.close()
    return path


def _rows_frame(path: Path, kinds: str = KINDS) -> pd.DataFrame:
    """The reference: every slice's rows read by sqlite3, typed by kind as the stores type
    them (``from_records``, then int64, float64, Int64, bool, boolean; text as inferred)."""
    conn = sqlite3.connect(path)
    rows = [row for p in PARAMS for row in conn.execute(SQL, p).fetchall()]
    conn.close()
    frame = pd.DataFrame.from_records(rows, columns=COLUMNS)
    types = {"i": "int64", "f": "float64", "I": "Int64", "b": "bool", "B": "boolean"}
    for name, kind in zip(COLUMNS, kinds, strict=True):
        if kind in types:
            frame[name] = frame[name].astype(types[kind])
    return frame


def _read(path: Path, kinds: str = KINDS) -> pd.DataFrame | None:
    started = start_read(path, [(SQL, PARAMS, kinds)])
    assert started is not None
    tables = started.tables()
    assert started.child.poll() is not None and started.child.stdout.closed
    return None if tables is None else frame_of_table(tables[0], COLUMNS, kinds)


def test_the_frame_is_the_one_sqlite3_rows_make(typed_table: Path) -> None:
    got, want = _read(typed_table), _rows_frame(typed_table)
    assert got is not None
    pd.testing.assert_frame_equal(got, want, check_exact=True)
    assert list(got.dtypes) == list(want.dtypes)
    for name in ("x", "z"):
        assert np.array_equal(got[name].to_numpy().view(np.uint64),
                              want[name].to_numpy().view(np.uint64))
    # the cases the reference holds: missing values of each kind, a column never filled
    assert want["x"].isna().any() and want["n"].isna().any() and want["g"].isna().any()
    assert want["t"].isna().any() and want["z"].isna().all()
    assert want["e"].dtype == object and want["e"].isna().all()
    assert want["t"].dtype != object
    assert math.isclose(got["x"].iloc[-1], 12.0)


def test_several_reads_come_back_in_order_each_its_own_table(typed_table: Path) -> None:
    """One child, several queries (a run's points, then its readings): a table each, in the
    order asked, each the frame sqlite3's rows make; one read without a slice gives an
    empty table of its kinds."""
    evens = "SELECT k, x FROM typed WHERE k >= ? AND k < ? AND k % 2 = 0 ORDER BY k"
    started = start_read(typed_table, [(evens, PARAMS[:3], "if"), (SQL, PARAMS, KINDS),
                                       (evens, [], "if")])
    assert started is not None
    tables = started.tables()
    assert tables is not None and len(tables) == 3
    conn = sqlite3.connect(typed_table)
    rows = [row for p in PARAMS[:3] for row in conn.execute(evens, p).fetchall()]
    conn.close()
    want = pd.DataFrame.from_records(rows, columns=["k", "x"]).astype({"k": "int64"})
    pd.testing.assert_frame_equal(frame_of_table(tables[0], ["k", "x"], "if"), want,
                                  check_exact=True)
    pd.testing.assert_frame_equal(frame_of_table(tables[1], COLUMNS, KINDS),
                                  _rows_frame(typed_table), check_exact=True)
    assert tables[2].num_rows == 0 and tables[2].num_columns == 2


@pytest.mark.parametrize("kinds, change", [
    ("ifibBtft", None),  # a None in an integer column that may not have one
    ("ifIbbtft", None),  # ... in a flag column
    (KINDS, "UPDATE typed SET g = 2 WHERE k = 300"),  # a flag that is neither 0 nor 1
    (KINDS, "UPDATE typed SET f = -1 WHERE k = 3"),  # ... below 0
    (KINDS, "UPDATE typed SET x = 'text' WHERE k = 390"),  # a text in a number column
    (KINDS, "UPDATE typed SET n = 2.5 WHERE k = 388"),  # a fraction in an integer column
    (KINDS, "UPDATE typed SET t = x'00' WHERE k = 1"),  # bytes in a text column
    (KINDS, "UPDATE typed SET z = 1.5 WHERE k = 200"),  # ... and typed as text here
])
def test_a_value_its_kind_cannot_hold_gives_no_table(typed_table: Path, kinds: str,
                                                      change: str | None) -> None:
    if change is not None:
        conn = sqlite3.connect(typed_table)
        conn.execute(change)
        conn.commit()
        conn.close()
    if change == "UPDATE typed SET z = 1.5 WHERE k = 200":
        kinds = KINDS[:6] + "tt"
    assert _read(typed_table, kinds) is None


@pytest.mark.parametrize("code", [
    "import sys; sys.exit(3)",  # failed
    "import sys; sys.stdout.buffer.write(bytes(12))",  # a stream that says nothing
    "import sys; sys.stdout.buffer.write(b'\\xff\\xff\\xff\\xff\\x10\\0\\0\\0')",  # cut short
    "import os; os.kill(os.getpid(), 9)",  # killed
])
def test_whatever_the_child_does_there_is_no_table(
        typed_table: Path, code: str, monkeypatch) -> None:
    monkeypatch.setattr(arrow_reader, "_CHILD_CODE", code)
    assert _read(typed_table) is None


def test_a_child_that_cannot_start_is_no_read(typed_table: Path, monkeypatch) -> None:
    monkeypatch.setattr(arrow_reader.sys, "executable", str(typed_table.parent / "no-python"))
    assert start_read(typed_table, [(SQL, PARAMS, KINDS)]) is None
    monkeypatch.undo()
    monkeypatch.setattr(arrow_reader, "arrow_read_available", lambda: False)
    assert start_read(typed_table, [(SQL, PARAMS, KINDS)]) is None


def test_a_read_stopped_early_ends_the_child(typed_table: Path, monkeypatch) -> None:
    monkeypatch.setattr(arrow_reader, "_CHILD_CODE", "import time; time.sleep(60)")
    started = start_read(typed_table, [(SQL, PARAMS, KINDS)])
    assert started is not None
    started.stop()
    assert started.child.poll() is not None and started.child.stdout.closed


def test_the_child_cannot_write_the_store(typed_table: Path, monkeypatch) -> None:
    """Opened read-only: a statement that writes fails there, and no table comes back."""
    writes = "DELETE FROM typed WHERE k >= ? AND k < ?"
    started = start_read(typed_table, [(writes, PARAMS, KINDS)])
    assert started is not None and started.tables() is None
    conn = sqlite3.connect(typed_table)
    assert conn.execute("SELECT COUNT(*) FROM typed").fetchone() == (401,)
    conn.close()


def test_the_child_s_arrow_memory_is_on_the_c_heap(typed_table: Path, monkeypatch) -> None:
    """Its pyarrow loads with the C library's allocator (sweeprig.memory), whatever this
    process' environment says unless a user chose one."""
    monkeypatch.delenv("ARROW_DEFAULT_MEMORY_POOL", raising=False)
    monkeypatch.setattr(arrow_reader, "_CHILD_CODE", (
        "import sys, pyarrow as pa; "
        "sys.stdout.write(pa.default_memory_pool().backend_name)"))
    started = start_read(typed_table, [(SQL, PARAMS, KINDS)])
    assert started is not None
    try:
        assert started.child.stdout.read() == b"system"
    finally:
        started.stop()
