"""A long read of an SQLite store split with a child process (sweeprig.store.side_reader):
the same rows in the same order as reading every slice here, whatever happens to the child,
and the child never left running."""

from __future__ import annotations

import sqlite3
from pathlib import Path

import pytest

from sweeprig.store import side_reader
from sweeprig.store.side_reader import rows_in_slices

SQL = "SELECT k, x, t, n FROM items WHERE k >= ? AND k < ? ORDER BY k"


@pytest.fixture
def table(tmp_path: Path) -> Path:
    path = tmp_path / "items.sqlite"
    conn = sqlite3.connect(path)
    conn.execute("PRAGMA journal_mode=WAL")
    conn.execute("CREATE TABLE items (k INTEGER, x REAL, t TEXT, n INTEGER)")
    conn.executemany("INSERT INTO items VALUES (?, ?, ?, ?)",
                     [(k, k / 7.0 + 1e-17 * k, f"é{k % 5}" if k % 3 else None,
                       None if k % 4 else k) for k in range(400)])
    conn.commit()
    conn.close()
    return path


PARAMS = [(start, start + 50) for start in range(0, 400, 50)]


def _reader(path: Path, calls: list[tuple]):
    conn = sqlite3.connect(path)

    def read(sql: str, params) -> list[tuple]:
        calls.append(tuple(params))
        return conn.execute(sql, params).fetchall()

    return read


def _here(path: Path) -> list[list[tuple]]:
    return [list(rows) for rows in rows_in_slices(path, SQL, PARAMS[:1], _reader(path, []))] \
        + [_reader(path, [])(SQL, p) for p in PARAMS[1:]]


def test_the_child_reads_the_second_half_and_the_rows_are_the_same(table: Path) -> None:
    calls: list[tuple] = []
    got = list(rows_in_slices(table, SQL, PARAMS, _reader(table, calls)))
    assert got == _here(table)
    assert all(isinstance(r, tuple) for rows in got for r in rows)
    assert calls == PARAMS[:4]  # the rest came from the child


def test_few_slices_are_read_here(table: Path) -> None:
    calls: list[tuple] = []
    got = list(rows_in_slices(table, SQL, PARAMS[:3], _reader(table, calls)))
    assert calls == PARAMS[:3] and got == _here(table)[:3]


@pytest.mark.parametrize("code", [
    "import sys; sys.exit(3)",  # fails
    "import sys; open(sys.argv[4], 'wb').write(b'\\x80\\x05garbage')",  # a broken file
    # one slice written well, then the end: the rest is read here
    ("import json, pickle, sqlite3, sys\n"
     "c = sqlite3.connect(sys.argv[1], uri=True)\n"
     "p = json.loads(sys.argv[3])[0]\n"
     "pickle.dump(tuple(zip(*c.execute(sys.argv[2], p).fetchall())), open(sys.argv[4], 'wb'))"),
])
def test_whatever_the_child_does_the_rows_are_the_same(table: Path, code: str,
                                                        monkeypatch) -> None:
    monkeypatch.setattr(side_reader, "_CHILD_CODE", code)
    calls: list[tuple] = []
    got = list(rows_in_slices(table, SQL, PARAMS, _reader(table, calls)))
    assert got == _here(table)
    assert set(calls) >= set(PARAMS[:4]) and len(calls) >= 7


def test_a_child_that_cannot_start_leaves_the_reading_here(table: Path, monkeypatch) -> None:
    monkeypatch.setattr(side_reader.sys, "executable", str(table.parent / "no-python"))
    calls: list[tuple] = []
    assert list(rows_in_slices(table, SQL, PARAMS, _reader(table, calls))) == _here(table)
    assert calls == PARAMS


def test_a_reading_stopped_early_stops_the_child_and_removes_its_file(table: Path,
                                                                      monkeypatch) -> None:
    started = []
    start = side_reader._start

    def noted(*args):
        child = start(*args)
        started.append(child)
        return child

    monkeypatch.setattr(side_reader, "_start", noted)
    monkeypatch.setattr(side_reader, "_CHILD_CODE", "import time; time.sleep(60)")
    rows = rows_in_slices(table, SQL, PARAMS, _reader(table, []))
    next(rows)
    rows.close()
    ((child, out),) = started
    assert child.poll() is not None  # ended, not left running
    assert not out.exists()
