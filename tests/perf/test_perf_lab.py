"""Benchmarks of the lab database (PostgreSQL), printing their figures:

* point writes with 8 writer processes into a server with fsync on (target ≥ 2,000 points/s);
* a lot report of 40 units × the demo characterisation sequence (target ≤ 20 s);
* the full load and fault test: 8 benches served by their own processes, 200 runs,
  ≥ 20 worker SIGKILLs and one database restart (every run complete once, no duplicated or
  missing point, none on a wrong bench; runs/min and points/s printed).

Run with ``pytest -m perf -s tests/perf/test_perf_lab.py``.
"""

from __future__ import annotations

import multiprocessing
import os
import shutil
import tempfile
import time
from datetime import UTC, datetime
from pathlib import Path

import pytest

from sweeprig.store.postgres import PostgresRunStore
from sweeprig.store.testserver import start_server
from tests.lab.loadtest import run_load

WRITERS = 8
POINTS_PER_WRITER = 500
READINGS_PER_POINT = 4


def _cpu_s(pid: int) -> float | None:
    """Processor time (user + system) process ``pid`` has used so far, s; None where
    ``/proc`` does not show it (not Linux, or a server out of reach)."""
    try:
        with open(f"/proc/{pid}/stat", encoding="ascii") as stat:
            fields = stat.read().rsplit(")", 1)[1].split()
    except OSError:
        return None
    return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")  # proc(5)


def _writer(url: str, n: int, start, done) -> None:  # type: ignore[no-untyped-def]
    from sweeprig.store.base import PointRecord, ReadingRecord

    store = PostgresRunStore(url)
    run_id = store.create_run(sequence_path="bench.toml", sequence_text="x", status="running")
    server_pid = int(store._read("SELECT pg_backend_pid()")[0][0])
    now = datetime.now(UTC)
    readings = [ReadingRecord(f"r{k}", "wanted", "if", 70e6, -20.0 - k, -95.0, 1, 1, 1e6, 1e3,
                              10.0, 0.0, 1) for k in range(READINGS_PER_POINT)]
    start.wait()
    cpu0, server0 = time.process_time(), _cpu_s(server_pid)
    for index in range(n):
        store.write_point(run_id, PointRecord(index, "gain", rf_freq_hz=2.4e9, lo_freq_hz=2.33e9,
                                              wall_start=now, wall_end=now), readings)
    server1 = _cpu_s(server_pid)
    server = None if server0 is None or server1 is None else server1 - server0
    done.put((run_id, time.process_time() - cpu0, server))
    store.close()


@pytest.fixture(scope="module")
def durable_server():
    folder = Path(tempfile.mkdtemp(prefix="sweeprig-pg-perf-"))
    folder.chmod(0o711)
    server = start_server(folder / "cluster", durable=True)
    yield server
    server.stop("immediate")
    shutil.rmtree(folder, ignore_errors=True)


@pytest.mark.perf
def test_print_point_writes_per_second_with_8_writers(durable_server) -> None:
    url = durable_server.create_database("perf_writes")
    PostgresRunStore(url).close()
    ctx = multiprocessing.get_context("spawn")
    start, done = ctx.Barrier(WRITERS + 1), ctx.Queue()
    procs = [ctx.Process(target=_writer, args=(url, POINTS_PER_WRITER, start, done))
             for _ in range(WRITERS)]
    for p in procs:
        p.start()
    start.wait()
    t0 = time.perf_counter()
    results = [done.get(timeout=600) for _ in procs]
    elapsed = time.perf_counter() - t0
    for p in procs:
        p.join()
    total = WRITERS * POINTS_PER_WRITER
    runs = [r[0] for r in results]
    with PostgresRunStore(url) as store:
        assert sum(len(store.done_point_indices(r)) for r in runs) == total
    rate = total / elapsed
    writer_ms = sum(r[1] for r in results) / total * 1e3
    server = [r[2] for r in results]
    server_ms = None if None in server else sum(server) / total * 1e3
    print(f"\n{WRITERS} writers, {total} points of {READINGS_PER_POINT} readings each, one "
          f"transaction per point, fsync on: {elapsed:.2f} s, {rate:,.0f} points/s "
          f"(target ≥ 2,000: {'met' if rate >= 2000 else 'MISSED'}; load "
          f"{os.getloadavg()[0]:.1f} on {os.cpu_count()} cores)")
    if server_ms is None:
        print(f"processor time per point: writer {writer_ms:.3f} ms; server n/a")
    else:  # what the rate would be with every core for this alone: an estimate, no target
        print(f"processor time per point: writer {writer_ms:.3f} ms + server "
              f"{server_ms:.3f} ms (its session); {os.cpu_count()} cores for this alone "
              f"would give about {os.cpu_count() / (writer_ms + server_ms) * 1e3:,.0f} "
              "points/s")


@pytest.mark.perf
def test_print_lot_report_time_for_40_units(durable_server, tmp_path) -> None:
    import psycopg

    from sweeprig.analysis.reduce import reduce_run
    from sweeprig.engine.session import run_sequence, shipped_sequences_dir
    from sweeprig.lab.figures import keep_figures
    from sweeprig.lab.lot import RunFilter, lot_report, write_lot_report
    from sweeprig.store.copy import copy_run
    from sweeprig.store.sqlite import SqliteRunStore

    demo = shipped_sequences_dir() / "demo" / "kx2417-characterisation.toml"
    bench_store = tmp_path / "bench.sqlite"
    outcome = run_sequence(demo, sim=True, store_path=bench_store)
    assert outcome.status == "complete", outcome.reason
    with SqliteRunStore(bench_store, create=False) as src:  # as the worker does at the end
        t_reduce = time.perf_counter()
        assert keep_figures(src, outcome.run_id, reduce_run(src, outcome.run_id))
        t_reduce = time.perf_counter() - t_reduce
    url = durable_server.create_database("perf_lot")
    with SqliteRunStore(bench_store, create=False) as src, PostgresRunStore(url) as dst:
        for unit in range(40):
            copied = copy_run(src, dst, outcome.run_id)
            with psycopg.connect(url, autocommit=True) as conn:  # one unit of lot L1 each
                conn.execute("UPDATE runs SET serial = %s, tags_json = %s WHERE id = %s",
                             (f"U{unit:02d}", '["lot:L1"]', copied.target_id))
    reduced: list[int] = []
    t0 = time.perf_counter()
    with PostgresRunStore(url) as store:
        report = lot_report(store, RunFilter(lot="L1"), on_reduce=reduced.append)
    write_lot_report(report, tmp_path / "lot")
    elapsed = time.perf_counter() - t0
    print(f"\nlot report of {len(report.units)} units × {demo.name} "
          f"({outcome.points_done} points each, {len(report.rows)} figure rows), figures kept "
          f"with each run when it finished: {elapsed:.1f} s (target ≤ 20 s); reducing one "
          f"unit's run takes {t_reduce:.1f} s, done once when it finishes")
    print(f"lot report target ≤ 20 s: {'met' if elapsed <= 20 else 'MISSED'} (load "
          f"{os.getloadavg()[0]:.1f})")
    assert len(report.units) == 40 and reduced == []


@pytest.mark.perf
def test_print_full_lab_load_with_kills_and_a_restart(pg_server, pg_url, tmp_path) -> None:
    figures = run_load(pg_url, pg_server, tmp_path, benches=8, runs=200, kills=20,
                       db_restart=True, timeout_s=3600)
    print("\nfull lab load: " + figures.line())
    assert figures.complete == figures.runs == 200
    assert (figures.duplicated_points, figures.missing_points) == (0, 0)
    assert figures.wrong_bench == 0 and figures.orphan_runs == 0
    assert figures.kills >= 20 and figures.db_restarts == 1
