"""A job a worker took just as the lab database failed (taken, its run never marked) goes
back to its queue as soon as the worker is idle again: procrastinate would never call it
stalled, since the worker that holds it is alive (real PostgreSQL, a served simulated bench)."""

from __future__ import annotations

from sweeprig.lab.queue import LabQueue
from sweeprig.lab.worker import BenchWorker


def test_a_job_taken_as_the_database_failed_goes_back_to_its_queue(pg_url, quick_copy,
                                                                   served_bench, tmp_path):
    path = served_bench("b1")
    with LabQueue(pg_url) as queue:
        entry = queue.submit(quick_copy, part="KX-2407", serial="U1")
    said: list[str] = []
    worker = BenchWorker(pg_url, path, name="b1", once=True, say=said.append, log_dir=tmp_path)
    worker._hold_bench()
    worker._register()
    job = worker.queue.run(worker.queue.jobs.fetch_job(worker._queues(), worker._worker_id))
    assert job is not None and int(job.task_kwargs["lab_run"]) == entry.id
    worker._recover()  # as after a StoreError in _take: a new worker id, the job still held
    assert worker.queue.get(entry.id).job_status == "doing"
    summary = worker.run()
    assert any("back in its queue" in line for line in said), said
    assert summary.done == [entry.id]


def test_a_job_of_its_bench_taken_by_a_killed_worker_is_handed_back_at_once(
        pg_url, quick_copy, served_bench, tmp_path):
    """The worker of bench b1 was killed after taking a job of b1's queue and before it
    marked the run: the next worker of b1 (its only worker) hands it back without waiting
    for procrastinate's stalled-worker delay."""
    path = served_bench("b1")
    with LabQueue(pg_url) as queue:
        entry = queue.submit(quick_copy, part="KX-2407", serial="U1", bench="b1")
        dead = int(queue.run(queue.jobs.register_worker()))  # the killed worker's id
        job = queue.run(queue.jobs.fetch_job([entry.queue_name], dead))
        assert job is not None and queue.get(entry.id).state == "queued"
    said: list[str] = []
    summary = BenchWorker(pg_url, path, name="b1", once=True, say=said.append,
                          log_dir=tmp_path).run()
    assert any("back in its queue" in line for line in said), said
    assert summary.done == [entry.id]
