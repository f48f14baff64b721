"""sweeprig.report: a reduced run (:class:`~sweeprig.analysis.reduce.RunFigures`) as files.

:func:`write_report` writes the whole set into one folder: ``report.html`` (self-contained,
plots embedded), ``figures.json`` (the run, its limits, verdicts and summary; format 4), the
tidy tables ``figures.csv``/``.parquet`` (every figure with the point indices behind it: the
figure table ``figures.json`` refers to) and ``captures.csv``/``.parquet``, and
``budgets.csv`` and ``budget-terms.csv`` (every distinct shared part of an uncertainty
budget and every distinct budget line once; each figure's own noise inputs and u_c are
columns of the figure table). The pieces:
:mod:`~sweeprig.report.plots`, :mod:`~sweeprig.report.html`, :mod:`~sweeprig.report.tables`,
:mod:`~sweeprig.report.terminal`.
"""

from __future__ import annotations

import contextlib
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

from sweeprig.analysis.reduce import RunFigures

if TYPE_CHECKING:
    from sweeprig.report.plots import Plot
    from sweeprig.report.table_writing import TableWriting
    from sweeprig.store.base import RunStore
    from sweeprig.store.sql import RunTablesRead


@dataclass(frozen=True)
class ReportFiles:
    """What :func:`write_report` wrote: the HTML report, the figures JSON and the tables."""

    folder: Path
    html: Path
    figures_json: Path
    tables: tuple[Path, ...]
    #: The budget tables beside ``figures_json`` (shared parts, then budget lines).
    budgets: tuple[Path, ...] = ()

    @property
    def all(self) -> tuple[Path, ...]:
        return (self.html, self.figures_json, *self.tables, *self.budgets)


def write_report(run: RunFigures, folder: Path | str,
                 plots: Sequence[Plot] | None = None, *,
                 tables: TableWriting | None = None) -> ReportFiles:
    """Write the report files of ``run`` into ``folder`` (created if missing); ``plots``:
    the run's plots when already drawn (None: drawn here); ``tables``: the run's tables
    begun already in that folder (:func:`~sweeprig.report.tables.open_tables`, as
    :func:`report_stored_run` does: its capture table given, the figure table added here).

    Raises :class:`~sweeprig.errors.StoreError` naming the path when a file cannot be written.
    """
    from sweeprig.memory import release_freed_memory
    from sweeprig.report.budget_tables import BUDGET_TERMS_FILE, BUDGETS_FILE, figure_budgets
    from sweeprig.report.html import write_html
    from sweeprig.report.plots import all_plots
    from sweeprig.report.tables import (
        add_figure_table,
        make_folder,
        open_tables,
        summary_rows,
        write_figures_json,
    )

    out = make_folder(Path(folder))
    budgets = figure_budgets(run)
    with contextlib.ExitStack() as stack:
        if tables is None:
            tables = stack.enter_context(open_tables(run.captures, out))
        # a large run's tables are written by a helper process on the other core while the
        # rest of the report is made here (sweeprig.report.table_writing)
        add_figure_table(tables, run, budgets)
        summary = summary_rows(run)
        # the figure table (figures.csv) is written with the tables, with the same budgets
        figures = write_figures_json(run, out / "figures.json", budgets=budgets,
                                     rows_written=True, summary=summary)
        del budgets  # the tables' own reference is let go with their last slice
        # each stage's passing tables given back before the next one grows its own
        release_freed_memory()
        if plots is None:
            plots = all_plots(run)
            release_freed_memory()
        page = write_html(out / "report.html", run, summary, plots)
        tables.finish()
    return ReportFiles(out, page, figures, tuple(tables.paths()),
                       (out / BUDGETS_FILE, out / BUDGET_TERMS_FILE))


def report_stored_run(store: RunStore, run_id: int, folder: Path | str, *,
                      reduced: Callable[[RunFigures], None] | None = None,
                      tables: RunTablesRead | None = None
                      ) -> tuple[RunFigures, ReportFiles]:
    """Reduce run ``run_id`` of ``store`` and write its report into ``folder``: what
    ``sweeprig report`` and the end of ``sweeprig run`` do. A large run's capture table is
    written (by a helper process on the other core) while its figures are made.
    ``reduced``: called with the figures before the files are written (the store is still
    open). ``tables``: the run's points and readings begun already
    (``store.begin_run_tables``, as ``sweeprig report`` does before importing this; stopped
    here either way). StoreError when there is no such run (nothing made) or a file cannot
    be written.
    """
    from sweeprig.memory import one_malloc_arena

    one_malloc_arena()  # (before the threads that convert the tables and feed the helper)
    try:
        from sweeprig.analysis.reduce import load_run, reduce_loaded

        loaded = load_run(store, run_id, tables=tables)
    finally:
        if tables is not None:
            tables.stop()
    from sweeprig.memory import release_freed_memory
    from sweeprig.report.tables import make_folder, open_tables

    out = make_folder(Path(folder))
    with open_tables(loaded.captures, out) as writing:
        run = reduce_loaded(loaded)
        del loaded
        release_freed_memory()
        if reduced is not None:
            reduced(run)
        files = write_report(run, out, tables=writing)
    return run, files


__all__ = ["ReportFiles", "report_stored_run", "write_report"]
