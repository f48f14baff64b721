"""Some slices of a long read of an SQLite store, read by a second process on the other core.

Reading a large run's readings is the first thing its report does, and the slowest: at 100k
points, about half a million rows whose cells ``sqlite3`` turns into Python objects one by
one, while the machine's second core has nothing to do yet (the report's helper process
starts once the capture table exists). Threads do not help: the conversion holds the
interpreter's lock, and two threads reading took three times as long as one.

:func:`rows_in_slices` gives the rows of one query run once per parameter tuple, in order,
as the caller's own reads would. It hands the second half of the slices to a child
interpreter (a few lines of the standard library: no third-party import, so it starts in a
few tens of milliseconds), which opens the file read-only, reads its slices and writes each
one's columns, pickled, to a file; meanwhile this process reads the first half. The child's
slices are then read back one at a time (never all at once) and given as rows again, the
same tuples a read here would give, so the frames made from them are the same.

Anything wrong with the child (it cannot start, fails, is killed, writes a short file) is
not an error: its slices are read here instead, as if there were no child. The child is
never left running: it is stopped when the reading stops early.
"""

from __future__ import annotations

import json
import os
import pickle
import subprocess
import sys
import tempfile
from collections.abc import Callable, Iterator, Sequence
from contextlib import suppress
from pathlib import Path
from typing import Any

#: The fewest slices for which a child reads half of them (fewer: its start would not pay).
SIDE_READ_MIN_SLICES = 4

#: The share of the slices the child reads. At 100k points (20 slices, 2 cores) half was
#: best: 4.1 s for the whole read alone, 3.2 s with the child (0.45: 3.4 s; 0.55: 3.6 s, 0.6:
#: 4.1 s, this process then waiting for the child; both processes are slower side by side
#: than alone).
SIDE_READ_SHARE = 0.5

#: The child's program: read each slice, write its columns pickled (argv: the store's URI,
#: the query, the parameter tuples as JSON, the output file).
_CHILD_CODE = """
import json, pickle, sqlite3, sys
uri, sql, params, out = sys.argv[1], sys.argv[2], json.loads(sys.argv[3]), sys.argv[4]
conn = sqlite3.connect(uri, uri=True, timeout=30.0)
with open(out, "wb") as f:
    for p in params:
        pickle.dump(tuple(zip(*conn.execute(sql, p).fetchall())), f, protocol=5)
"""

Row = tuple[Any, ...]


def rows_in_slices(path: Path, sql: str, params: Sequence[Sequence[object]],
                   read: Callable[[str, Sequence[object]], list[Row]]) -> Iterator[list[Row]]:
    """The rows of ``sql`` run with each of ``params`` in turn (``read``: how this process
    runs one), the second half read by a child process when there are at least
    :data:`SIDE_READ_MIN_SLICES` slices (see the module docstring)."""
    if len(params) < SIDE_READ_MIN_SLICES:
        for p in params:
            yield read(sql, p)
        return
    mine_count = len(params) - round(len(params) * SIDE_READ_SHARE)
    mine, theirs = params[:mine_count], params[mine_count:]
    child = _start(path, sql, theirs)
    try:
        for p in mine:
            yield read(sql, p)
        taken = 0
        if child is not None:
            for columns in _slices_of(*child):
                taken += 1
                yield list(zip(*columns, strict=True))
        for p in theirs[taken:]:  # (all of them when the child failed)
            yield read(sql, p)
    finally:
        if child is not None:
            _stop(*child)


def _start(path: Path, sql: str, params: Sequence[Sequence[object]]
           ) -> tuple[subprocess.Popen[bytes], Path] | None:
    """The child reading ``params`` into a temporary file (None: it could not start)."""
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
             json.dumps([list(p) for p in params]), str(out)],
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
