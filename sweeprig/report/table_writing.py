"""The report's two big tables (captures and figures, as CSV and/or Parquet), written slice
by slice, and for a large run by a helper process on the other core.

A large run's tables are much of its report's time: at 100k points the text of
``captures.csv`` and ``figures.csv`` (about 280 MB) and their Parquet files took about half
of the files' processor time, one interpreter formatting millions of cells, while the
machine's second core sat idle. The figure table's slices have to be made where the figures
are, but turning them into files does not: :class:`TableWriting` hands each slice (numpy
columns, pickled through a pipe) to a helper process (:func:`serve`, a fresh interpreter:
nothing of this process is shared or copied), while this process goes on. The capture
table is given first, as soon as it exists (:func:`~sweeprig.report.report_stored_run`):
the helper writes it while the figures are still being worked out. The slices are sent by
a thread of this process, which waits whenever the helper is behind (the pipe is full), so
a slice or two is in flight and the figure table's own work interleaves with the rest of
the report (summary, JSON, plots, page).

Small runs (under :data:`HELPER_CAPTURE_ROWS` captures) are written here, each table as it
is given: starting an interpreter would cost more than it saves. Both ways write the same
slices through the same :class:`TableSink`, so the files are the same byte for byte
(``tests/report/test_table_writing.py``).

Failures name the file: a write the helper could not make comes back as the same
:class:`~sweeprig.errors.StoreError` as one made here; a helper that ends without
answering (killed, out of memory) is named with its exit code and its last words; an
error of this process (or Ctrl-C) stops the helper, which is never left running.
"""

from __future__ import annotations

import contextlib
import os
import pickle
import queue
import subprocess
import sys
import tempfile
import threading
from collections.abc import Callable, Iterator, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import IO, Any

import pandas as pd

from sweeprig.errors import StoreError
from sweeprig.memory import arrow_child_environment, peak_resident_mb
from sweeprig.python_child import python_child_possible

#: Capture rows from which a helper process writes a run's tables (a run's figures grow
#: with its captures; below it the tables are written in this process: the helper's start,
#: about a second of imports on its core, would not pay).
HELPER_CAPTURE_ROWS = 100_000
#: Capture rows per slice (the figure table's: ``FIGURE_SLICE_ROWS`` in tables.py).
CAPTURE_SLICE_ROWS = 50_000

#: The helper's program: :func:`serve` of this module.
_HELPER_CODE = "from sweeprig.report.table_writing import serve; serve()"


@dataclass(frozen=True)
class TableJob:
    """One table to write: ``paths`` per format ("csv", "parquet"), its slices in order and
    the Arrow ``schema`` of its Parquet file (None: the first slice's; a column of whole
    numbers or nothing is pandas' nullable integers in the slices). ``finish``: a
    module-level function that makes each slice the frame written, where it is written
    (a large run's in the helper process: what only formats its columns into text is done
    on the other core); None: the slices are the frames."""

    paths: Mapping[str, Path]
    slices: Iterator[Any]
    schema: Any = None
    finish: Callable[[Any], pd.DataFrame] | None = None


class TableSink:
    """One table written slice by slice to CSV and/or Parquet: the CSV header before the
    first slice, one Parquet row group a slice (its column types fixed by ``schema``, else
    by the first slice: the slices must keep them)."""

    def __init__(self, paths: Mapping[str, Path], schema: Any = None) -> None:
        self.paths = dict(paths)
        self.schema = schema
        self._csv_file: IO[str] | None = None
        self._header = True
        self._parquet: Any = None
        self.current: Path | None = None  # the file being written (for messages)
        if "csv" in self.paths:
            self.current = self.paths["csv"]
            self._csv_file = self.paths["csv"].open("w", encoding="utf-8", newline="")

    def write(self, frame: pd.DataFrame) -> None:
        """Write one slice (its Arrow table, made for the Parquet file, serves the CSV text
        too: :func:`~sweeprig.report.csv_table.write_frame_rows`)."""
        from sweeprig.report.csv_table import write_frame_rows

        table = None
        if "parquet" in self.paths:
            import pyarrow as pa

            schema = self.schema if self._parquet is None else self._parquet.schema
            table = pa.Table.from_pandas(frame, preserve_index=False, schema=schema)
        if self._csv_file is not None:
            self.current = self.paths["csv"]
            write_frame_rows(self._csv_file, frame, header=self._header, arrow=table)
            self._header = False
        if table is not None:
            import pyarrow.parquet as pq

            self.current = self.paths["parquet"]
            if self._parquet is None:
                self._parquet = pq.ParquetWriter(self.paths["parquet"], table.schema,
                                                 use_dictionary=few_valued_columns(table))
            self._parquet.write_table(table)

    def close(self) -> None:
        """Close the files (a table with no slice still gets its CSV file, empty)."""
        try:
            if self._csv_file is not None:
                self.current = self.paths["csv"]
                self._csv_file.close()
        finally:
            if self._parquet is not None:
                self.current = self.paths["parquet"]
                self._parquet.close()


#: A column is dictionary-encoded in a Parquet file when its first slice holds at most one
#: distinct value per this many rows.
DICTIONARY_ROWS_PER_VALUE = 8


def few_valued_columns(table: Any) -> list[str]:
    """The columns of an Arrow table worth a dictionary in its Parquet file (their pages
    then hold small codes): those with at most one distinct value per
    :data:`DICTIONARY_ROWS_PER_VALUE` rows (a study, a unit, a temperature). Each other
    column is written plain: a dictionary of values nearly all distinct (a measured level,
    a figure's text) costs time and is given up page by page anyway. On a slice of the
    100k-point benchmark's figure table (Parquet's default is a dictionary for every
    column): 0.52 -> 0.36 s for the file, 36.3 -> 32.2 MB; the same values read back."""
    import pyarrow as pa
    import pyarrow.compute as pc

    most = max(table.num_rows, 1) // DICTIONARY_ROWS_PER_VALUE
    out = []
    for name, column in zip(table.column_names, table.columns, strict=True):
        if pa.types.is_null(column.type):
            continue  # (nothing to encode: a column of no value at all)
        try:
            distinct = pc.count_distinct(column, mode="all").as_py()
        except pa.ArrowNotImplementedError:  # (a type Arrow cannot count: written plain)
            continue
        if distinct <= max(most, 1):
            out.append(name)
    return out


def write_error(path: Path, exc: OSError) -> StoreError:
    """The error of a report file that could not be written (here or by the helper)."""
    return StoreError(
        f"cannot write the report file: {exc.strerror or exc}",
        where=str(path),
        fix="check the folder's permissions and free space, or give another one with --out",
    )


def write_job(job: TableJob) -> None:
    """Write one table here; a :class:`~sweeprig.errors.StoreError` naming the file that
    could not be written (an error of the slices themselves propagates as it is)."""
    first = next(iter(job.paths.values()), None)
    try:
        sink = TableSink(job.paths, job.schema)
    except OSError as exc:
        raise write_error(first or Path("?"), exc) from None
    try:
        for item in job.slices:
            frame = item if job.finish is None else job.finish(item)
            try:
                sink.write(frame)
            except OSError as exc:
                raise write_error(sink.current or first or Path("?"), exc) from None
    except BaseException:
        _close_quietly(sink)
        raise
    try:
        sink.close()
    except OSError as exc:
        raise write_error(sink.current or first or Path("?"), exc) from None


def _close_quietly(sink: TableSink) -> None:
    with contextlib.suppress(OSError):  # the first failure is the one to name
        sink.close()


class TableWriting:
    """Tables being written, one :class:`TableJob` after another as :meth:`add` gives
    them: here at once (``helper`` False), or by a helper process fed by a thread of this
    process (``helper`` True), the caller going on meanwhile. Use as a context manager;
    :meth:`finish` waits for the last file and raises :class:`~sweeprig.errors.StoreError`
    for a file that could not be written or a helper that ended without finishing;
    leaving the block early (an error, Ctrl-C) stops the helper."""

    def __init__(self, *, helper: bool, where: Path, formats: tuple[str, ...] = ()) -> None:
        # (no interpreter to start, or a frozen program that cannot run -c: written here)
        self.helper = helper and python_child_possible()
        #: The folder of the tables, and the formats they are written in.
        self.where = where
        self.formats = formats
        self.jobs: list[TableJob] = []
        self._queue: queue.SimpleQueue[TableJob | None] = queue.SimpleQueue()
        self._process: subprocess.Popen[bytes] | None = None
        self._stderr: IO[bytes] | None = None
        self._thread: threading.Thread | None = None
        self._failure: BaseException | None = None
        self._stop = threading.Event()
        self._finished = False
        #: Why the tables were written by the feeding thread instead (a helper that could
        #: not start: an interpreter that cannot run this sweeprig); None: by the helper.
        self.helper_failed: str | None = None
        self._waiting = threading.Event()  # finish() is waiting: slices finished here
        #: The helper's peak resident memory, MB (None: written here, or not known).
        self.helper_peak_mb: float | None = None

    def paths(self) -> list[Path]:
        """Every file of every table given, in order."""
        return [path for job in self.jobs for path in job.paths.values()]

    def __enter__(self) -> TableWriting:
        if not self.helper:
            return self
        self._stderr = tempfile.TemporaryFile()
        env = arrow_child_environment()  # (its freed slices handed back to the system)
        # the helper imports this very sweeprig, wherever this process found it
        root = str(Path(__file__).resolve().parents[2])
        env["PYTHONPATH"] = os.pathsep.join(p for p in (root, env.get("PYTHONPATH")) if p)
        # (-P: not the working folder first on its path, where another sweeprig may be)
        self._process = subprocess.Popen(
            [sys.executable, "-P", "-c", _HELPER_CODE], stdin=subprocess.PIPE,
            stdout=subprocess.PIPE, stderr=self._stderr, env=env)
        self._thread = threading.Thread(target=self._feed, name="sweeprig-tables",
                                        daemon=True)
        self._thread.start()
        return self

    def add(self, job: TableJob) -> None:
        """Write ``job``'s table: here, now (a StoreError naming a file that could not be
        written), or by the helper after the tables given before."""
        if self._finished:
            raise RuntimeError("these tables are finished already")
        self.jobs.append(job)
        if self.helper:
            self._queue.put(job)
        else:
            write_job(job)

    def _feed(self) -> None:
        """The thread: every job's slices, in order, pickled into the helper's input; then
        the end, once :meth:`finish` says there is nothing more. It waits whenever the
        helper is behind (the pipe is full): a slice or two is in flight. A helper that
        does not say it is ready (it could not start) is let go, and the tables are
        written by this thread instead: slower, the same files."""
        from sweeprig.analysis.figures import collector_paused

        process = self._process
        assert process is not None and process.stdin is not None
        assert process.stdout is not None
        pipe = process.stdin
        try:
            with collector_paused():  # the slices are many small acyclic objects
                if _answer(process.stdout) != ("ready",):
                    self.helper_failed = f"exit code {process.wait()}{self._last_words()}"
                    while (job := self._queue.get()) is not None and not self._stop.is_set():
                        write_job(TableJob(job.paths, self._until_stopped(job.slices),
                                           job.schema, job.finish))
                    return
                while (job := self._queue.get()) is not None:
                    _send(pipe, ("open", {k: str(p) for k, p in job.paths.items()},
                                 job.schema, job.finish))
                    for item in self._until_stopped(job.slices):
                        # while this process makes the rest of the report, the helper
                        # finishes the slices; once it only waits (finish()), it finishes
                        # them here, on the core it no longer uses (their CSV text, the
                        # helper's largest part once, is polars' with the fast extra)
                        if job.finish is not None and self._waiting.is_set():
                            _send(pipe, ("rows", job.finish(item), True))
                        else:
                            _send(pipe, ("rows", item, job.finish is None))
                    _send(pipe, ("close",))
                    if self._stop.is_set():
                        return
                _send(pipe, ("end",))
        except BaseException as exc:  # handed to finish(): a thread cannot raise to it
            self._failure = exc
        finally:
            with contextlib.suppress(OSError):  # (a helper gone: said by finish)
                pipe.close()

    def _until_stopped(self, slices: Iterator[pd.DataFrame]) -> Iterator[pd.DataFrame]:
        """``slices`` until the report stops (an error, Ctrl-C: :meth:`__exit__`)."""
        for frame in slices:
            if self._stop.is_set():
                return
            yield frame

    def finish(self) -> None:
        """Wait until every table given is written; raise what went wrong."""
        if not self.helper or self._finished:
            self._finished = True
            return
        self._finished = True
        assert self._process is not None and self._thread is not None
        self._waiting.set()
        self._queue.put(None)
        self._thread.join()
        process = self._process
        assert process.stdout is not None
        reply = None if self.helper_failed is not None else _answer(process.stdout)
        process.stdout.close()
        code = process.wait()
        failure = self._failure
        if failure is not None and not isinstance(failure, BrokenPipeError):
            raise failure  # this process' own error (the helper was told to stop)
        if self.helper_failed is not None:
            return  # written by the thread
        kind = reply[0] if isinstance(reply, tuple) and reply else None
        if kind == "done" and len(reply) == 2:
            self.helper_peak_mb = reply[1]
            return
        if kind == "failed" and len(reply) == 4:
            _, what, where, fix = reply
            raise StoreError(what, where=where, fix=fix)  # (write_error's, in the helper)
        why = (str(reply[1]) if kind == "error" and len(reply) == 2
               else f"exit code {code}{self._last_words()}")  # (or an answer not understood)
        raise StoreError(
            f"the helper process writing the report's tables stopped before it had "
            f"written them ({why})", where=str(self.where),
            fix="run the report again; if it stops again, see the message above, and check "
                "the machine's free memory")

    def _last_words(self) -> str:
        if self._stderr is None:
            return ""
        self._stderr.seek(0)
        lines = [x for x in self._stderr.read().decode("utf-8", "replace").splitlines()
                 if x.strip()]
        return f": {lines[-1].strip()}" if lines else ""

    def __exit__(self, kind: type[BaseException] | None, *rest: object) -> None:
        try:
            if self.helper and not self._finished:
                # an error, or a block left without finish(): stop, write nothing more
                self._finished = True
                self._stop.set()
                self._queue.put(None)
                if self._process is not None:
                    self._process.kill()  # the thread's blocked write then fails at once
                if self._thread is not None:
                    self._thread.join()
                if self._process is not None:
                    if self._process.stdout is not None:
                        self._process.stdout.close()
                    self._process.wait()
        finally:
            if self._stderr is not None:
                self._stderr.close()


def _answer(stream: IO[bytes]) -> Any:
    """The helper's next answer (None: it ended without one)."""
    try:
        return pickle.load(stream)
    except (EOFError, pickle.UnpicklingError, OSError, AttributeError, ImportError):
        return None


def _send(pipe: IO[bytes], message: tuple[Any, ...]) -> None:
    # pickled whole, then written in one call: a blocking write of all of it lets go of the
    # interpreter's lock once (pickle.dump writes frame by frame, and after each frame the
    # pipe drained the feeding thread has to win the lock back from the report's own work)
    pipe.write(pickle.dumps(message, protocol=pickle.HIGHEST_PROTOCOL))
    pipe.flush()


def serve(source: IO[bytes] | None = None, reply: IO[bytes] | None = None) -> None:
    """The helper: read the messages of :class:`TableWriting` from ``source`` (standard
    input) and write each table with :func:`write_job`, as the report process would; say
    ``("ready",)`` on ``reply`` (standard output) first, and answer once at the end:
    ``("done", peak MB)``, ``("failed", what, where, fix)`` for the first table that could
    not be written (its StoreError, which names the file; the messages after it are read
    and dropped, so the sender never waits on a full pipe), or ``("error", text)``."""
    source = source or sys.stdin.buffer
    reply = reply or sys.stdout.buffer
    pickle.dump(("ready",), reply, protocol=pickle.HIGHEST_PROTOCOL)
    reply.flush()

    def rows(finish: Callable[[Any], pd.DataFrame] | None) -> Iterator[pd.DataFrame]:
        """The slices of the table just opened, until its ``close``; each finished here
        unless the report process did (the message says)."""
        while (message := pickle.load(source))[0] == "rows":
            _, item, finished = message
            yield item if finished or finish is None else finish(item)
        if message[0] != "close":
            raise ValueError(f"unexpected message {message[0]!r} within a table")

    answer: tuple[Any, ...] | None = None
    try:
        while (message := pickle.load(source))[0] != "end":
            if answer is not None:
                continue  # failed already: drain
            if message[0] != "open":
                answer = ("error", f"unexpected message {message[0]!r}")
                continue
            _, paths, schema, finish = message
            try:
                write_job(TableJob({k: Path(v) for k, v in paths.items()}, rows(finish),
                                   schema))
            except StoreError as exc:
                answer = ("failed", exc.what, exc.where, exc.fix)
            except (EOFError, pickle.UnpicklingError):
                raise
            except Exception as exc:  # reported to the report process, which names it
                answer = ("error", f"{type(exc).__name__}: {exc}")
    except (EOFError, pickle.UnpicklingError):
        answer = answer or ("error", "the report process stopped sending")
    pickle.dump(answer or ("done", peak_resident_mb()), reply,
                protocol=pickle.HIGHEST_PROTOCOL)
    reply.flush()
