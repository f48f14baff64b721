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


# -- typed slices ------------------------------------------------------------------------------

TYPED_SQL = "SELECT k, x, n, f, g, t FROM typed WHERE k >= ? AND k < ? ORDER BY k"
KINDS = "ifIbBt"


@pytest.fixture
def typed_table(tmp_path: Path) -> Path:
    """Every column kind, missing values included (an int stored in the REAL column too)."""
    path = tmp_path / "typed.sqlite"
    conn = sqlite3.connect(path)
    conn.execute("CREATE TABLE typed (k INTEGER, x REAL, n INTEGER, f INTEGER, g INTEGER, "
                 "t TEXT)")
    conn.executemany("INSERT INTO typed VALUES (?, ?, ?, ?, ?, ?)",
                     [(k, None if k % 6 == 0 else k / 7.0 - 1e-17 * k, None if k % 4 else -k,
                       k % 2, None if k % 3 == 0 else (k // 3) % 2,
                       None if k % 5 == 0 else f"é{k % 9}") for k in range(400)])
    conn.execute("INSERT INTO typed VALUES (400, 12, 3, 1, 0, 'last')")
    conn.commit()
    conn.close()
    return path


TYPED_PARAMS = [(start, start + 51) for start in range(0, 408, 51)]


def _typed_rows(got: side_reader.TypedColumns) -> list[tuple]:
    """A typed slice as the rows read here would be (NaN and masked values: None)."""
    import math

    columns = []
    for kind, values, mask in zip(KINDS, got.values, got.masks, strict=True):
        if kind == "t":
            columns.append(list(values))
            continue
        cells = values.tolist()
        if kind == "f":
            cells = [None if math.isnan(v) else v for v in cells]
        elif kind in "bB":
            cells = [int(v) for v in cells]
        if mask is not None:
            cells = [None if missing else v for v, missing in zip(cells, mask.tolist(),
                                                                   strict=True)]
        columns.append(cells)
    return list(zip(*columns, strict=True))


def test_the_childs_slices_come_typed_and_hold_the_same_values(typed_table: Path) -> None:
    here = [_reader(typed_table, [])(TYPED_SQL, p) for p in TYPED_PARAMS]
    calls: list[tuple] = []
    got = list(side_reader.typed_slices(typed_table, TYPED_SQL, TYPED_PARAMS, _reader(
        typed_table, calls), KINDS))
    assert calls == TYPED_PARAMS[:4]  # the rest came from the child, typed
    assert [g for g in got[:4]] == here[:4]
    typed = got[4:]
    assert all(isinstance(g, side_reader.TypedColumns) for g in typed)
    assert [_typed_rows(g) for g in typed] == here[4:]
    last = typed[-1]
    assert [v.dtype.name for v in last.values[:5]] == ["int64", "float64", "int64", "bool",
                                                       "bool"]
    assert last.masks[0] is None and last.masks[2].dtype.name == "bool"
    assert all(m.flags.writeable for m in last.masks if m is not None)


@pytest.mark.parametrize("kinds, change", [
    ("ifibBt", None),  # a None in an integer column that may not have one
    ("ifIbbt", None),  # ... in a flag column
    (KINDS, "UPDATE typed SET g = 2 WHERE k = 300"),  # a flag that is neither 0 nor 1
    (KINDS, "UPDATE typed SET x = 'text' WHERE k = 390"),  # a text in a number column
    (KINDS, "UPDATE typed SET n = 2.5 WHERE k = 388"),  # a fraction in an integer column
])
def test_a_value_its_kind_cannot_hold_leaves_the_childs_slices_to_be_read_here(
        typed_table: Path, kinds: str, change: str | None) -> None:
    if change is not None:
        conn = sqlite3.connect(typed_table)
        conn.execute(change)
        conn.commit()
        conn.close()
    calls: list[tuple] = []
    got = list(side_reader.typed_slices(typed_table, TYPED_SQL, TYPED_PARAMS,
                                        _reader(typed_table, calls), kinds))
    assert calls == TYPED_PARAMS
    assert got == [_reader(typed_table, [])(TYPED_SQL, p) for p in TYPED_PARAMS]


def test_a_child_that_writes_columns_as_values_leaves_its_slices_to_be_read_here(
        typed_table: Path, monkeypatch) -> None:
    monkeypatch.setattr(side_reader, "_CHILD_CODE", (
        "import json, pickle, sqlite3, sys\n"
        "c = sqlite3.connect(sys.argv[1], uri=True)\n"
        "f = open(sys.argv[4], 'wb')\n"
        "for p in json.loads(sys.argv[3]):\n"
        "    pickle.dump(tuple(zip(*c.execute(sys.argv[2], p).fetchall())), f)\n"))
    calls: list[tuple] = []
    got = list(side_reader.typed_slices(typed_table, TYPED_SQL, TYPED_PARAMS,
                                        _reader(typed_table, calls), KINDS))
    assert calls == TYPED_PARAMS
    assert got == [_reader(typed_table, [])(TYPED_SQL, p) for p in TYPED_PARAMS]


def test_unknown_column_kinds_are_refused(typed_table: Path) -> None:
    with pytest.raises(ValueError, match="column kinds"):
        list(side_reader.typed_slices(typed_table, TYPED_SQL, TYPED_PARAMS,
                                      _reader(typed_table, []), "ifx"))
