"""A worker whose bench had a run cut short (its worker killed) makes the bench safe, read
back, before it resumes anything (real PostgreSQL, a simulated bench on loopback sockets)."""

from __future__ import annotations

from sweeprig.clock import VirtualClock
from sweeprig.engine.session import served_bench_text
from sweeprig.lab.queue import LabQueue
from sweeprig.lab.worker import BenchWorker
from sweeprig.sim.bench import start_sim_bench


def test_a_worker_makes_its_bench_safe_before_resuming_a_cut_short_run(pg_url, quick_copy,
                                                                      tmp_path):
    with start_sim_bench(clock=VirtualClock()) as bench:
        path = tmp_path / "b1.toml"
        path.write_text(served_bench_text(bench.resources), encoding="utf-8")
        with LabQueue(pg_url) as queue:  # taken by a worker of b1 that was then killed
            entry = queue.submit(quick_copy, part="KX-2407", serial="U1")
            queue._set(entry.id, state="running", bench="b1", attempts=1)
        for role in ("rf", "lo"):  # as the killed run left them
            bench.instruments[role].handle("OUTP ON")
        assert bench.instruments["rf"].output_on
        said: list[str] = []
        checked: list[bool] = []
        worker = BenchWorker(pg_url, path, name="b1", once=True, say=said.append,
                             log_dir=tmp_path)
        real = worker._requeue_dead

        def requeue_dead() -> None:  # the first resume step: the bench is safe by then
            checked.append(not bench.instruments["rf"].output_on
                           and not bench.instruments["lo"].output_on)
            real()

        worker._requeue_dead = requeue_dead  # type: ignore[method-assign]
        summary = worker.run()
    assert worker.safe_at_start is not None and worker.safe_at_start.ok
    assert {"rf", "lo"} <= {c.role for c in worker.safe_at_start.checks}
    assert checked and checked[0], "resumed before the bench was safe"
    assert any("cut short" in line for line in said)
    assert summary.done == [entry.id]
