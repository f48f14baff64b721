"""A large run's points and readings read from its SQLite file by a child process into Arrow
columns.

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
column's type against the kind it must hold and writes them to a pipe as Arrow IPC
streams, one a query, which this process takes in when it is ready for them, and makes into
the frames ``sqlite3`` would have given (:func:`frame_of_table`;
``tests/store/test_arrow_reader.py`` compares the two). The run's points go with its
readings: read here they took a core from the child (3.8 s of this process' time at a
million points, the child's two threads then sharing the other core).

Anything wrong (the extra not installed, a column the driver typed otherwise, a value its
kind cannot hold, the child failing or killed) is not an error: :meth:`ArrowRead.tables`
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

from sweeprig.memory import arrow_child_environment
from sweeprig.python_child import python_child_possible

if TYPE_CHECKING:
    import pandas as pd

#: The child's program (argv: the store's read-only URI, then the reads as JSON: a list of
#: [query, parameter tuples, the columns' kinds as in :data:`sweeprig.store.side_reader.
#: KINDS`]). Two threads read half of each read's slices (the driver steps SQLite without
#: the interpreter's lock); then each read goes to the output as an Arrow IPC stream of its
#: own, in order, a record batch a slice. The driver is used through its low-level
#: statements: its DB-API module also imports pyarrow's datasets, pandas and polars, which
#: the child never uses (0.6 -> 0.2 s of its start, on the path of the report, which waits
#: for these tables). Exit 4: a column the driver typed otherwise than its kind allows
#: (nothing written).
_CHILD_CODE = """
import json, sys, threading
import pyarrow as pa, pyarrow.compute as pc, pyarrow.ipc as ipc
import adbc_driver_manager as adbc, adbc_driver_sqlite
uri, reads = sys.argv[1], json.loads(sys.argv[2])
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
tables, failed = [[None, None] for _ in reads], []
def query(stmt):
    handle, _ = stmt.execute_query()
    return pa.RecordBatchReader._import_from_c(handle.address).read_all()
def read(k):
    try:
        with adbc_driver_sqlite.connect(uri) as db, adbc.AdbcConnection(db) as conn:
            with adbc.AdbcStatement(conn) as stmt:
                stmt.set_sql_query("PRAGMA busy_timeout = 30000")
                query(stmt)
            for r, (sql, params, kinds) in enumerate(reads):
                half = [params[:len(params) // 2], params[len(params) // 2:]][k]
                with adbc.AdbcStatement(conn) as stmt:
                    stmt.set_options(**{"adbc.sqlite.query.batch_rows": "1073741824"})
                    stmt.set_sql_query(sql)
                    got = []
                    for p in half:
                        stmt.bind(pa.record_batch([pa.array([v]) for v in p],
                                                  names=[str(i) for i in range(len(p))]))
                        table = query(stmt)
                        got.append(pa.table([typed(table.column(i).combine_chunks(), kind)
                                             for i, kind in enumerate(kinds)],
                                            names=[str(i) for i in range(len(kinds))]))
                tables[r][k] = got
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
for (sql, params, kinds), (first, second) in zip(reads, tables):
    every = first + second
    schema = every[0].schema if every else pa.schema(
        [(str(i), TYPES[kind]) for i, kind in enumerate(kinds)])
    with ipc.new_stream(sys.stdout.buffer, schema) as writer:
        for table in every:
            writer.write_table(table)
"""


def arrow_read_available() -> bool:
    """True when the ADBC SQLite driver and pyarrow (the ``fast`` extra) are installed."""
    return all(importlib.util.find_spec(name) is not None
               for name in ("pyarrow", "adbc_driver_sqlite"))


class ArrowRead:
    """A child process reading queries' slices (:func:`start_read`); :meth:`tables` takes
    its output into Arrow tables (in memory the system's allocator gives back to this
    thread's later allocations once freed; no file: a temporary folder may be memory
    itself). The child writes only once it has read every slice, so nothing is lost by
    taking its output only when the caller is ready for it."""

    def __init__(self, child: subprocess.Popen[bytes], kinds: Sequence[str]) -> None:
        self.child = child
        self.kinds = list(kinds)

    def tables(self) -> list[Any] | None:
        """Each read's slices as one Arrow table, a column a kind, in the order of the
        reads, once the child has ended well; None when it did not (the caller reads the
        rows itself)."""
        try:
            import pyarrow as pa
            import pyarrow.ipc as ipc

            assert self.child.stdout is not None
            out = []
            try:
                for kinds in self.kinds:  # (the streams follow one another on the pipe)
                    reader = ipc.open_stream(self.child.stdout,
                                             memory_pool=pa.system_memory_pool())
                    table = reader.read_all()
                    if table.num_columns != len(kinds):
                        return None
                    out.append(table)
            except Exception:  # (nothing written, a stream cut short: read by the caller)
                return None
            if self.child.wait() != 0:
                return None
            return out
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


#: One read of :func:`start_read`: a query, its parameter tuples (one a slice, read in
#: order) and its columns' kinds (:data:`sweeprig.store.side_reader.KINDS`).
Read = tuple[str, Sequence[Sequence[object]], str]


def start_read(path: Path, reads: Sequence[Read]) -> ArrowRead | None:
    """A child process running each query of ``reads`` once per parameter tuple, in order,
    on the SQLite file ``path`` (read-only), each column typed by its letter of the read's
    kinds. None when the driver is not installed or the child cannot start."""
    if not arrow_read_available() or not python_child_possible():
        return None
    uri = path.resolve().as_uri() + "?mode=ro"
    env = arrow_child_environment()
    try:
        child = subprocess.Popen(
            [sys.executable, "-I", "-c", _CHILD_CODE, uri,
             json.dumps([[sql, [list(p) for p in params], kinds]
                         for sql, params, kinds in reads])],
            stdin=subprocess.DEVNULL, stdout=subprocess.PIPE, stderr=subprocess.DEVNULL,
            env=env)
    except (OSError, ValueError):
        return None
    return ArrowRead(child, [kinds for _sql, _params, kinds in reads])


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


__all__ = ["ArrowRead", "Read", "arrow_read_available", "frame_of_table", "start_read"]
