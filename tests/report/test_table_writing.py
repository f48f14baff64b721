"""A large run's tables are written by a helper process (its CSV text) and a thread of the
report's process (its Parquet files) while the rest of the report is made: the files are the
same byte for byte as when written here, a file that cannot be written is named, and a
helper that dies or a report that fails never leaves anything running or waiting."""

from __future__ import annotations

import os
import signal
import sys
from collections.abc import Iterator
from pathlib import Path

import pandas as pd
import pytest

from sweeprig.errors import StoreError
from sweeprig.report import table_writing, tables, write_report
from sweeprig.report.table_writing import TableJob, TableWriting
from sweeprig.report.tables import add_figure_table, open_tables

NAMES = ("captures.csv", "captures.parquet", "figures.csv", "figures.parquet")


def _written(run, folder: Path, helper: bool) -> dict[str, bytes]:
    folder.mkdir()
    with open_tables(run.captures, folder, helper=helper) as writing:
        add_figure_table(writing, run)
        writing.finish()
    assert [p.name for p in writing.paths()] == list(NAMES)
    assert writing.helper is helper
    return {name: (folder / name).read_bytes() for name in NAMES}


def test_the_helper_writes_the_same_files_as_this_process(report_run, tmp_path, monkeypatch):
    """Several slices of each table (small slices), through the helper and here: the same
    bytes, CSV and Parquet."""
    monkeypatch.setattr(tables, "FIGURE_SLICE_ROWS", 29)
    monkeypatch.setattr(table_writing, "CAPTURE_SLICE_ROWS", 31)
    assert len(report_run.captures) > 100 and len(report_run.figures) > 100
    here = _written(report_run, tmp_path / "here", helper=False)
    helped = _written(report_run, tmp_path / "helper", helper=True)
    for name in NAMES:
        assert helped[name] == here[name], name
    figures = pd.read_csv(tmp_path / "helper" / "figures.csv")
    assert len(figures) == len(report_run.figures)


def test_categorical_text_columns_are_written_as_their_texts(report_run, tmp_path,
                                                         monkeypatch):
    """The capture table holds its text columns as categoricals; its files are the same
    bytes as those of the same table held as text (CSV and Parquet, here and helped)."""
    from dataclasses import replace

    from sweeprig.analysis.load import TEXT_CAPTURE_COLUMNS, captures_as_written

    monkeypatch.setattr(table_writing, "CAPTURE_SLICE_ROWS", 31)
    assert all(isinstance(report_run.captures[c].dtype, pd.CategoricalDtype)
               for c in TEXT_CAPTURE_COLUMNS)
    as_text = replace(report_run, captures=captures_as_written(report_run.captures))
    reference = _written(as_text, tmp_path / "text", helper=False)
    for helper in (False, True):
        written = _written(report_run, tmp_path / f"codes{helper}", helper=helper)
        for name in NAMES:
            assert written[name] == reference[name], (name, helper)


def test_slices_finished_here_once_this_process_waits_are_the_same(report_run, tmp_path,
                                                                   monkeypatch):
    """Once the report process only waits for its tables, it finishes their slices' text
    itself (here: from the first slice); the helper writes them as they come."""
    monkeypatch.setattr(tables, "FIGURE_SLICE_ROWS", 29)
    finished: list[int] = []  # rows of each figure slice sent finished
    real = table_writing._send

    def spy(pipe, message):
        if message[0] == "rows" and message[2] and "text" in message[1]:
            finished.append(len(message[1]))
        return real(pipe, message)

    here = _written(report_run, tmp_path / "here", helper=False)
    monkeypatch.setattr(table_writing, "_send", spy)
    folder = tmp_path / "helper"
    folder.mkdir()
    with open_tables(report_run.captures, folder, helper=True) as writing:
        writing._waiting.set()  # (as finish() does)
        add_figure_table(writing, report_run)
        writing.finish()
    assert writing.helper_failed is None
    assert sum(finished) == len(report_run.figures)  # every slice finished in this process
    assert len(finished) > 1
    assert {name: (folder / name).read_bytes() for name in NAMES} == here


def test_the_helper_imports_this_sweeprig_not_one_in_the_working_folder(report_run, tmp_path,
                                                                      monkeypatch):
    """A report run from a folder that holds another sweeprig (a checkout, an old copy):
    the helper still imports the one this process runs, so the two speak the same
    messages."""
    other = tmp_path / "elsewhere" / "sweeprig"
    other.mkdir(parents=True)
    (other / "__init__.py").write_text("raise ImportError('not this sweeprig')\n")
    monkeypatch.chdir(other.parent)
    here = _written(report_run, tmp_path / "here", helper=False)
    folder = tmp_path / "helper"
    folder.mkdir()
    with open_tables(report_run.captures, folder, helper=True) as writing:
        add_figure_table(writing, report_run)
        writing.finish()
    assert writing.helper and writing.helper_failed is None  # (not written by the thread)
    assert {name: (folder / name).read_bytes() for name in NAMES} == here


def test_a_large_run_s_report_uses_the_helper(report_run, tmp_path, monkeypatch):
    """write_report hands the tables to the helper from HELPER_CAPTURE_ROWS captures on,
    and its files are those of the report written here."""
    used: list[bool] = []
    real = TableWriting.__enter__

    def spy(self: TableWriting) -> TableWriting:
        used.append(self.helper)
        return real(self)

    monkeypatch.setattr(TableWriting, "__enter__", spy)
    monkeypatch.setattr(table_writing, "HELPER_CAPTURE_ROWS", 10**9)
    small = write_report(report_run, tmp_path / "small", plots=[])
    monkeypatch.setattr(table_writing, "HELPER_CAPTURE_ROWS", 1)
    large = write_report(report_run, tmp_path / "large", plots=[])
    assert used == [False, True]
    for a, b in zip(small.tables, large.tables, strict=True):
        assert a.read_bytes() == b.read_bytes(), a.name


def test_a_stored_run_s_capture_table_is_begun_before_its_figures(report_store, tmp_path,
                                                                   monkeypatch):
    """report_stored_run gives the helper the capture table, then reduces the run, then
    adds the figure table; the files are those of reduce_run and write_report."""
    from sweeprig.analysis import reduce as reduce_module
    from sweeprig.report import report_stored_run
    from sweeprig.store.sqlite import SqliteRunStore

    path, run_id = report_store
    with SqliteRunStore(path, create=False) as store:
        plain = write_report(reduce_module.reduce_run(store, run_id), tmp_path / "plain",
                             plots=[])
    order: list[str] = []
    add, reduce_loaded = TableWriting.add, reduce_module.reduce_loaded

    def add_noted(self: TableWriting, job: TableJob) -> None:
        order.append(f"add {next(iter(job.paths.values())).stem} helper={self.helper}")
        add(self, job)

    def reduce_noted(loaded: object) -> object:
        order.append("reduce")
        return reduce_loaded(loaded)

    monkeypatch.setattr(TableWriting, "add", add_noted)
    monkeypatch.setattr(reduce_module, "reduce_loaded", reduce_noted)
    monkeypatch.setattr(table_writing, "HELPER_CAPTURE_ROWS", 1)
    monkeypatch.setattr("sweeprig.report.plots.all_plots", lambda run: [])
    monkeypatch.setattr("sweeprig.memory.one_malloc_arena", lambda: order.append("one arena"))
    with SqliteRunStore(path, create=False) as store:
        run, files = report_stored_run(store, run_id, tmp_path / "early")
    # one malloc arena asked for first, before any thread converts or feeds a table
    assert order == ["one arena", "add captures helper=True", "reduce",
                     "add figures helper=True"]
    assert len(run.figures) > 100
    for a, b in zip(plain.tables, files.tables, strict=True):
        assert a.read_bytes() == b.read_bytes(), a.name


def test_a_stored_run_read_through_the_arrow_child_gives_the_same_report(
        report_store, tmp_path, monkeypatch):
    """With its points and readings read by the Arrow child (sweeprig.store.arrow_reader:
    slices of one point each, so the run counts as large), the report's tables and page are
    the files read by sqlite3 alone make; the child was used, and gave every point and
    reading."""
    import sweeprig.store.arrow_reader as arrow_reader
    import sweeprig.store.sql as sql
    from sweeprig.report import report_stored_run
    from sweeprig.store.sqlite import SqliteRunStore

    monkeypatch.setattr("sweeprig.report.plots.all_plots", lambda run: [])
    path, run_id = report_store
    with SqliteRunStore(path, create=False) as store:
        _run, plain = report_stored_run(store, run_id, tmp_path / "plain")
        readings = len(store.readings_frame(run_id))
        points = len(store.points_frame(run_id))
    made: list[int] = []
    original = arrow_reader.frame_of_table
    monkeypatch.setattr(arrow_reader, "frame_of_table",
                        lambda *a: made.append(a[0].num_rows) or original(*a))
    monkeypatch.setattr(sql, "READING_SLICE_POINTS", 1)
    with SqliteRunStore(path, create=False) as store:
        _run, arrow = report_stored_run(store, run_id, tmp_path / "arrow")
    assert made == [points, readings]
    for a, b in zip(plain.tables + plain.budgets, arrow.tables + arrow.budgets, strict=True):
        assert a.read_bytes() == b.read_bytes(), a.name


def test_the_report_command_begins_the_tables_before_it_imports_the_analysis(
        report_store, tmp_path):
    """``sweeprig report`` begins the run's tables (a large run's readings: a child
    process) before it imports pandas and the analysis, so the child starts meanwhile; the
    report is written as ever."""
    import subprocess
    import sys
    import textwrap

    path, run_id = report_store
    code = textwrap.dedent(f"""
        import sys
        from sweeprig.store.sql import SqlRunStoreCore
        begin = SqlRunStoreCore.begin_run_tables
        def noted(self, run_id):
            print("begun", "pandas" in sys.modules, "sweeprig.analysis.reduce" in sys.modules)
            return begin(self, run_id)
        SqlRunStoreCore.begin_run_tables = noted
        from sweeprig.cli.entry import main
        sys.argv = ["sweeprig", "report", "{run_id}", "--store", {str(path)!r},
                    "--out", {str(tmp_path / "out")!r}]
        main()
    """)
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          timeout=300)
    assert done.returncode == 0, done.stderr
    assert "begun False False" in done.stdout
    assert (tmp_path / "out" / "report.html").is_file()


def test_no_such_run_makes_no_folder(report_store, tmp_path):
    from sweeprig.report import report_stored_run
    from sweeprig.store.sqlite import SqliteRunStore

    path, _ = report_store
    with SqliteRunStore(path, create=False) as store, pytest.raises(StoreError) as err:
        report_stored_run(store, 999, tmp_path / "none")
    assert "no run 999" in err.value.what
    assert not (tmp_path / "none").exists()


@pytest.mark.parametrize("blocked", ["captures.csv", "figures.csv", "figures.parquet"])
def test_a_table_that_cannot_be_written_is_named(report_run, tmp_path, blocked):
    """A folder in a table file's place: the helper's CSV or this process' Parquet file,
    named in the same error as a file written here."""
    (tmp_path / blocked).mkdir()
    for helper in (True, False):
        with pytest.raises(StoreError) as err, open_tables(report_run.captures, tmp_path,
                                                           helper=helper) as writing:
            add_figure_table(writing, report_run)
            writing.finish()
        assert err.value.where == str(tmp_path / blocked), (helper, err.value)
        assert "cannot write the report file" in err.value.what


def _frames(count: int, on_second: object = None) -> Iterator[pd.DataFrame]:
    for i in range(count):
        if i == 1 and callable(on_second):
            on_second()
        yield pd.DataFrame({"a": [float(i)] * 1000, "b": ["x"] * 1000})


def test_a_helper_that_dies_is_said_and_nothing_waits(tmp_path):
    """The helper killed while the tables are written: finish() says so (its exit code),
    does not hang, and the helper is gone."""
    writing: TableWriting | None = None

    def kill() -> None:
        assert writing is not None and writing._process is not None
        os.kill(writing._process.pid, signal.SIGKILL)
        writing._process.wait()

    job = TableJob({"csv": tmp_path / "t.csv"}, _frames(50, on_second=kill))
    writing = TableWriting(helper=True, where=tmp_path)
    with pytest.raises(StoreError) as err, writing:
        writing.add(job)
        writing.finish()
    assert "helper process" in err.value.what and "stopped before" in err.value.what
    assert f"exit code -{int(signal.SIGKILL)}" in err.value.what
    assert writing._process is not None and writing._process.poll() is not None


def test_a_failing_report_stops_the_helper(tmp_path):
    """An error of the report itself inside the block: the helper is stopped at once, the
    feeding thread ends, the error is the report's own."""
    job = TableJob({"csv": tmp_path / "t.csv"}, _frames(10_000))
    writing = TableWriting(helper=True, where=tmp_path)
    with pytest.raises(KeyError), writing:
        writing.add(job)
        raise KeyError("the report's own failure")
    assert writing._process is not None and writing._process.poll() is not None
    assert writing._thread is not None and not writing._thread.is_alive()


def test_an_error_making_the_slices_is_raised_by_finish(tmp_path):
    """A slice that cannot be made (a bug in this process): finish() raises it, and the
    helper, told nothing more, ends."""
    def broken() -> Iterator[pd.DataFrame]:
        yield pd.DataFrame({"a": [1.0]})
        raise ZeroDivisionError("a slice")

    writing = TableWriting(helper=True, where=tmp_path)
    with pytest.raises(ZeroDivisionError), writing:
        writing.add(TableJob({"csv": tmp_path / "t.csv"}, broken()))
        writing.finish()
    assert writing._process is not None and writing._process.wait(timeout=30) is not None


def test_the_helper_reports_its_own_memory(tmp_path):
    """Its peak resident memory comes back with its answer (the report's benchmark prints
    it beside the report process' own)."""
    writing = TableWriting(helper=True, where=tmp_path)
    with writing:
        writing.add(TableJob({"csv": tmp_path / "t.csv"}, _frames(3)))
        writing.finish()
    assert writing.helper_peak_mb is not None and 10 < writing.helper_peak_mb < 2000
    assert pd.read_csv(tmp_path / "t.csv").shape == (3000, 2)


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="reads /proc")
def test_the_helper_s_arrow_memory_is_on_the_c_heap(tmp_path, monkeypatch):
    """Its pyarrow loads with the C library's allocator (sweeprig.memory), so its freed
    slices go back to the system."""
    monkeypatch.delenv("ARROW_DEFAULT_MEMORY_POOL", raising=False)
    writing = TableWriting(helper=True, where=tmp_path)
    with writing:
        assert writing._process is not None
        environ = Path(f"/proc/{writing._process.pid}/environ").read_bytes().split(b"\0")
        writing.add(TableJob({"csv": tmp_path / "t.csv"}, _frames(1)))
        writing.finish()
    assert b"ARROW_DEFAULT_MEMORY_POOL=system" in environ


def test_a_helper_that_cannot_start_leaves_the_tables_to_this_process(report_run, tmp_path,
                                                                       monkeypatch):
    """An interpreter that cannot run this sweeprig (a frozen or broken installation): the
    helper never says it is ready, and the feeding thread writes the same files itself."""
    monkeypatch.setattr(table_writing, "_HELPER_CODE", "import sys; sys.exit(3)")
    here = _written(report_run, tmp_path / "here", helper=False)
    (tmp_path / "fallback").mkdir()
    with open_tables(report_run.captures, tmp_path / "fallback", helper=True) as writing:
        add_figure_table(writing, report_run)
        writing.finish()
    assert writing.helper_failed is not None and "exit code 3" in writing.helper_failed
    for name in NAMES:
        assert (tmp_path / "fallback" / name).read_bytes() == here[name], name


def test_a_frozen_program_writes_the_tables_itself(tmp_path, monkeypatch):
    monkeypatch.setattr(table_writing.sys, "frozen", True, raising=False)
    assert not TableWriting(helper=True, where=tmp_path).helper
