"""The lab load and fault test (tests/lab/loadtest.py) at two sizes below the full one of
tests/perf/test_perf_lab.py: two benches served by their own processes (one whose limits
refuse half the runs), a worker process each, workers killed mid-run with SIGKILL and the
database server restarted once: every run complete exactly once, on a bench that can serve
it. The default suite runs the short one (four runs, one kill); ten runs and two kills run
with the benchmarks (``-m perf``)."""

from __future__ import annotations

import pytest

from tests.lab.loadtest import run_load


def _check(figures, runs: int, kills: int) -> None:
    print(figures.line())
    assert figures.complete == figures.runs == runs
    assert (figures.duplicated_points, figures.missing_points) == (0, 0)
    assert figures.wrong_bench == 0 and figures.orphan_runs == 0
    assert figures.kills == kills and figures.db_restarts == 1


def test_runs_survive_a_worker_kill_and_a_database_restart(pg_server, pg_url, tmp_path):
    figures = run_load(pg_url, pg_server, tmp_path, benches=2, runs=4, kills=1,
                       db_restart=True, timeout_s=150)
    _check(figures, 4, 1)


@pytest.mark.perf
def test_runs_survive_worker_kills_and_a_database_restart(pg_server, pg_url, tmp_path):
    figures = run_load(pg_url, pg_server, tmp_path, benches=2, runs=10, kills=2,
                       db_restart=True, timeout_s=150)
    _check(figures, 10, 2)
    assert figures.resumes >= 1  # a kill may fall between a run's last point and its end
