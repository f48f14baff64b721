"""Some slices of a long read of an SQLite store, read by a second process on the other core.

Reading a large run's readings (and points) is the first thing its report does, and the
slowest: at 100k points, about half a million rows whose cells ``sqlite3`` turns into Python
objects one by one, while the machine's second core has nothing to do yet (the report's
helper process starts once the capture table exists). Threads do not help: the conversion holds the
interpreter's lock, and two threads reading took three times as long as one.

:func:`rows_in_slices` gives the rows of one query run once per parameter tuple, in order,
as the caller's own reads would. It hands the second half of the slices to a child
interpreter (a few lines of the standard library: no third-party import, so it starts in a
few tens of milliseconds), which opens the file read-only, reads its slices and writes each
one's columns, pickled, to a file; meanwhile this process reads the first half. The child's
slices are then read back one at a time (never all at once) and given as rows again, the
same tuples a read here would give, so the frames made from them are the same.

:func:`typed_slices` does the same for a caller that turns each slice into typed columns:
given each column's kind (:data:`KINDS`), the child types its slices' columns itself (plain
arrays of numbers, a mask where a value is missing) and they come back as
:class:`TypedColumns`, never as Python objects in this process; only text columns stay
values. A value the kind cannot hold exactly (a text in a number column, a fraction in an
integer column) makes the child fail, so those slices are read here, as before.

Anything wrong with the child (it cannot start, fails, is killed, writes a short file) is
not an error: its slices are read here instead, as if there were no child. The child is
never left running: it is stopped when the reading stops early.
"""

from __future__ import annotations

import array
import json
import os
import pickle
import subprocess
import sys
import tempfile
from collections.abc import Callable, Iterator, Sequence
from contextlib import suppress
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from sweeprig.python_child import python_child_possible

#: The fewest slices for which a child reads half of them (fewer: its start would not pay).
SIDE_READ_MIN_SLICES = 4

#: The share of the slices the child reads. At 100k points (20 slices, 2 cores) half was
#: best: 4.1 s for the whole read alone, 3.2 s with the child (0.45: 3.4 s; 0.55: 3.6 s, 0.6:
#: 4.1 s, this process then waiting for the child; both processes are slower side by side
#: than alone). With the child typing its slices (:func:`typed_slices`) half is still best:
#: 2.7 s against 3.6 s with its slices given as rows (0.45: 2.7 s, 0.55: 3.3 s, 0.6: 4.1 s;
#: the later slices hold more readings).
SIDE_READ_SHARE = 0.5

#: Column kinds of :func:`typed_slices`: a float (``None``: NaN), an integer, an integer or
#: ``None``, a flag stored as 0 or 1, a flag or ``None``, any value (text).
KINDS = frozenset("fiIbBt")

#: The child's program: read each slice, write its columns pickled (argv: the store's URI,
#: the query, the parameter tuples as JSON, the output file, and the columns' kinds, or ""
#: for the columns as values). A typed slice is ``(kinds, columns)``, a column
#: ``(values, mask)``: an ``array`` of numbers (``d``: float, ``q``: integer, ``b``: 0 or 1)
#: and the bytes of its missing values' mask (1: missing), or ``None`` when none is missing
#: (a float's are NaN); a text column is its tuple of values and ``None``. A value its kind
#: cannot hold ends the child (exit 4).
_CHILD_CODE = """
import array, json, pickle, sqlite3, sys
uri, sql, params, out = sys.argv[1], sys.argv[2], json.loads(sys.argv[3]), sys.argv[4]
kinds = sys.argv[5] if len(sys.argv) > 5 else ""
nan = float("nan")
def numbers(code, col):
    try:
        return array.array(code, col)
    except (TypeError, OverflowError):
        sys.exit(4)
def typed(kind, col):
    if kind == "t":
        return col, None
    code = "d" if kind == "f" else "q" if kind in "iI" else "b"
    mask = None
    if kind in "fIB" and None in col:
        if kind == "f":
            col = [nan if v is None else v for v in col]
        else:
            mask = bytes(v is None for v in col)
            col = [0 if v is None else v for v in col]
    values = numbers(code, col)
    if code == "b" and (min(values) < 0 or max(values) > 1):
        sys.exit(4)
    return values, mask
conn = sqlite3.connect(uri, uri=True, timeout=30.0)
with open(out, "wb") as f:
    for p in params:
        columns = tuple(zip(*conn.execute(sql, p).fetchall()))
        if kinds and columns:
            columns = (kinds, tuple(typed(k, c) for k, c in zip(kinds, columns)))
        pickle.dump(columns, f, protocol=5)
"""

Row = tuple[Any, ...]


@dataclass(frozen=True)
class TypedColumns:
    """A slice's columns as the child typed them (:func:`typed_slices`), in the query's
    order: per column its values (a float64, int64 or bool array; a tuple for text) and,
    for a nullable integer or flag, its missing values' mask (a bool array, True: missing);
    None for the others (a float's missing values are NaN)."""

    values: tuple[Any, ...]
    masks: tuple[Any, ...]
    rows: int


def rows_in_slices(path: Path, sql: str, params: Sequence[Sequence[object]],
                   read: Callable[[str, Sequence[object]], list[Row]]) -> Iterator[list[Row]]:
    """The rows of ``sql`` run with each of ``params`` in turn (``read``: how this process
    runs one), the second half read by a child process when there are at least
    :data:`SIDE_READ_MIN_SLICES` slices (see the module docstring)."""
    for got in _slices(path, sql, params, read, ""):
        assert isinstance(got, list)
        yield got


def typed_slices(path: Path, sql: str, params: Sequence[Sequence[object]],
                 read: Callable[[str, Sequence[object]], list[Row]], kinds: str
                 ) -> Iterator[list[Row] | TypedColumns]:
    """:func:`rows_in_slices`, the child's slices as :class:`TypedColumns` (``kinds``: a
    letter of :data:`KINDS` per column of ``sql``), the rest as rows."""
    if not kinds or not set(kinds) <= KINDS:
        raise ValueError(f"column kinds {kinds!r}: each one of {''.join(sorted(KINDS))}")
    yield from _slices(path, sql, params, read, kinds)


def _slices(path: Path, sql: str, params: Sequence[Sequence[object]],
            read: Callable[[str, Sequence[object]], list[Row]], kinds: str
            ) -> Iterator[list[Row] | TypedColumns]:
    if len(params) < SIDE_READ_MIN_SLICES:
        for p in params:
            yield read(sql, p)
        return
    mine_count = len(params) - round(len(params) * SIDE_READ_SHARE)
    mine, theirs = params[:mine_count], params[mine_count:]
    child = _start(path, sql, theirs, kinds)
    try:
        for p in mine:
            yield read(sql, p)
        taken = 0
        if child is not None:
            for columns in _slices_of(*child):
                got = _as_given(columns, kinds)
                if got is None:  # (not what was asked: read here, from this slice on)
                    break
                taken += 1
                yield got
        for p in theirs[taken:]:  # (all of them when the child failed)
            yield read(sql, p)
    finally:
        if child is not None:
            _stop(*child)


def _as_given(columns: Any, kinds: str) -> list[Row] | TypedColumns | None:
    """A slice the child wrote as this reading gives it (None: not a slice of ``kinds``)."""
    if not kinds or not columns:  # (an empty slice is written as no columns)
        return list(zip(*columns, strict=True))
    import numpy as np

    if not (isinstance(columns, tuple) and len(columns) == 2 and columns[0] == kinds
            and len(columns[1]) == len(kinds)):
        return None
    values: list[Any] = []
    masks: list[Any] = []
    for kind, (column, mask) in zip(kinds, columns[1], strict=True):
        if kind == "t":
            if not isinstance(column, tuple):
                return None
            values.append(column)
            masks.append(None)
            continue
        if not isinstance(column, array.array) or column.typecode != _TYPECODES[kind] \
                or (mask is not None and kind in "fib"):
            return None
        numbers = np.frombuffer(column, dtype=_DTYPES[column.typecode])
        values.append(numbers.astype(bool) if kind in "bB" else numbers)
        if kind in "IB":
            masks.append(np.zeros(numbers.size, dtype=np.bool_) if mask is None
                         else np.frombuffer(mask, dtype=np.bool_).copy())
        else:
            masks.append(None)
    rows = len(values[0])
    if any(len(v) != rows for v in values) or any(m is not None and m.size != rows
                                                  for m in masks):
        return None
    return TypedColumns(tuple(values), tuple(masks), rows)


#: The ``array`` type code of each kind's numbers, and the numpy type of each code.
_TYPECODES = {"f": "d", "i": "q", "I": "q", "b": "b", "B": "b"}
_DTYPES = {"d": "float64", "q": "int64", "b": "int8"}


def _start(path: Path, sql: str, params: Sequence[Sequence[object]], kinds: str = ""
           ) -> tuple[subprocess.Popen[bytes], Path] | None:
    """The child reading ``params`` into a temporary file (None: it could not start)."""
    if not python_child_possible():
        return None
    try:
        handle, name = tempfile.mkstemp(prefix="sweeprig-read-", suffix=".pickle")
        os.close(handle)
    except OSError:
        return None
    out = Path(name)
    uri = path.resolve().as_uri() + "?mode=ro"
    try:
        child = subprocess.Popen(
            [sys.executable, "-I", "-S", "-c", _CHILD_CODE, uri, sql,
             json.dumps([list(p) for p in params]), str(out), kinds],
            stdin=subprocess.DEVNULL, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    except (OSError, ValueError):
        out.unlink(missing_ok=True)
        return None
    return child, out


def _slices_of(child: subprocess.Popen[bytes], out: Path) -> Iterator[tuple[tuple[Any, ...], ...]]:
    """The child's slices, one at a time, once it has ended well (none otherwise; those it
    wrote before failing are given)."""
    if child.wait() != 0:
        return
    try:
        f = out.open("rb")
    except OSError:
        return
    with f:
        while True:
            try:
                columns = pickle.load(f)
            except Exception:  # (the end, or a file cut short: read here)
                return
            yield columns


def _stop(child: subprocess.Popen[bytes], out: Path) -> None:
    if child.poll() is None:
        child.kill()
        with suppress(OSError):
            child.wait()
    out.unlink(missing_ok=True)
