"""A run on a simulated analyzer whose replies come late: every late reply is met by a device
clear (sweeprig.transport.resync), recorded, and the point measured again; no reading takes a
reply meant for another query (each agrees with a clean run of the same sequence)."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from sweeprig.clock import VirtualClock
from sweeprig.engine.session import run_sequence, served_bench_text, shipped_sequences_dir
from sweeprig.sim.bench import resolve_description, start_sim_bench
from sweeprig.sim.faults import FaultSpec
from sweeprig.store.sqlite import SqliteRunStore

QUICK = shipped_sequences_dir() / "demo" / "quick.toml"
LATE = 4


def _run(tmp_path: Path, name: str, faults: tuple[FaultSpec, ...]):
    description = resolve_description(None).model_copy(update={"faults": faults})
    with start_sim_bench(description, clock=VirtualClock()) as sim:
        bench = tmp_path / f"{name}-bench.toml"
        text = served_bench_text(sim.resources).replace('timeout = "5 s"', 'timeout = "0.3 s"')
        bench.write_text(text, encoding="utf-8")
        outcome = run_sequence(QUICK, bench, store_path=tmp_path / f"{name}.sqlite")
        injected = [e for e in sim.faults.log.events() if e.kind == "late"]
    with SqliteRunStore(tmp_path / f"{name}.sqlite") as store:
        readings = store.readings_frame(outcome.run_id)
        events = store.events(outcome.run_id)
    return outcome, readings, events, injected


def test_late_marker_replies_are_cleared_recorded_and_never_misread(tmp_path: Path) -> None:
    late = FaultSpec(role="sa", kind="late", match="CALC:MARK1:Y?", rate=0.1, seed=3,
                     max_count=LATE, delay_s=2.0)
    outcome, readings, events, injected = _run(tmp_path, "late", (late,))
    assert outcome.status == "complete", outcome.reason
    assert len(injected) >= 2
    clears = [e for e in events if e.kind == "device_clear"]
    # every late reply is met by a clear; on a loaded machine an honest reply may also miss
    # the short I/O timeout and be cleared the same way (one more clear, never a misread)
    assert len(clears) >= len(injected) and all("back in step" in e.message for e in clears)
    assert not [e for e in events if e.kind == "reconnect"]
    _clean, ref, _e, _i = _run(tmp_path, "clean", ())
    key = ["point_index", "name"]
    got = readings.set_index(key)["level_dbm"].sort_index()
    want = ref.set_index(key)["level_dbm"].sort_index()
    assert list(got.index) == list(want.index)
    analyzer = readings.set_index(key)["port"].sort_index().isin(["if", "rf", "lo"])
    # a misread reply (an *OPC? "1", another marker's level, a frequency) would be off by
    # tens of dB; the simulator's noise moves these by far less than 1 dB
    np.testing.assert_allclose(got[analyzer], want[analyzer], atol=1.0)
