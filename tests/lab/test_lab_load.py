"""The lab load and fault test, short (the full one is tests/perf/test_perf_lab_load.py):
two benches served by their own processes (one whose limits refuse half the runs), a worker
process each, ten runs, two workers killed mid-run with SIGKILL and the database server
restarted once: every run complete exactly once, on a bench that can serve it."""

from __future__ import annotations

from tests.lab.loadtest import run_load


def test_runs_survive_worker_kills_and_a_database_restart(pg_server, pg_url, tmp_path):
    figures = run_load(pg_url, pg_server, tmp_path, benches=2, runs=10, kills=2,
                       db_restart=True, timeout_s=150)
    print(figures.line())
    assert figures.complete == figures.runs == 10
    assert (figures.duplicated_points, figures.missing_points) == (0, 0)
    assert figures.wrong_bench == 0 and figures.orphan_runs == 0
    assert figures.kills == 2 and figures.db_restarts == 1
    assert figures.resumes >= 1  # a kill may fall between a run's last point and its end
