"""One compact run on the built-in simulated bench, reduced and written as a report, shared
by the report tests (about two seconds, once per session)."""

from __future__ import annotations

from pathlib import Path

import pytest

from sweeprig.analysis.reduce import RunFigures, reduce_run
from sweeprig.engine.session import run_sequence
from sweeprig.report import ReportFiles
from sweeprig.report.html import write_html
from sweeprig.report.plots import Plot, all_plots
from sweeprig.report.tables import make_folder, summary_rows, write_figures_json, write_tables
from sweeprig.store.sqlite import SqliteRunStore

DATA = Path(__file__).parent / "data"


@pytest.fixture(scope="session")
def report_run(tmp_path_factory) -> RunFigures:
    folder = tmp_path_factory.mktemp("report-run")
    outcome = run_sequence(DATA / "report-run.toml", sim=True, store_path=folder / "runs.sqlite",
                           log_dir=folder)
    assert outcome.status == "complete", outcome.reason
    with SqliteRunStore(folder / "runs.sqlite", create=False) as store:
        return reduce_run(store, outcome.run_id)


@pytest.fixture(scope="session")
def report_plots(report_run) -> list[Plot]:
    return all_plots(report_run)


@pytest.fixture(scope="session")
def report_files(report_run, report_plots, tmp_path_factory) -> ReportFiles:
    """The files ``sweeprig.report.write_report`` writes, built from the same pieces (so the
    plots are drawn once per session; the CLI tests run write_report itself)."""
    out = make_folder(tmp_path_factory.mktemp("report-out") / "run")
    tables = write_tables(report_run, out)
    figures = write_figures_json(report_run, out / "figures.json")
    page = write_html(out / "report.html", report_run, summary_rows(report_run), report_plots)
    return ReportFiles(out, page, figures, tuple(tables))
