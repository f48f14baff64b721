"""Fault injection as a pyvisa client sees it, the fault log, and the plan's validation."""

from __future__ import annotations

import socket
import tomllib
from collections.abc import Iterator
from contextlib import contextmanager

import pytest
import pyvisa

from sweeprig.clock import VirtualClock
from sweeprig.errors import InputError
from sweeprig.sim.faults import FaultInjector, FaultPlan, FaultSpec, garble
from sweeprig.sim.instruments import SignalSource, SimControl
from sweeprig.sim.server import ServedBench, serve

TIMEOUT_MS = 2000
#: Timeout of a query whose reply is expected to be lost (a short wait keeps the test fast).
LOST_REPLY_TIMEOUT_MS = 200


@contextmanager
def _bench(faults: list[dict[str, object]]) -> Iterator[tuple[ServedBench, pyvisa.ResourceManager]]:
    clock = VirtualClock()
    plan = FaultPlan.from_mapping({"faults": faults})
    rm = pyvisa.ResourceManager("@py")
    try:
        with serve({"rf": SignalSource(clock), "simctl": SimControl(clock)}, faults=plan) as b:
            yield b, rm
    finally:
        rm.close()


def _open(rm: pyvisa.ResourceManager, bench: ServedBench,
          role: str = "rf") -> pyvisa.resources.MessageBasedResource:
    return rm.open_resource(bench.resources[role], read_termination="\n",
                            write_termination="\n", timeout=TIMEOUT_MS)


def _lost_reply(inst: pyvisa.resources.MessageBasedResource,
                message: str) -> pyvisa.errors.VisaIOError:
    """Send a query whose reply must not come; returns the client's I/O error."""
    inst.timeout = LOST_REPLY_TIMEOUT_MS
    try:
        with pytest.raises(pyvisa.errors.VisaIOError) as exc:
            inst.query(message)
    finally:
        inst.timeout = TIMEOUT_MS
    return exc.value


def test_timeout_swallows_one_reply_but_runs_the_command() -> None:
    with _bench([{"role": "rf", "kind": "timeout", "at_command": 2}]) as (bench, rm):
        rf = _open(rm, bench)
        assert rf.query("*IDN?").startswith("Tarnwick Labs")
        error = _lost_reply(rf, "FREQ 2e9;FREQ?")
        assert error.error_code == pyvisa.constants.StatusCode.error_timeout
        assert rf.query("FREQ?") == "2000000000"  # ran; the session is still in step
        (event,) = bench.faults.log.events()
        assert (event.role, event.kind, event.command_count, event.command) == (
            "rf", "timeout", 2, "FREQ 2e9;FREQ?")


def test_timeout_waits_for_a_message_with_a_reply() -> None:
    with _bench([{"role": "rf", "kind": "timeout", "at_command": 1}]) as (bench, rm):
        rf = _open(rm, bench)
        rf.write("FREQ 3e9")  # message 1: no reply to swallow
        _lost_reply(rf, "FREQ?")
        assert rf.query("FREQ?") == "3000000000"
        assert [e.command_count for e in bench.faults.log.events()] == [2]


def test_drop_closes_the_connection() -> None:
    with _bench([{"role": "rf", "kind": "drop", "at_command": 2}]) as (bench, rm):
        rf = _open(rm, bench)
        rf.query("*IDN?")
        _lost_reply(rf, "FREQ?")
        _lost_reply(rf, "*IDN?")  # the session is dead
        rf.close()
        again = _open(rm, bench)  # reconnecting works
        assert again.query("FREQ?") == "1000000000"
        assert [e.kind for e in bench.faults.log.events()] == ["drop"]


def test_drop_seen_on_a_raw_socket() -> None:
    with _bench([{"role": "rf", "kind": "drop", "at_command": 1}]) as (bench, _rm):
        sock = socket.create_connection(("127.0.0.1", bench.ports["rf"]), timeout=2.0)
        with sock:
            sock.sendall(b"*IDN?\n")
            assert sock.recv(64) == b""


def test_error_is_queued_and_the_message_still_runs() -> None:
    faults = [{"role": "rf", "kind": "error", "at_command": 1, "code": -221,
               "text": "Settings conflict"}]
    with _bench(faults) as (bench, rm):
        rf = _open(rm, bench)
        assert rf.query("FREQ?") == "1000000000"
        assert rf.query("SYST:ERR?") == '-221,"Settings conflict"'
        assert rf.query("SYST:ERR?") == '0,"No error"'
        assert int(rf.query("*ESR?")) & 16  # execution error bit
        (event,) = bench.faults.log.events()
        assert event.detail == "-221"


def test_garble_corrupts_the_reply_and_keeps_the_terminator() -> None:
    with _bench([{"role": "rf", "kind": "garble", "at_command": 1}]) as (bench, rm):
        rf = _open(rm, bench)
        reply = rf.query("*IDN?")
        assert reply != "Tarnwick Labs,TW-SG6,SG6-10001,1.0"
        assert len(reply) == len("Tarnwick Labs,TW-SG6,SG6-10001,1.0")
        with pytest.raises(ValueError):
            float(reply)
        assert rf.query("*IDN?") == "Tarnwick Labs,TW-SG6,SG6-10001,1.0"


def test_swallow_loses_the_message_silently_and_keeps_the_connection() -> None:
    with _bench([{"role": "rf", "kind": "swallow", "match": "outp:stat off",
                  "max_count": 1}]) as (bench, rm):
        rf = _open(rm, bench)
        rf.write("OUTP:STAT ON")
        rf.write("OUTP:STAT OFF")  # lost on the way: not run, nothing said
        assert rf.query("OUTP:STAT?") == "1"
        rf.write("OUTP:STAT OFF")  # max_count 1: this one goes through
        assert rf.query("OUTP:STAT?") == "0"
        assert rf.query("SYST:ERR?").startswith("0,")  # no trace in the error queue
        (event,) = bench.faults.log.events()
        assert (event.kind, event.command, event.command_count) == ("swallow",
                                                                     "OUTP:STAT OFF", 2)


def test_freeze_hangs_one_instrument_until_thawed() -> None:
    with _bench([{"role": "rf", "kind": "freeze", "match": "OUTP:STAT OFF"}]) as (bench, rm):
        rf, simctl = _open(rm, bench), _open(rm, bench, "simctl")
        rf.write("OUTP:STAT ON")
        rf.write("OUTP:STAT OFF")
        _lost_reply(rf, "*IDN?")
        _lost_reply(_open(rm, bench), "*IDN?")  # a new connection is accepted, not answered
        assert simctl.query("SIM:TIME?") == "0"  # the others still answer
        assert bench.faults.frozen("rf") and not bench.faults.frozen("simctl")
        bench.faults.thaw()
        fresh = _open(rm, bench)
        assert fresh.query("OUTP:STAT?") == "1"  # the message that froze it never ran


def test_freeze_of_the_whole_bench() -> None:
    with _bench([{"role": "rf", "kind": "freeze", "at_command": 1,
                  "whole_bench": True}]) as (bench, rm):
        rf, simctl = _open(rm, bench), _open(rm, bench, "simctl")
        _lost_reply(rf, "*IDN?")
        _lost_reply(simctl, "SIM:TIME?")
        (event,) = bench.faults.log.events()
        assert event.detail == "whole bench"
        bench.faults.thaw()
        assert _open(rm, bench, "simctl").query("SIM:TIME?") == "0"


def test_a_fault_added_while_serving_counts_from_then() -> None:
    with _bench([]) as (bench, rm):
        rf = _open(rm, bench)
        for _ in range(5):
            rf.query("*IDN?")
        # nothing planned: the server's quiet path still counts every message
        assert bench.faults.for_role("rf").command_count == 5
        bench.faults.add(FaultSpec(role="rf", kind="timeout", at_command=2))
        assert rf.query("*IDN?")
        _lost_reply(rf, "*IDN?")
        assert [e.command_count for e in bench.faults.log.events()] == [7]


def test_reset_restores_power_on_state() -> None:
    with _bench([{"role": "rf", "kind": "reset", "at_command": 3}]) as (bench, rm):
        rf = _open(rm, bench)
        rf.write("FREQ 3e9;:OUTP ON")
        assert rf.query("*ESR?") == "128"
        assert rf.query("*ESR?;:FREQ?;:OUTP?") == "128;1000000000;0"
        assert [e.kind for e in bench.faults.log.events()] == ["reset"]


def test_time_trigger_follows_the_simulated_clock() -> None:
    with _bench([{"role": "rf", "kind": "timeout", "at_time_s": 3600.0}]) as (bench, rm):
        rf, simctl = _open(rm, bench), _open(rm, bench, "simctl")
        assert rf.query("*IDN?")
        simctl.write("SIM:TIME:ADV 3599 S")
        assert rf.query("*IDN?")
        simctl.write("SIM:TIME:ADV 1 S")
        assert simctl.query("SIM:TIME?") == "3600"
        _lost_reply(rf, "*IDN?")
        (event,) = bench.faults.log.events()
        assert event.time_s == 3600.0 and event.command_count == 3


def test_rate_trigger_is_seeded_and_capped() -> None:
    def fired(seed: int) -> list[int]:
        spec = {"role": "rf", "kind": "error", "rate": 0.2, "seed": seed, "max_count": 5}
        injector = FaultInjector(FaultPlan.from_mapping({"faults": [spec]}))
        role = injector.for_role("rf")
        source = SignalSource(VirtualClock())
        for i in range(200):
            role.on_message(f"FREQ {i + 1}e6", 0.0, source)
        assert len(source.errors) == 5
        return [e.command_count for e in injector.log.events()]

    assert fired(1) == fired(1)
    assert fired(1) != fired(2)
    assert len(fired(3)) == 5


def test_rate_fault_log_accounts_for_every_fault_over_pyvisa() -> None:
    faults = [{"role": "rf", "kind": "error", "rate": 0.1, "seed": 11, "code": -200}]
    with _bench(faults) as (bench, rm):
        rf = _open(rm, bench)
        for i in range(100):
            rf.write(f"FREQ {i + 1}e6")
        queued = int(rf.query("SYST:ERR:COUN?"))
        events = bench.faults.log.events("rf")
        assert 0 < len(events) == queued
        assert all(e.kind == "error" and e.command.startswith("FREQ") for e in events)


def test_plan_from_toml() -> None:
    text = """
    [[faults]]
    role = "sa"
    kind = "garble"
    at_command = 40

    [[faults]]
    role = "dc"
    kind = "error"
    rate = 0.01
    seed = 7
    code = -200
    """
    plan = FaultPlan.from_mapping(tomllib.loads(text), where="bench.toml")
    assert [f.kind for f in plan.faults] == ["garble", "error"]
    assert plan.for_role("dc")[0].seed == 7


@pytest.mark.parametrize(
    ("fault", "needle"),
    [
        ({"role": "rf", "kind": "timeout"}, "exactly one trigger"),
        ({"role": "rf", "kind": "timeout", "at_command": 2, "rate": 0.1}, "exactly one trigger"),
        ({"role": "rf", "kind": "explode", "at_command": 1}, "faults.0.kind"),
        ({"role": "rf", "kind": "drop", "at_command": 1, "colour": "red"}, "faults.0.colour"),
        ({"role": "rf", "kind": "drop", "rate": 1.5}, "faults.0.rate"),
        ({"role": "rf", "kind": "drop", "at_command": 1, "max_count": 2}, "max_count"),
        ({"role": "rf", "kind": "drop", "match": "OUTP", "at_command": 1}, "exactly one"),
        ({"role": "rf", "kind": "drop", "match": ""}, "faults.0.match"),
        ({"role": "rf", "kind": "swallow", "match": "OUTP", "whole_bench": True},
         "whole_bench"),
    ],
)
def test_bad_plans_are_input_errors(fault: dict[str, object], needle: str) -> None:
    with pytest.raises(InputError) as exc:
        FaultPlan.from_mapping({"faults": [fault]}, where="bench.toml")
    assert needle in str(exc.value)
    assert str(exc.value).startswith("bench.toml")


def test_faults_for_unknown_roles_are_refused() -> None:
    plan = FaultPlan(faults=(FaultSpec(role="sa", kind="drop", at_command=1),))
    with pytest.raises(InputError):
        serve({"rf": SignalSource(VirtualClock())}, faults=plan)


def test_garble_keeps_length_and_never_makes_a_terminator() -> None:
    data = bytes(range(256)) * 4
    out = garble(data, seed=3)
    assert len(out) == len(data)
    assert b"\n" not in out and out != data
