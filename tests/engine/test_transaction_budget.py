"""The engine's transaction budget per point, on the served simulated bench over real
pyvisa/TCP, and the safety properties it must keep: each source proves it has settled
(``*OPC?``) before the analyzer sweeps, an instrument error is still caught on the point it
struck, and a setting cached before a reconnect or a device clear is sent again after it.

The budget (issue 14): every instrument's status once per point (``*ESR?``, joined to the
point's last query where the profile allows compound messages, or leading the next point's
settings message before the point is committed), the error queue read only
when the status says it holds something, settings and queries joined into one message where
the profile allows it, unchanged settings skipped, and the trace read for the floor only
when the reading is near it.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from sweeprig.clock import VirtualClock, WallClock
from sweeprig.engine.session import run_sequence, served_bench_text
from sweeprig.sim.bench import resolve_description, start_sim_bench
from sweeprig.sim.faults import FaultSpec
from sweeprig.store.base import BusRecord, EventRecord
from sweeprig.store.sqlite import SqliteRunStore

SEQUENCE = Path(__file__).parent / "data" / "budget.toml"
POINTS = 5
#: The points' RF frequencies, Hz (1.7-2.7 GHz in 5 points, LO 100 MHz below).
RF_HZ = [1.7e9 + i * 0.25e9 for i in range(POINTS)]


def _run(tmp_path: Path, faults: tuple[FaultSpec, ...] = (), timeout: str | None = None
         ) -> tuple[str, list[BusRecord], list[EventRecord], int]:
    """One run of ``SEQUENCE`` with a bus log; (status, bus log, events, points stored)."""
    description = resolve_description(None).model_copy(update={"faults": faults})
    with start_sim_bench(description, clock=VirtualClock()) as sim:
        resources = {r: v for r, v in sim.resources.items() if r != "simctl"}
        text = served_bench_text(resources)
        if timeout is not None:
            text = text.replace('timeout = "5 s"', f'timeout = "{timeout}"')
        bench = tmp_path / "bench.toml"
        bench.write_text(text, encoding="utf-8")
        outcome = run_sequence(SEQUENCE, bench, store_path=tmp_path / "s.sqlite",
                               bus_log=True)
    with SqliteRunStore(tmp_path / "s.sqlite", create=False) as db:
        log, events = db.bus_log(outcome.run_id), db.events(outcome.run_id)
        stored = len(db.points_frame(outcome.run_id))
    return outcome.status, log, events, stored


def _first(log: list[BusRecord], role: str, text: str, after: int = 0) -> int:
    return next(i for i, r in enumerate(log) if i >= after and r.role == role and text in r.sent)


def test_a_point_costs_at_most_four_exchanges_and_the_sources_settle_first(tmp_path):
    status, log, _, stored = _run(tmp_path)
    assert status == "complete" and stored == POINTS
    first = _first(log, "lo", f"SOUR:FREQ:CW {RF_HZ[1] - 100e6:.0f}")  # point 1 begins
    final = _first(log, "lo", f"SOUR:FREQ:CW {RF_HZ[-1] - 100e6:.0f}")  # the last point
    last = min(_first(log, role, "OUTP:STAT OFF", after=first) for role in ("lo", "rf", "dc"))
    # ... the safe state begins
    per_point = (final - first) / (POINTS - 2)
    # lo and rf: the point before's *ESR? and level state, the frequency and *OPC? in one
    # message; the supply: *ESR? with its current-limit state; the analyzer: one message
    # (sweep, *WAI, markers, overload flag, *ESR?): four, where there were fifteen.
    assert per_point <= 4.0, [r.sent for r in log[first:final]]
    # after the last sweep: its sources' and supply's status (each with its level or
    # current-limit state and its output protection), read before it is committed
    end = [r.sent for r in log[final:last]][4:]
    assert end == ["*ESR?;:STAT:QUES:COND?;:OUTP:PROT:TRIP?"] * 3, end
    assert not any("TRAC:DATA?" in r.sent for r in log[first:last])  # a clear reading
    assert not any(r.sent == "SYST:ERR?" for r in log[first:last])  # no errors: no reads
    for i in range(first, last):  # every sweep follows a settled *OPC? of both sources
        if log[i].role == "sa" and "INIT:IMM" in log[i].sent:
            before = [r for r in log[first:i] if r.role in ("lo", "rf")][-2:]
            assert all(r.sent.endswith("*OPC?") and r.received.split(";")[-1] == "1"
                       for r in before)


def test_an_instrument_error_is_caught_before_the_point_is_stored_and_measured_again(
        tmp_path):
    fault = FaultSpec(role="rf", kind="error", match=f"SOUR:FREQ:CW {RF_HZ[2]:.0f}",
                      max_count=1, code=-222, text="Data out of range")
    status, log, events, stored = _run(tmp_path, (fault,))
    assert status == "complete" and stored == POINTS
    errors = [e for e in events if e.kind == "error"]
    # The simulated fault enters the queue before its message runs (sweeprig.sim.faults), so
    # the *ESR? that leads point 2's settings reports it: it is charged to point 1, held
    # then, which is measured again, and point 2 after it.
    assert len(errors) == 1 and errors[0].point_index == 1, errors
    assert "-222" in errors[0].message and "'rf'" in errors[0].message
    assert f"SOUR:FREQ:CW {RF_HZ[2]:.0f}" in errors[0].message  # the block it followed
    # the queue was read because the status said so, on the same point
    struck = _first(log, "rf", f"SOUR:FREQ:CW {RF_HZ[2]:.0f}")
    read = _first(log, "rf", "SYST:ERR?", after=struck)
    assert _first(log, "rf", "*ESR?", after=struck) < read
    assert not any(r.role == "sa" and "INIT:IMM" in r.sent and i > struck
                   and i < read and _first(log, "lo", "SOUR:FREQ:CW", after=i) < read
                   for i, r in enumerate(log))  # no later point's sweep came in between
    # after the recovery every setting is sent again, the unchanged power included
    again = _first(log, "rf", "SOUR:FREQ:CW", after=read + 1)
    assert f"SOUR:FREQ:CW {RF_HZ[1]:.0f}" in log[again].sent  # point 1 again, then point 2
    assert "SOUR:POW" in log[again].sent and "OUTP:STAT ON" in log[again].sent
    assert _first(log, "rf", f"SOUR:FREQ:CW {RF_HZ[2]:.0f}", after=again) > again


def test_a_cached_setting_is_sent_again_after_a_reconnect(tmp_path):
    fault = FaultSpec(role="rf", kind="drop", match=f"SOUR:FREQ:CW {RF_HZ[3]:.0f}",
                      max_count=1)
    status, log, events, stored = _run(tmp_path, (fault,), timeout="0.3 s")
    assert status == "complete" and stored == POINTS
    assert any(e.kind == "reconnect" and e.point_index in (None, 3) for e in events), events
    dropped = _first(log, "rf", f"SOUR:FREQ:CW {RF_HZ[3]:.0f}")
    again = _first(log, "rf", "SOUR:FREQ:CW", after=dropped + 1)
    # the level was set at point 0 and never changed: after the reconnect it is sent again
    # (with point 2, held when the link dropped and so measured again, then point 3)
    assert "SOUR:POW" in log[again].sent
    assert _first(log, "rf", f"SOUR:FREQ:CW {RF_HZ[3]:.0f}", after=again) >= again
    sa_again = _first(log, "sa", "SENS:FREQ:CENT", after=dropped)
    assert sa_again < _first(log, "sa", "INIT:IMM", after=dropped)


def test_a_cached_setting_is_sent_again_after_a_device_clear(tmp_path):
    fault = FaultSpec(role="sa", kind="timeout", match="INIT:IMM", max_count=1)
    status, log, events, stored = _run(tmp_path, (fault,), timeout="0.3 s")
    assert status == "complete" and stored == POINTS
    assert any(e.kind == "device_clear" for e in events), events
    lost = _first(log, "sa", "INIT:IMM")
    # the analyzer's settings, unchanged since they were sent, go out again before the
    # point is swept again
    configure = _first(log, "sa", "SENS:FREQ:CENT", after=lost + 1)
    assert configure < _first(log, "sa", "INIT:IMM", after=lost + 1)
    assert "INP:ATT" in log[configure].sent


@pytest.mark.parametrize("virtual", [True, False], ids=["virtual time", "wall-clock time"])
def test_on_a_bench_served_with_its_clock_a_point_starts_where_the_last_one_ended(
        tmp_path, virtual):
    """With the simulator's control instrument (``simctl``: the engine follows its clock), a
    point's start is its predecessor's end when nothing went to the bench between them: in
    virtual time the simulator's time moves only with messages, so the clock is not asked
    again (two exchanges a point with the clock, its settle advance and its end, instead of
    three). A simulator on the wall clock (``sim serve --realtime``) is asked every time."""
    clock = VirtualClock() if virtual else WallClock()
    with start_sim_bench(resolve_description(None), clock=clock) as sim:
        bench = tmp_path / "bench.toml"
        bench.write_text(served_bench_text(dict(sim.resources)), encoding="utf-8")
        outcome = run_sequence(SEQUENCE, bench, store_path=tmp_path / "s.sqlite",
                               bus_log=True)
        assert outcome.status == "complete"
    with SqliteRunStore(tmp_path / "s.sqlite", create=False) as db:
        log = db.bus_log(outcome.run_id)
        points = db.points_frame(outcome.run_id).sort_values("point_index")
    first = _first(log, "lo", f"SOUR:FREQ:CW {RF_HZ[1] - 100e6:.0f}")
    final = _first(log, "lo", f"SOUR:FREQ:CW {RF_HZ[-1] - 100e6:.0f}")
    clock_reads = [r for r in log[first:final] if r.role == "simctl"]
    assert len(clock_reads) == (2 if virtual else 3) * (POINTS - 2), \
        [r.sent for r in clock_reads]
    starts, ends = points["sim_start_s"].to_numpy(), points["sim_end_s"].to_numpy()
    assert (ends > starts).all()
    if virtual:
        assert (starts[1:] == ends[:-1]).all()
    else:  # read again: time passed between them
        assert (starts[1:] > ends[:-1]).all()
