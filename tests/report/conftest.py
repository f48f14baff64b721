"""One compact run on the built-in simulated bench, reduced and written as a report, shared
by the report tests (about two seconds, once per session)."""

from __future__ import annotations

from pathlib import Path

import pytest

from sweeprig.analysis.reduce import RunFigures, reduce_run
from sweeprig.engine.session import run_sequence
from sweeprig.report import ReportFiles, write_report
from sweeprig.report.plots import Plot, all_plots
from sweeprig.store.sqlite import SqliteRunStore

DATA = Path(__file__).parent / "data"


@pytest.fixture(scope="session")
def report_store(tmp_path_factory) -> tuple[Path, int]:
    """The store of the shared run, and its run id (tests only read it)."""
    folder = tmp_path_factory.mktemp("report-run")
    outcome = run_sequence(DATA / "report-run.toml", sim=True, store_path=folder / "runs.sqlite",
                           log_dir=folder)
    assert outcome.status == "complete", outcome.reason
    return folder / "runs.sqlite", outcome.run_id


@pytest.fixture(scope="session")
def report_run(report_store) -> RunFigures:
    path, run_id = report_store
    with SqliteRunStore(path, create=False) as store:
        return reduce_run(store, run_id)


@pytest.fixture(scope="session")
def report_plots(report_run) -> list[Plot]:
    return all_plots(report_run)


@pytest.fixture(scope="session")
def report_files(report_run, report_plots, tmp_path_factory) -> ReportFiles:
    """The files ``sweeprig.report.write_report`` writes, with the session's plots (drawn
    once per session)."""
    return write_report(report_run, tmp_path_factory.mktemp("report-out") / "run",
                        plots=report_plots)


#: The corner grid the report must draw without dropping one (issue: up to 5 temperatures ×
#: 3 supplies × 3 LO drives).
CORNER_GRID = {"temperatures_c": (-40.0, 0.0, 25.0, 85.0, 105.0),
               "supplies_v": (3.0, 3.3, 3.6), "lo_powers_dbm": (-3.0, 0.0, 3.0)}


@pytest.fixture(scope="session")
def corner_grid() -> dict[str, tuple[float, ...]]:
    return CORNER_GRID


@pytest.fixture(scope="session")
def corner_run() -> RunFigures:
    """A synthetic run over :data:`CORNER_GRID` (three RF frequencies), reduced the way
    :func:`~sweeprig.analysis.reduce.reduce_run` reduces a stored run, with a gain and an
    isolation limit; no bench, no store (a narrow unit fixture)."""
    from sweeprig.analysis.synthetic import synthetic_run
    from tests.report.synthetic_runs import reduced_synthetic_run

    return reduced_synthetic_run(synthetic_run(18_000, seed=5, **CORNER_GRID),
                                 serial="SYN-5x3x3")
