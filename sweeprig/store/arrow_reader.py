"""A large run's readings read from its SQLite file by a child process into Arrow columns.

Reading a large run's readings is the first thing its report does, and with the standard
``sqlite3`` module the slowest: every cell becomes a Python object before it becomes a
column (about 2.8 s at 100k points, about half a million readings, on the kind of machine
the benchmarks run on; :mod:`sweeprig.store.side_reader` splits that over two processes).
The ADBC SQLite driver (Apache Arrow's database connectivity; the ``fast`` extra) steps the
same query in C into Arrow columns: the whole read took 0.75 s there, two threads each
reading half of the slices.

The driver carries its own copy of the SQLite library. Two copies of SQLite in one process
must not open the same file (closing one's descriptor drops the other's POSIX locks: the
SQLite documentation's "How To Corrupt An SQLite Database File", section 2.2.1), and a
report is made in the process that may hold the run's own store open for writing (the end
of ``sweeprig run``); so the driver is only ever loaded in a child process
(:func:`start_read`), which opens the file read-only, reads its slices, checks every
column's type against the kind it must hold and writes them to a pipe as an Arrow IPC
stream, which this process takes in once it has read the points, and makes into the same
frame ``sqlite3`` would have given (:func:`frame_of_table`;
``tests/store/test_arrow_reader.py`` compares the two).

Anything wrong (the extra not installed, a column the driver typed otherwise, a value its
kind cannot hold, the child failing or killed) is not an error: :meth:`ArrowRead.table`
gives None and the caller reads the rows itself, as it would without the driver. The child
is never left running.
"""

from __future__ import annotations

import contextlib
import importlib.util
import json
import subprocess
import sys
from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

from sweeprig.python_child import python_child_possible

if TYPE_CHECKING:
    import pandas as pd

#: The child's program (argv: the store's read-only URI, the query, the parameter tuples as
#: JSON, the columns' kinds as in :data:`sweeprig.store.side_reader.KINDS`). Two threads
#: read half of the slices each (the driver steps SQLite without the interpreter's lock);
#: then every slice goes to its output as an Arrow IPC stream, a record batch a slice.
#: The driver is used through its low-level statements: its DB-API module also imports
#: pyarrow's datasets, pandas and polars, which the child never uses (0.6 -> 0.2 s of its
#: start, on the path of the report, which waits for these readings).
#: Exit 4: a column the driver typed otherwise than its kind allows (nothing written).
_CHILD_CODE = """
import json, sys, threading
import pyarrow as pa, pyarrow.compute as pc, pyarrow.ipc as ipc
import adbc_driver_manager as adbc, adbc_driver_sqlite
uri, sql, params, kinds = sys.argv[1], sys.argv[2], json.loads(sys.argv[3]), sys.argv[4]
TYPES = {"f": pa.float64(), "i": pa.int64(), "I": pa.int64(), "b": pa.int64(),
         "B": pa.int64(), "t": pa.string()}
def typed(column, kind):
    if kind in "ib" and column.null_count:
        sys.exit(4)
    if column.null_count == len(column):
        return pa.nulls(len(column), TYPES[kind])
    if column.type != TYPES[kind]:
        sys.exit(4)
    if kind in "bB" and (pc.min(column).as_py() < 0 or pc.max(column).as_py() > 1):
        sys.exit(4)
    return column
halves = [params[:len(params) // 2], params[len(params) // 2:]]
tables, failed = [None, None], []
def query(stmt):
    handle, _ = stmt.execute_query()
    return pa.RecordBatchReader._import_from_c(handle.address).read_all()
def read(k):
    try:
        with adbc_driver_sqlite.connect(uri) as db, adbc.AdbcConnection(db) as conn:
            with adbc.AdbcStatement(conn) as stmt:
                stmt.set_sql_query("PRAGMA busy_timeout = 30000")
                query(stmt)
            with adbc.AdbcStatement(conn) as stmt:
                stmt.set_options(**{"adbc.sqlite.query.batch_rows": "1073741824"})
                stmt.set_sql_query(sql)
                got = []
                for p in halves[k]:
                    stmt.bind(pa.record_batch([pa.array([v]) for v in p],
                                              names=[str(i) for i in range(len(p))]))
                    table = query(stmt)
                    got.append(pa.table([typed(table.column(i).combine_chunks(), kind)
                                         for i, kind in enumerate(kinds)],
                                        names=[str(i) for i in range(len(kinds))]))
            tables[k] = got
    except SystemExit as stop:
        failed.append(stop.code)
    except BaseException:
        failed.append(3)
threads = [threading.Thread(target=read, args=(k,)) for k in (0, 1)]
for t in threads:
    t.start()
for t in threads:
    t.join()
if failed:
    sys.exit(failed[0])
every = tables[0] + tables[1]
with ipc.new_stream(sys.stdout.buffer, every[0].schema) as writer:
    for table in every:
        writer.write_table(table)
"""


def arrow_read_available() -> bool:
    """True when the ADBC SQLite driver and pyarrow (the ``fast`` extra) are installed."""
    return all(importlib.util.find_spec(name) is not None
               for name in ("pyarrow", "adbc_driver_sqlite"))


class ArrowRead:
    """A child process reading a query's slices (:func:`start_read`); :meth:`table` takes
    its output into an Arrow table (in memory the system's allocator gives back to this
    thread's later allocations once freed; no file: a temporary folder may be memory
    itself). The child writes only once it has read every slice, so nothing is lost by
    taking its output only when the caller is ready for it."""

    def __init__(self, child: subprocess.Popen[bytes], kinds: str) -> None:
        self.child = child
        self.kinds = kinds

    def table(self) -> Any:
        """The slices as one Arrow table, a column a kind, once the child has ended well;
        None when it did not (the caller reads the rows itself)."""
        try:
            import pyarrow as pa
            import pyarrow.ipc as ipc

            assert self.child.stdout is not None
            try:
                reader = ipc.open_stream(self.child.stdout,
                                         memory_pool=pa.system_memory_pool())
                table = reader.read_all()
            except Exception:  # (nothing written, a stream cut short: read by the caller)
                return None
            if self.child.wait() != 0 or table.num_columns != len(self.kinds):
                return None
            return table
        finally:
            self.stop()

    def stop(self) -> None:
        """End the child if it is still running."""
        if self.child.poll() is None:
            self.child.kill()
            with contextlib.suppress(OSError):
                self.child.wait()
        if self.child.stdout is not None:
            self.child.stdout.close()


def start_read(path: Path, sql: str, params: Sequence[Sequence[object]], kinds: str
               ) -> ArrowRead | None:
    """A child process reading ``sql`` once per parameter tuple of ``params``, in order,
    from the SQLite file ``path`` (read-only), each column typed by its letter of ``kinds``
    (:data:`sweeprig.store.side_reader.KINDS`). None when the driver is not installed or
    the child cannot start."""
    if not arrow_read_available() or not python_child_possible():
        return None
    uri = path.resolve().as_uri() + "?mode=ro"
    try:
        child = subprocess.Popen(
            [sys.executable, "-I", "-c", _CHILD_CODE, uri, sql,
             json.dumps([list(p) for p in params]), kinds],
            stdin=subprocess.DEVNULL, stdout=subprocess.PIPE, stderr=subprocess.DEVNULL)
    except (OSError, ValueError):
        return None
    return ArrowRead(child, kinds)


def frame_of_table(table: Any, columns: Sequence[str], kinds: str) -> pd.DataFrame:
    """The frame the same rows read by ``sqlite3`` make (``from_records``, then typed by
    kind as :func:`sweeprig.store.sql._frame_of_columns` types them): a float with NaN
    where missing, an integer, a nullable integer, a flag, a nullable flag, text (pandas'
    text type; objects, all None, when no row has one). Each column is made whole from the
    table's slices and let go of in turn."""
    import numpy as np
    import pandas as pd
    import pyarrow as pa

    count = table.num_rows
    pool = pa.system_memory_pool()
    data: dict[str, object] = {}
    for k, (name, kind) in enumerate(zip(columns, kinds, strict=True)):
        column = table.column(k)
        if kind == "t":
            data[name] = (np.full(count, None, dtype=object) if column.null_count == count
                          else column.combine_chunks(memory_pool=pool).to_pandas())
        elif kind in "IB":
            mask = column.is_null().to_numpy()
            values = column.fill_null(0).to_numpy()
            data[name] = (pd.arrays.IntegerArray(values.astype(np.int64), mask) if kind == "I"
                          else pd.arrays.BooleanArray(values.astype(bool), mask))
        else:
            values = column.to_numpy()  # (one array of all the slices)
            data[name] = values.astype({"f": np.float64, "i": np.int64, "b": bool}[kind],
                                       copy=False)
        del column
    # each column its own block, as made: no second copy to consolidate them
    return pd.DataFrame(data, copy=False)


__all__ = ["ArrowRead", "arrow_read_available", "frame_of_table", "start_read"]
