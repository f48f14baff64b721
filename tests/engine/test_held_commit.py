"""A measured point is committed in the next point's settling time
(:meth:`sweeprig.engine.runner.Runner._store_held`), never later than a fault, a stop, a
chamber move or the end of the points:

* on the wall clock, point N's commit falls after point N+1's sources answered their
  completion queries and before N+1's sweep (the bus log's times against the commits');
  the last point is committed after the last sweep;
* a fault in point N+1 after point N's status was read leaves N stored; a reset that the
  status read shows measures N again before N+1;
* a stop after point N+1's sources answered keeps point N; one before it leaves N to
  ``sweeprig resume`` (no exchange goes out between a stop and the safe state);
* the points of one temperature are stored before the chamber moves to the next.
"""

from __future__ import annotations

from datetime import UTC, datetime, timedelta
from pathlib import Path

import pytest

from sweeprig.clock import VirtualClock
from sweeprig.engine.runner import Runner
from sweeprig.engine.session import run_sequence, served_bench_text
from sweeprig.sim.bench import resolve_description, start_sim_bench
from sweeprig.sim.faults import FaultSpec
from sweeprig.store.sqlite import SqliteRunStore

BUDGET = Path(__file__).parent / "data" / "budget.toml"  # five points, settle = "20 ms"
POINTS = 5


@pytest.fixture
def commits(monkeypatch: pytest.MonkeyPatch) -> list[tuple[str, int, datetime]]:
    """Every point commit and every stored event, in order: (what, point index, UTC time)."""
    seen: list[tuple[str, int, datetime]] = []
    write_point, log_event = SqliteRunStore.write_point, SqliteRunStore.log_event

    def recorded_write(self, run_id, point, readings, **kwargs):  # type: ignore[no-untyped-def]
        write_point(self, run_id, point, readings, **kwargs)
        seen.append(("commit", int(point.index), datetime.now(UTC)))

    def recorded_event(self, run_id, severity, kind, message, *args, **kwargs):  # type: ignore[no-untyped-def]
        seen.append((f"event {kind}", kwargs.get("point_index") or -1, datetime.now(UTC)))
        return log_event(self, run_id, severity, kind, message, *args, **kwargs)

    monkeypatch.setattr(SqliteRunStore, "write_point", recorded_write)
    monkeypatch.setattr(SqliteRunStore, "log_event", recorded_event)
    return seen


def _served_run(tmp_path: Path, faults: tuple[FaultSpec, ...], *, bus_log: bool = False,
                wall_clock: bool = False) -> tuple[str, list, int]:
    """``BUDGET`` on a served simulated bench with ``faults``: (status, bus log, faults hit).
    ``wall_clock``: the bench file leaves out the simulator's control instrument, so the run
    keeps the wall clock (settling is waited out for real)."""
    tmp_path.mkdir(exist_ok=True)
    description = resolve_description(None).model_copy(update={"faults": faults})
    with start_sim_bench(description, clock=VirtualClock()) as sim:
        resources = {r: v for r, v in sim.resources.items()
                     if not (wall_clock and r == "simctl")}
        bench = tmp_path / "bench.toml"
        bench.write_text(served_bench_text(resources), encoding="utf-8")
        outcome = run_sequence(BUDGET, bench, store_path=tmp_path / "s.sqlite", bus_log=bus_log)
        hit = len(sim.faults.log.events())
    log = []
    if bus_log:
        with SqliteRunStore(tmp_path / "s.sqlite", create=False) as db:
            log = db.bus_log(outcome.run_id)
    return outcome.status, log, hit


def test_a_point_is_committed_while_the_next_one_settles(tmp_path, commits):
    status, log, _ = _served_run(tmp_path, (), bus_log=True, wall_clock=True)
    assert status == "complete"
    committed = {index: at for what, index, at in commits if what == "commit"}
    assert sorted(committed) == list(range(POINTS))
    sweeps = [i for i, r in enumerate(log) if r.role == "sa" and "INIT:IMM" in r.sent]
    assert len(sweeps) == POINTS
    slack = timedelta(microseconds=100)  # the log's calendar time against its interval timer
    for point, i in enumerate(sweeps[1:], start=1):
        syncs = [r for r in log[:i] if r.role in ("lo", "rf") and r.sent.endswith("*OPC?")][-2:]
        answered = max(r.time + timedelta(seconds=r.duration_s) for r in syncs)
        assert answered - slack <= committed[point - 1] <= log[i].time + slack, point
    assert committed[POINTS - 1] >= log[sweeps[-1]].time


def test_a_fault_after_the_point_before_was_confirmed_leaves_that_point_stored(
        tmp_path, commits):
    # the analyzer's message of point 2's sweep, counted in a clean run first
    _, log, _ = _served_run(tmp_path / "clean", (), bus_log=True)
    sa = [r for r in log if r.role == "sa"]
    sweep_2 = [i for i, r in enumerate(sa) if "INIT:IMM" in r.sent][2] + 1  # counted from 1
    commits.clear()
    fault = FaultSpec(role="sa", kind="error", at_command=sweep_2, code=-222,
                      text="Data out of range")
    status, _, hit = _served_run(tmp_path / "faulty", (fault,))
    assert status == "complete" and hit == 1
    order = [(what, index) for what, index, _ in commits]
    assert ("event error", 2) in order, order
    # point 1 was confirmed by point 2's settings and committed before point 2's sweep failed
    assert order.index(("commit", 1)) < order.index(("event error", 2))
    assert ("event unconfirmed", 1) not in order
    assert sorted(i for w, i in order if w == "commit") == list(range(POINTS))


def test_a_source_reset_after_a_point_measures_that_point_again(tmp_path, commits):
    # rf resets itself just before point 3's settings: the *ESR? leading them says so
    fault = FaultSpec(role="rf", kind="reset", match=f"SOUR:FREQ:CW {1.7e9 + 3 * 0.25e9:.0f}",
                      max_count=1)
    status, _, hit = _served_run(tmp_path, (fault,))
    assert status == "complete" and hit == 1
    order = [(what, index) for what, index, _ in commits]
    assert ("event unconfirmed", 2) in order and ("event reset", 2) in order, order
    # point 2 is committed only after it was measured again
    assert order.index(("commit", 2)) > order.index(("event reset", 2))
    assert sorted(i for w, i in order if w == "commit") == list(range(POINTS))


def test_a_supply_reset_shown_by_the_bare_status_read_measures_the_point_again(
        tmp_path, commits):
    # the supply has no settings a point: its status goes as a bare *ESR? beside the
    # sources' messages; it resets itself just before the one that confirms point 2
    _, log, _ = _served_run(tmp_path / "clean", (), bus_log=True)
    dc = [r for r in log if r.role == "dc"]
    lo_3 = next(i for i, r in enumerate(log)
                if r.role == "lo" and f"SOUR:FREQ:CW {1.7e9 + 3 * 0.25e9 - 100e6:.0f}" in r.sent)
    count = sum(1 for r in log[:lo_3] if r.role == "dc") + 1  # the next dc message, from 1
    # (its current-limit state and its output protection too)
    assert dc[count - 1].sent == "*ESR?;:STAT:QUES:COND?;:OUTP:PROT:TRIP?"
    commits.clear()
    fault = FaultSpec(role="dc", kind="reset", at_command=count)
    status, _, hit = _served_run(tmp_path / "faulty", (fault,))
    assert status == "complete" and hit == 1
    order = [(what, index) for what, index, _ in commits]
    assert ("event unconfirmed", 2) in order and ("event reset", 2) in order, order
    assert order.index(("commit", 2)) > order.index(("event reset", 2))
    assert sorted(i for w, i in order if w == "commit") == list(range(POINTS))


@pytest.mark.parametrize(("where", "stored"), [
    # before point 3's sources answered: point 2's status is still owed, and nothing goes to
    # the instruments between a stop and the safe state (a hung one would hold it back), so
    # point 2 is left to resume
    ("_apply_sources", [0, 1]),
    # the common case: during the settling time or the sweep, point 2 was confirmed and
    # committed already
    ("_read", [0, 1, 2]),
])
def test_a_stop_keeps_the_point_before_only_once_its_status_was_read(
        tmp_path, monkeypatch: pytest.MonkeyPatch, where: str, stored: list[int]):
    original = getattr(Runner, where)

    def interrupted(self: Runner, point, *rest):  # type: ignore[no-untyped-def]
        if point.index == 3:
            raise KeyboardInterrupt
        return original(self, point, *rest)

    monkeypatch.setattr(Runner, where, interrupted)
    outcome = run_sequence(BUDGET, sim=True, store_path=tmp_path / "s.sqlite")
    assert outcome.status == "aborted"
    with SqliteRunStore(tmp_path / "s.sqlite", create=False) as db:
        assert sorted(db.points_frame(outcome.run_id)["point_index"]) == stored
        events = db.events(outcome.run_id)
    left = [e for e in events if e.kind == "unconfirmed"]
    assert [e.point_index for e in left] == ([] if 2 in stored else [2]), events
    assert all("resume" in e.message for e in left)


def test_a_temperature_s_points_are_stored_before_the_chamber_moves(
        tmp_path, monkeypatch: pytest.MonkeyPatch):
    sequence = tmp_path / "two-temperatures.toml"
    sequence.write_text(BUDGET.read_text(encoding="utf-8").replace(
        'settle = "20 ms"', 'settle = "20 ms"\ntemperature = ["25 degC", "35 degC"]\n'
        'soak = "1 s"'), encoding="utf-8")
    stored_at_moves: list[int] = []
    go = Runner._go_to_temperature

    def moving(self: Runner, temperature_c: float, point=None) -> None:  # type: ignore[no-untyped-def]
        stored_at_moves.append(len(self.store.done_point_indices(self.run_id)))
        go(self, temperature_c, point)

    monkeypatch.setattr(Runner, "_go_to_temperature", moving)
    outcome = run_sequence(sequence, sim=True, store_path=tmp_path / "s.sqlite")
    assert outcome.status == "complete", outcome.reason
    assert stored_at_moves == [0, POINTS]
