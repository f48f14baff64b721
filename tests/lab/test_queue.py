"""The queue of runs: submission, priorities, cancelling, and a worker that takes only what
its bench can serve (real PostgreSQL, simulated benches on loopback sockets)."""

from __future__ import annotations

import psycopg
from typer.testing import CliRunner

from sweeprig.cli.main import app
from sweeprig.lab.queue import LabQueue
from sweeprig.lab.worker import BENCH_LOCK_SPACE, BenchWorker
from sweeprig.store.postgres import PostgresRunStore


def _lab(*args: str):
    return CliRunner().invoke(app, ["lab", *args])


def _job_statuses(url: str) -> list[str]:
    with psycopg.connect(url) as conn:
        return [r[0] for r in conn.execute("SELECT status::text FROM procrastinate_jobs "
                                           "ORDER BY id")]


def test_priority_then_age_cancel_and_reprioritise(pg_url, quick_copy):
    for serial, priority in (("U1", 0), ("U2", 5), ("U3", 0)):
        result = _lab("submit", str(quick_copy), "--serial", serial, "--lot", "L7",
                      "--priority", str(priority), "--db", pg_url)
        assert result.exit_code == 0, result.output
    with LabQueue(pg_url) as queue:
        assert [e.serial for e in queue.list()] == ["U2", "U1", "U3"]
    assert _lab("priority", "3", "9", "--db", pg_url).exit_code == 0
    assert _lab("cancel", "1", "--db", pg_url).exit_code == 0
    listing = _lab("queue", "--db", pg_url).output
    assert listing.index("U3") < listing.index("U2") and "U1" not in listing
    again = _lab("cancel", "1", "--db", pg_url)
    assert again.exit_code == 2 and "cancelled" in again.output
    with LabQueue(pg_url) as queue:
        assert [(e.serial, e.priority) for e in queue.list()] == [("U3", 9), ("U2", 5)]
        assert queue.get(1).state == "cancelled"


def test_a_sequence_failing_check_is_not_queued(pg_url, quick_copy, tmp_path):
    assert _lab("init", "--db", pg_url).exit_code == 0
    bad = tmp_path / "bad.toml"
    bad.write_text(quick_copy.read_text().replace('rf_power = "-20 dBm"', 'rf_power = "40 dBm"'))
    result = _lab("submit", str(bad), "--serial", "U1", "--db", pg_url)
    assert result.exit_code == 3 and "bad.toml" in result.output and "fix:" in result.output
    assert "Traceback" not in result.output
    with LabQueue(pg_url) as queue:
        assert queue.list(states=("queued", "running", "failed", "done", "cancelled")) == []
    assert _job_statuses(pg_url) == []


def test_a_worker_takes_what_its_bench_serves_and_records_the_bench(pg_url, quick_copy,
                                                                    served_bench, tmp_path):
    bench = served_bench("b1")
    # a bench whose LO source may give at most 5 dBm cannot serve the quick sequence (7 dBm at
    # the DUT plus a 2 dB cable): its limits refuse it, as `sweeprig check` would
    weak = served_bench("weak", edit=lambda t: t.replace('lo = "18 dBm"', 'lo = "5 dBm"'))
    with LabQueue(pg_url) as queue:
        for serial in ("U1", "U2"):
            queue.submit(quick_copy, part="KX-2407", serial=serial, lot="L7")
        queue.submit(quick_copy, part="KX-2407", serial="U3", lot="L7", bench="b1")
    said: list[str] = []
    idle = BenchWorker(pg_url, weak, name="weak", once=True, say=said.append,
                       log_dir=tmp_path).run()
    assert idle.done == [] and "can serve" in (idle.idle_reason or "")
    assert "limit" in idle.idle_reason.lower() or "lo" in idle.idle_reason
    assert _job_statuses(pg_url) == ["todo"] * 3  # nothing taken from the queue
    summary = BenchWorker(pg_url, bench, name="b1", once=True, say=said.append,
                          log_dir=tmp_path).run()
    assert sorted(summary.done) == [1, 2, 3]
    with LabQueue(pg_url) as queue, PostgresRunStore(pg_url) as store:
        for entry in queue.list(states=("done",)):
            info = store.run(entry.run_id)
            assert entry.bench == "b1" and "bench:b1" in info.tags and "lot:L7" in info.tags
            assert info.serial == entry.serial and info.status == "complete"
            assert info.points_done == info.points_total
    assert _job_statuses(pg_url) == ["succeeded"] * 3


def test_a_run_whose_files_changed_since_submission_is_refused(pg_url, quick_copy,
                                                               served_bench, tmp_path):
    bench = served_bench("b1")
    with LabQueue(pg_url) as queue:
        queue.submit(quick_copy, part="KX-2407", serial="U1")
    quick_copy.write_text(quick_copy.read_text().replace("-25 dBm", "-24 dBm"))
    summary = BenchWorker(pg_url, bench, name="b1", once=True, say=lambda _m: None,
                          log_dir=tmp_path).run()
    assert summary.failed == [1]
    with LabQueue(pg_url) as queue, PostgresRunStore(pg_url) as store:
        entry = queue.get(1)
        assert entry.state == "failed" and "changed since submission" in entry.message
        assert entry.run_id is None and store.runs() == []


def test_one_worker_per_bench(pg_url, served_bench, tmp_path):
    bench = served_bench("b1")
    first = BenchWorker(pg_url, bench, name="b1", once=True, say=lambda _m: None)
    try:
        first._hold_bench()
        result = _lab("worker", "--bench", str(bench), "--name", "b1", "--once",
                      "--db", pg_url)
        assert result.exit_code == 2 and "already serves bench 'b1'" in result.output
    finally:
        first.close()


def test_a_bench_is_free_for_the_next_worker_as_soon_as_one_stops(pg_url, served_bench):
    """A clean stop releases the bench's lock itself: closing the connection alone frees it
    only as its server process exits, a moment later, so the next worker could be refused
    meanwhile. Looked at from a session already open, at once after each stop."""
    bench = served_bench("b1")
    with psycopg.connect(pg_url, autocommit=True) as observer:
        for _ in range(5):
            worker = BenchWorker(pg_url, bench, name="b1", once=True, say=lambda _m: None)
            worker._hold_bench()
            worker.close()
            held = observer.execute("SELECT count(*) FROM pg_locks WHERE locktype = 'advisory' "
                                    "AND classid = %s AND granted",
                                    (BENCH_LOCK_SPACE,)).fetchone()[0]
            assert held == 0
