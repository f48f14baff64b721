"""Benchmark: wall time of the quick demo sequence on the simulated bench, against the bench
time it simulates (the chamber soak passes in simulated time only).

Prints both and their ratio; moved here from the default suite, which asserts no wall times
(tests/engine/test_run_sim.py checks the same run's points, readings and safe state).

Run with ``pytest -m perf -s tests/perf/test_perf_run_sim.py``.
"""

from __future__ import annotations

import time
from pathlib import Path

import pytest

from sweeprig.engine.runner import Runner
from sweeprig.engine.session import run_sequence, shipped_sequences_dir
from sweeprig.plan.expand import Point
from sweeprig.sim.scpi.instrument import ScpiInstrument

QUICK = shipped_sequences_dir() / "demo" / "quick.toml"


@pytest.mark.perf
def test_print_quick_sequence_wall_time_on_the_simulated_bench(tmp_path: Path) -> None:
    outcome = run_sequence(QUICK, sim=True, store_path=tmp_path / "runs.sqlite")
    assert outcome.status == "complete", outcome.reason
    print(f"\nquick.toml on the simulated bench: {outcome.wall_elapsed_s:.2f} s of wall time for "
          f"{outcome.sim_elapsed_s:.0f} s of bench time "
          f"({outcome.sim_elapsed_s / max(outcome.wall_elapsed_s, 1e-9):.0f}× faster than the "
          f"bench; the default suite once required under 60 s of wall time)")


#: Points of the large simulated run (issue 14: 10k points in at most 20 s of wall time).
LARGE_RUN_POINTS = 10_000


def large_sequence(points: int) -> str:
    """quick.toml with its gain study swept over ``points`` RF frequencies (wanted output
    only) and no two-tone study: a long run on the simulated bench, one reading per point."""
    text = QUICK.read_text(encoding="utf-8")
    head, _, _ = text.partition('[[study]]\nname = "two-tone"')
    gain = 'rf_frequency = { start = "2.3 GHz", stop = "2.5 GHz", step = "100 MHz" }'
    assert gain in head
    head = head.replace(gain, f'rf_frequency = {{ start = "2.3 GHz", stop = "2.5 GHz", '
                              f'points = {points} }}')
    head = head.replace('read = ["wanted", "lo_at_if", "rf_at_if", "supply_current"]',
                        'read = ["wanted"]')
    spec_at = text.index("[[spec]]")
    return head + text[spec_at:].split("[[spec]]\nfigure = \"iip3_dbm\"")[0]


#: Issue 14: the large simulated run in at most this many seconds of wall time.
LARGE_RUN_TARGET_S = 20.0
#: Points of the large run's sequence planned alone, and evaluated by the model alone, for
#: the breakdown (a sample: their cost per point is flat along the sweep).
_SAMPLE_POINTS = 1_000


def _load() -> str:
    import os

    return f"load average {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores"


def _planning_ms_per_point(sequence: Path) -> tuple[float, float]:
    """(pre-flight of the whole sequence, s; planning one point's readings, ms) on the
    built-in simulated bench's bench file."""
    from sweeprig.engine.session import load_run_files
    from sweeprig.plan import iter_points

    start = time.perf_counter()
    files = load_run_files(sequence, None, sim=True)
    preflight_s = time.perf_counter() - start
    start = time.perf_counter()
    for _ in iter_points(files.sequence, files.bench, stop=_SAMPLE_POINTS):
        pass
    return preflight_s, (time.perf_counter() - start) / _SAMPLE_POINTS * 1e3


def _model_ms_per_point() -> float:
    """One model evaluation per point of the large run's sweep (the demo part, the LO 70 MHz
    below the RF and following it, −20 dBm RF, 7 dBm LO, the sim bench's −35/−45 dBc source
    harmonics; the served bench adds its cables' losses), ms."""
    import numpy as np

    from sweeprig.sim.mixer import OperatingPoint, ToneInput, load_part

    part = load_part("kx-2417")
    op = OperatingPoint()
    harmonics = (-35.0, -45.0)
    start = time.perf_counter()
    for f_rf in np.linspace(2.3e9, 2.5e9, _SAMPLE_POINTS).tolist():
        part.evaluate(op, ToneInput(f_rf - 70e6, 7.0, 0.0, harmonics),
                      [ToneInput(f_rf, -20.0, 0.0, harmonics)]).levels("if_port")
    return (time.perf_counter() - start) / _SAMPLE_POINTS * 1e3


class _CpuTime:
    """Processor time, s, by thread: the served simulated instruments' handling of messages
    by instrument class (their server threads run in this process: thread time around
    ``handle``, so the waits for the interpreter lock they share with the engine are not
    counted as their work, as wall time would), and the engine's thread inside
    :meth:`Runner.measure` (its points: engine, drivers, guard, pyvisa, sockets, store)."""

    def __init__(self) -> None:
        self.by_kind: dict[str, float] = {}
        self.points_s = 0.0

    def install(self, monkeypatch: pytest.MonkeyPatch) -> None:
        handle, measure = ScpiInstrument.handle, Runner.measure

        def timed_handle(instrument: ScpiInstrument, message: str) -> object:
            t0 = time.thread_time()
            try:
                return handle(instrument, message)
            finally:
                kind = type(instrument).__name__
                self.by_kind[kind] = self.by_kind.get(kind, 0.0) + time.thread_time() - t0

        def timed_measure(runner: Runner, point: Point) -> object:
            t0 = time.thread_time()
            try:
                return measure(runner, point)
            finally:
                self.points_s += time.thread_time() - t0

        monkeypatch.setattr(ScpiInstrument, "handle", timed_handle)
        monkeypatch.setattr(Runner, "measure", timed_measure)


@pytest.mark.perf
@pytest.mark.timeout(3600)  # a loaded machine takes well over the suite's 600 s
def test_print_large_simulated_run_wall_time(tmp_path: Path,
                                             monkeypatch: pytest.MonkeyPatch) -> None:
    """The large run end to end (file loading and pre-flight, then the run), against issue
    14's 20 s, and where its time goes: the pre-flight, the planner's readings per point
    (planned once, by the pre-flight, which keeps the points of a run this size for the
    run), the model's evaluation per point, the served instruments' handling of the
    messages (the model's evaluation inside it) and the engine side's points (the engine,
    pyvisa and the sockets, and the store), both in processor time of their own threads."""
    sequence = tmp_path / "large.toml"
    sequence.write_text(large_sequence(LARGE_RUN_POINTS), encoding="utf-8")
    cpu = _CpuTime()
    cpu.install(monkeypatch)
    start, cpu_start, process_start = time.perf_counter(), time.thread_time(), \
        time.process_time()
    outcome = run_sequence(sequence, sim=True, store_path=tmp_path / "runs.sqlite")
    total_s, engine_cpu_s = time.perf_counter() - start, time.thread_time() - cpu_start
    process_ms = (time.process_time() - process_start) / LARGE_RUN_POINTS * 1e3
    monkeypatch.undo()
    assert outcome.status == "complete", outcome.reason
    run_s = outcome.wall_elapsed_s
    verdict = "met" if total_s <= LARGE_RUN_TARGET_S else "MISSED"
    print(f"\n{LARGE_RUN_POINTS:,}-point simulated run (one reading per point): "
          f"{total_s:.1f} s of wall time with file loading and pre-flight, {run_s:.1f} s for "
          f"the run itself ({run_s / LARGE_RUN_POINTS * 1e3:.2f} ms per point); target "
          f"{LARGE_RUN_TARGET_S:.0f} s: {verdict} ({total_s / LARGE_RUN_TARGET_S:.1f}× the "
          f"target; one run, not repeated: {_load()})")
    preflight_s, plan_ms = _planning_ms_per_point(sequence)
    model_ms = _model_ms_per_point()
    point_ms = run_s / LARGE_RUN_POINTS * 1e3
    served_ms = {kind: s / LARGE_RUN_POINTS * 1e3 for kind, s in cpu.by_kind.items()}
    served_total_ms = sum(served_ms.values())
    engine_ms = cpu.points_s / LARGE_RUN_POINTS * 1e3
    print(f"  where it goes (processor time, thread time): the pre-flight {preflight_s:.1f} s "
          f"of wall time (it plans every point, {plan_ms:.3f} ms a point, and keeps them for "
          f"the run); a run point {point_ms:.2f} ms of wall time = the served instruments' "
          f"handling {served_total_ms:.2f} ms ("
          + ", ".join(f"{kind} {ms:.2f}" for kind, ms in
                      sorted(served_ms.items(), key=lambda kv: -kv[1]) if ms >= 0.005)
          + f"; the model's evaluation alone {model_ms:.3f}) + the engine side's points "
          f"{engine_ms:.2f} ms (engine, drivers, guard, pyvisa and sockets, store; "
          f"{engine_cpu_s / LARGE_RUN_POINTS * 1e3:.2f} ms with loading, pre-flight, set-up "
          f"and end spread over the points) + the rest "
          f"{point_ms - served_total_ms - engine_ms:.2f} ms (the server threads' sockets and "
          f"parsing outside handle, and the waits: the server threads share this process and "
          f"its interpreter lock, so their work and the engine's add up) ({_load()})")
    wall_ms = total_s / LARGE_RUN_POINTS * 1e3
    print(f"  the whole process (every thread, loading and pre-flight included): "
          f"{process_ms:.2f} ms of processor time a point against {wall_ms:.2f} ms of wall "
          f"time: one interpreter lock, so a point's wall time is at least the processor "
          f"time of the engine and the served instruments together")
