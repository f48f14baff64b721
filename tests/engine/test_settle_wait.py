"""The sources' settling time (:class:`sweeprig.engine.runner.SettleWait`) is waited out just
before the next message to any instrument, so the engine's own work of building that message
runs inside it:

* on the wall clock (a real bench, or a served simulated bench without its control
  instrument) the analyzer's sweep still leaves at least the settling time after both
  sources answered their completion queries (the bus log's times);
* on a virtual clock the whole settling time is slept at the same place among the point's
  exchanges as when it was slept at once after the sources: a differential run (the reference
  order patched in) stores the same readings and the same simulated times, bit for bit.
"""

from __future__ import annotations

from datetime import timedelta
from itertools import pairwise
from pathlib import Path

import pandas as pd
import pytest

from sweeprig.clock import VirtualClock, WallClock
from sweeprig.engine.runner import SettleWait
from sweeprig.engine.session import run_sequence, served_bench_text, shipped_sequences_dir
from sweeprig.sim.bench import start_sim_bench
from sweeprig.store.base import BusRecord
from sweeprig.store.sqlite import SqliteRunStore

BUDGET = Path(__file__).parent / "data" / "budget.toml"  # settle = "20 ms"
SETTLE_S = 0.020
QUICK = shipped_sequences_dir() / "demo" / "quick.toml"


def _wall_clock_bus_log(tmp_path: Path) -> tuple[list[BusRecord], list[int]]:
    """The bus log of a run of ``BUDGET`` on a served bench settling on the wall clock, and
    the positions of its sweeps in it."""
    with start_sim_bench(clock=VirtualClock()) as sim:
        resources = {r: v for r, v in sim.resources.items() if r != "simctl"}  # wall clock
        bench = tmp_path / "bench.toml"
        bench.write_text(served_bench_text(resources), encoding="utf-8")
        outcome = run_sequence(BUDGET, bench, store_path=tmp_path / "s.sqlite", bus_log=True)
    assert outcome.status == "complete", outcome.reason
    with SqliteRunStore(tmp_path / "s.sqlite", create=False) as db:
        log = db.bus_log(outcome.run_id)
    sweeps = [i for i, r in enumerate(log) if r.role == "sa" and "INIT:IMM" in r.sent]
    return log, sweeps


def test_the_sweep_leaves_at_least_the_settling_time_after_the_sources_answered(tmp_path):
    log, sweeps = _wall_clock_bus_log(tmp_path)
    assert len(sweeps) == 5
    for i in sweeps:
        syncs = [r for r in log[:i] if r.role in ("lo", "rf") and r.sent.endswith("*OPC?")][-2:]
        answered = max(r.time + timedelta(seconds=r.duration_s) for r in syncs)
        # 0.1 ms for mixing the log's calendar time with its interval timer
        assert (log[i].time - answered).total_seconds() >= SETTLE_S - 1e-4


def test_the_held_points_status_reads_go_out_inside_the_settling_time(tmp_path):
    """The supply's status after a point (the sources' leads their next settings) is a
    query that changes nothing that settles: it leaves once the sources have answered,
    without waiting the settling time out, so it costs the bench nothing."""
    log, sweeps = _wall_clock_bus_log(tmp_path)
    for before, i in pairwise(sweeps):  # points 1 to 4
        syncs = [r for r in log[before:i] if r.role in ("lo", "rf") and r.sent.endswith("*OPC?")]
        status = [r for r in log[before:i] if r.role == "dc" and r.sent.startswith("*ESR?")]
        assert len(syncs) == 2 and len(status) == 1, [r.sent for r in log[before:i]]
        answered = max(r.time + timedelta(seconds=r.duration_s) for r in syncs)
        left_after = (status[0].time - answered).total_seconds()
        assert -1e-4 <= left_after < SETTLE_S / 2, left_after


def _stored(tmp_path: Path, name: str) -> tuple[pd.DataFrame, pd.DataFrame]:
    store_path = tmp_path / f"{name}.sqlite"
    outcome = run_sequence(QUICK, sim=True, store_path=store_path)
    assert outcome.status == "complete", outcome.reason
    with SqliteRunStore(store_path, create=False) as db:
        points = db.points_frame(outcome.run_id).drop(columns=["wall_start", "wall_end"])
        readings = db.readings_frame(outcome.run_id)
    return points, readings


def test_on_a_virtual_clock_the_readings_and_times_are_those_of_settling_at_once(
        tmp_path, monkeypatch: pytest.MonkeyPatch):
    waited = _stored(tmp_path, "waited")

    def at_once(self: SettleWait, seconds: float) -> None:  # the reference order
        self.clock.sleep(seconds)

    monkeypatch.setattr(SettleWait, "start", at_once)
    reference = _stored(tmp_path, "reference")
    assert len(waited[1]) > 0
    # points (simulated start and end times included), readings (every figure, its extras)
    pd.testing.assert_frame_equal(waited[0], reference[0], check_exact=True)
    pd.testing.assert_frame_equal(waited[1], reference[1], check_exact=True)


class _Clock:
    """A clock that records its sleeps (wall or not, as its class says)."""

    def __init__(self) -> None:
        self.slept: list[float] = []

    def now(self) -> float:
        return 0.0

    def sleep(self, seconds: float) -> None:
        self.slept.append(seconds)


class _WallClock(_Clock, WallClock):
    pass


@pytest.mark.parametrize("clock_class", [_Clock, _WallClock])
def test_a_settle_is_waited_once_and_only_once_started(clock_class: type[_Clock]) -> None:
    clock = clock_class()
    settle = SettleWait(clock)  # type: ignore[arg-type]
    settle.wait()  # nothing started: nothing to wait
    assert clock.slept == []
    settle.start(SETTLE_S)
    settle.wait()
    settle.wait()  # the second message of the point waits no more
    assert len(clock.slept) == 1
    if isinstance(clock, WallClock):  # the time since the start counts
        assert 0.0 < SETTLE_S - clock.slept[0] < 0.01
    else:  # virtual time: the whole settling time
        assert clock.slept == [SETTLE_S]




def test_a_points_log_forcing_is_paid_while_the_bench_settles_for_the_next(
        tmp_path, monkeypatch: pytest.MonkeyPatch):
    """A durable store's point commits leave the log's forcing owed; the run loop pays it
    while the bench settles for the next point, so no point's commit waits for the disk."""
    from sweeprig.store import sqlite as sqlite_module

    monkeypatch.setattr(sqlite_module, "SYNC_EVERY_S", 0.0)  # every point finds it due
    forced: list[str] = []
    real = SqliteRunStore._fsync_log

    def recorded(self: SqliteRunStore, what: str) -> None:
        forced.append(what)
        real(self, what)

    monkeypatch.setattr(SqliteRunStore, "_fsync_log", recorded)
    with start_sim_bench(clock=VirtualClock()) as sim:
        resources = {r: v for r, v in sim.resources.items() if r != "simctl"}  # durable
        bench = tmp_path / "bench.toml"
        bench.write_text(served_bench_text(resources), encoding="utf-8")
        outcome = run_sequence(BUDGET, bench, store_path=tmp_path / "s.sqlite")
    assert outcome.status == "complete" and outcome.points_done == 5
    assert not any(what.startswith("writing point") for what in forced), forced
    assert forced.count("forcing the run store's log") == 4  # points 0-3, in 1-4's settle
