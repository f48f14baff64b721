"""The safe state is proven by reading it back, never assumed — checked from outside.

A simulated bench is served in this process; the engine (or a separate ``sweeprig``
process) drives it over real pyvisa/TCP, and afterwards *plain pyvisa* asks each instrument
its output state, as a tester at the bench would. Faults make the safe-state messages get
lost (``swallow``), make one instrument hang (``freeze``) or the whole server hang
(``freeze`` with ``whole_bench``): the run must then end ``unsafe`` with exit code 8, name
the instrument and what it still reports, and the outside look must confirm the report.
"""

from __future__ import annotations

import os
import subprocess
import sys
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

import pytest
import pyvisa
from typer.testing import CliRunner

from sweeprig.cli.main import app
from sweeprig.clock import VirtualClock
from sweeprig.engine.session import run_sequence, served_bench_text, shipped_sequences_dir
from sweeprig.errors import BENCH_UNSAFE_EXIT_CODE
from sweeprig.sim.bench import SimBench, resolve_description, start_sim_bench
from sweeprig.sim.faults import FaultSpec
from sweeprig.store.sqlite import SqliteRunStore

QUICK = shipped_sequences_dir() / "demo" / "quick.toml"
SOURCES = ("rf", "rf2", "lo")
#: I/O timeout of the bench files where an instrument hangs: short, so each of its three
#: attempts costs little test time, yet far above a loopback reply (well under a
#: millisecond) even on a loaded machine. Elsewhere the bench file's own 5 s.
TIMEOUT = "1 s"
#: The same where every instrument hangs (five instruments × three attempts each).
TIMEOUT_ALL_HUNG = "0.5 s"
OFF = "OUTP:STAT OFF"


@contextmanager
def served(*faults: FaultSpec) -> Iterator[SimBench]:
    description = resolve_description(None).model_copy(update={"faults": tuple(faults)})
    with start_sim_bench(description, clock=VirtualClock()) as sim:
        yield sim


def run_then_fault(sim: SimBench, bench: Path, store_path: Path, *faults: FaultSpec):
    """Run QUICK in this process; ``faults`` are planned once the last point is stored, so
    they hit the safe state's messages and nothing before."""
    left: dict[str, int] = {}

    def started(_run_id: int, total: int, _files: object) -> None:
        left["points"] = total

    def point_done(_result: object) -> None:
        left["points"] -= 1
        if left["points"] == 0:
            for fault in faults:
                sim.faults.add(fault)

    return run_sequence(QUICK, bench, store_path=store_path, on_start=started,
                        on_point=point_done)


def bench_file(sim: SimBench, folder: Path, timeout: str = "5 s") -> Path:
    text = served_bench_text(sim.resources).replace('timeout = "5 s"', f'timeout = "{timeout}"')
    assert f'timeout = "{timeout}"' in text
    path = folder / "bench.toml"
    path.write_text(text, encoding="utf-8")
    return path


def outside_look(sim: SimBench) -> dict[str, str]:
    """Each instrument's own answer, asked by plain pyvisa on a fresh connection."""
    rm = pyvisa.ResourceManager("@py")
    asked = {**{r: "OUTP:STAT?" for r in (*SOURCES, "dc")},
             "chamber": "THER:SETP?;:THER:CONT?"}
    answers = {}
    try:
        for role, query in asked.items():
            inst = rm.open_resource(sim.resources[role], read_termination="\n",
                                    write_termination="\n", timeout=2000)
            try:
                answers[role] = inst.query(query).strip()
            finally:
                inst.close()
    finally:
        rm.close()
    return answers


def run_cli(*args: object) -> subprocess.CompletedProcess[str]:
    """``sweeprig ...`` in a separate process (the engine outside the test process)."""
    return subprocess.run([sys.executable, "-m", "sweeprig", *map(str, args)],
                          capture_output=True, text=True, env=dict(os.environ), timeout=300)


def stored(store_path: Path, run_id: int = 1) -> tuple[str, str, list]:
    with SqliteRunStore(store_path, create=False) as store:
        info = store.run(run_id)
        return info.status, info.reason or "", store.events(run_id)


# -- (a) a normal end ----------------------------------------------------------------------


def test_normal_end_is_verified_and_every_instrument_reports_off(tmp_path):
    with served() as sim:
        bench = bench_file(sim, tmp_path)
        outcome = run_sequence(QUICK, bench, store_path=tmp_path / "s.sqlite")
        look = outside_look(sim)
    assert outcome.status == "complete", outcome.reason
    assert outcome.safe is not None and outcome.safe.ok
    assert {c.role for c in outcome.safe.checks} == {*SOURCES, "dc", "chamber"}
    assert all(c.verified for c in outcome.safe.checks)
    assert [look[r] for r in (*SOURCES, "dc")] == ["0"] * 4  # what the instruments say
    assert look["chamber"] == "25;1"  # idle set point, conditioning on
    status, _reason, events = stored(tmp_path / "s.sqlite")
    assert status == "complete"
    (event,) = [e for e in events if e.kind == "safe_state"]
    assert event.severity == "info" and "read back" in event.message


def test_a_lost_rf_off_is_sent_again_and_then_verified(tmp_path):
    with served() as sim:
        bench = bench_file(sim, tmp_path)
        outcome = run_then_fault(sim, bench, tmp_path / "s.sqlite",
                                 FaultSpec(role="rf", kind="swallow", match=OFF, max_count=1))
        look = outside_look(sim)
        assert len(sim.faults.log.events("rf")) == 1  # the first RF off was lost
    assert outcome.status == "complete", outcome.reason
    rf = next(c for c in outcome.safe.checks if c.role == "rf")
    assert rf.verified and rf.attempts >= 2
    assert look["rf"] == "0"


# -- (b) dropped commands --------------------------------------------------------------------


def test_dropped_rf_and_supply_off_end_the_run_unsafe_and_the_report_is_true(tmp_path):
    faults = (FaultSpec(role="rf", kind="swallow", match=OFF),
              FaultSpec(role="dc", kind="swallow", match=OFF))
    with served(*faults) as sim:
        bench = bench_file(sim, tmp_path)
        store_path = tmp_path / "s.sqlite"
        done = run_cli("run", QUICK, "--bench", bench, "--store", store_path, "--quiet",
                       "--no-report")
        look = outside_look(sim)
        resources = dict(sim.resources)
    assert done.returncode == BENCH_UNSAFE_EXIT_CODE, done.stdout + done.stderr
    out = " ".join(done.stdout.split())  # the terminal's words, whatever the wrapping
    assert "BENCH NOT PROVEN SAFE" in out and "bench left safe" not in out
    for role in ("rf", "dc"):
        assert f"role {role!r} ({resources[role]})" in out
    assert "still reports RF output ON" in out and "still reports output ON" in out
    assert "front panel" in out and "lab's" in out
    # From outside: the source and the supply really are still on; the others are off.
    assert (look["rf"], look["dc"]) == ("1", "1")
    assert (look["rf2"], look["lo"]) == ("0", "0")
    status, reason, events = stored(store_path)
    assert status == "unsafe"
    assert "BENCH NOT PROVEN SAFE" in reason and resources["rf"] in reason
    (event,) = [e for e in events if e.kind == "safe_state"]
    assert event.severity == "error"
    assert event.details["rf RF off"]["reported"] == "RF output ON"
    assert event.details["lo RF off"]["verified"] is True
    runs = CliRunner().invoke(app, ["runs", "--store", str(store_path)])
    assert "unsafe" in runs.output


def test_unsafe_run_can_be_resumed_and_keeps_its_history(tmp_path):
    from sweeprig.engine.session import resume_run

    with served() as sim:
        bench = bench_file(sim, tmp_path)
        store_path = tmp_path / "s.sqlite"
        first = run_then_fault(sim, bench, store_path,
                               FaultSpec(role="lo", kind="swallow", match=OFF, max_count=3))
        assert first.status == "unsafe"
        again = resume_run(first.run_id, store_path=store_path)  # the fault is spent
        look = outside_look(sim)
    assert again.status == "complete", again.reason
    assert look["lo"] == "0"
    status, _reason, events = stored(store_path)
    assert status == "complete"
    kinds = [(e.kind, e.severity) for e in events]
    assert ("safe_state", "error") in kinds and ("safe_state", "info") in kinds
    resume = next(e for e in events if e.kind == "resume")
    assert "ended unsafe" in resume.message


def test_a_refused_resume_with_an_unproven_bench_says_both(tmp_path):
    import sqlite3

    from sweeprig.engine.session import resume_run
    from sweeprig.errors import BenchUnsafeError

    with served() as sim:
        bench = bench_file(sim, tmp_path)
        store_path = tmp_path / "s.sqlite"
        first = run_then_fault(sim, bench, store_path,
                               FaultSpec(role="lo", kind="swallow", match=OFF, max_count=3))
        assert first.status == "unsafe"
        with sqlite3.connect(store_path) as db:  # as if the analyzer had been swapped
            db.execute("UPDATE instruments SET idn = 'Tarnwick Labs,TW-SA13,SA13-9999,0.9' "
                       "WHERE role = 'sa'")
        sim.faults.add(FaultSpec(role="lo", kind="swallow", match=OFF))
        with pytest.raises(BenchUnsafeError) as err:
            resume_run(first.run_id, store_path=store_path)
        look = outside_look(sim)
    text = str(err.value)
    assert err.value.exit_code == BENCH_UNSAFE_EXIT_CODE
    assert "SA13-9999" in text  # why the resume was refused
    assert "BENCH NOT PROVEN SAFE" in text and "role 'lo'" in text
    assert look["lo"] == "1"


# -- (c) a frozen instrument -----------------------------------------------------------------


def test_a_frozen_source_is_named_as_not_answering_and_is_really_still_on(tmp_path):
    with served() as sim:
        bench = bench_file(sim, tmp_path, TIMEOUT)
        outcome = run_then_fault(sim, bench, tmp_path / "s.sqlite",
                                 FaultSpec(role="lo", kind="freeze", match=OFF))
        assert sim.faults.frozen("lo")
        sim.faults.thaw()
        look = outside_look(sim)
        lo_resource = sim.resources["lo"]
    assert outcome.status == "unsafe"
    assert outcome.safe is not None
    assert [name for name, _m in outcome.safe.failed] == ["lo RF off"]
    message = outcome.safe.failed[0][1]
    assert lo_resource in message and "did not answer" in message
    assert look["lo"] == "1"  # the lost RF off never reached it: the report was true
    assert (look["rf"], look["rf2"], look["dc"]) == ("0", "0", "0")


# -- (d) a frozen whole server ---------------------------------------------------------------


@pytest.mark.slow  # five instruments × three attempts × the timeout
def test_a_frozen_server_leaves_nothing_claimed_safe(tmp_path):
    with served() as sim:
        bench = bench_file(sim, tmp_path, TIMEOUT_ALL_HUNG)
        outcome = run_then_fault(sim, bench, tmp_path / "s.sqlite",
                                 FaultSpec(role="rf", kind="freeze", match=OFF,
                                           whole_bench=True))
        sim.faults.thaw()
        look = outside_look(sim)
    assert outcome.status == "unsafe"
    assert outcome.safe is not None and outcome.safe.done == ()
    assert {c.role for c in outcome.safe.checks} == {*SOURCES, "dc", "chamber"}
    assert all(c.reported == "did not answer" for c in outcome.safe.checks)
    assert look["rf"] == "1" and look["dc"] == "1"
    status, reason, _events = stored(tmp_path / "s.sqlite")
    assert status == "unsafe" and "; BENCH NOT PROVEN SAFE: " in reason


# -- sweeprig safe ---------------------------------------------------------------------------


def _switch_on(sim: SimBench) -> None:
    rm = pyvisa.ResourceManager("@py")
    try:
        for role, cmd in (("rf", "OUTP:STAT ON"), ("lo", "OUTP:STAT ON"),
                          ("dc", "SOUR:VOLT 3.3;:OUTP:STAT ON")):
            inst = rm.open_resource(sim.resources[role], read_termination="\n",
                                    write_termination="\n", timeout=2000)
            try:
                inst.write(cmd)
                assert inst.query("*OPC?") == "1"
            finally:
                inst.close()
    finally:
        rm.close()


def test_safe_command_verifies_by_read_back(tmp_path, private_lock_dir):
    with served() as sim:
        bench = bench_file(sim, tmp_path)
        _switch_on(sim)
        done = run_cli("safe", "--bench", bench)
        look = outside_look(sim)
    assert done.returncode == 0, done.stdout + done.stderr
    assert "read back: rf RF off: RF output off" in done.stdout
    assert "verified by read-back" in done.stdout
    assert look["rf"] == look["lo"] == look["dc"] == "0"


def test_safe_command_switches_off_a_bench_a_run_would_refuse(tmp_path, private_lock_dir):
    # what refuses a run (a setting an earlier user left, an output protection tripped) must
    # never keep `sweeprig safe` from switching the rest off: RF left on with modulation on,
    # the supply's protection tripped
    with served() as sim:
        bench = bench_file(sim, tmp_path)
        _switch_on(sim)
        sim.instruments["lo"].put_value("modulation_on", True)
        sim.instruments["dc"].trip_protection()  # type: ignore[attr-defined]
        done = run_cli("safe", "--bench", bench)
        look = outside_look(sim)
    assert done.returncode == 0, done.stdout + done.stderr
    assert "verified by read-back" in done.stdout
    assert look["rf"] == look["lo"] == look["dc"] == "0"


def test_safe_command_never_claims_what_it_did_not_verify(tmp_path, private_lock_dir):
    with served(FaultSpec(role="rf", kind="swallow", match=OFF),
                FaultSpec(role="chamber", kind="freeze", match="THER:", max_count=1)) as sim:
        bench = bench_file(sim, tmp_path, TIMEOUT)
        _switch_on(sim)
        done = run_cli("safe", "--bench", bench)
        sim.faults.thaw()
        look = outside_look(sim)
        resources = dict(sim.resources)
    assert done.returncode == BENCH_UNSAFE_EXIT_CODE, done.stdout + done.stderr
    out = " ".join(done.stdout.split())
    assert "BENCH NOT PROVEN SAFE" in out and "verified by read-back on every" not in out
    assert f"role 'rf' ({resources['rf']})" in out and "still reports RF output ON" in out
    assert f"role 'chamber' ({resources['chamber']})" in out and "did not answer" in out
    assert look["rf"] == "1" and look["lo"] == "0" and look["dc"] == "0"


@pytest.mark.slow
def test_safe_command_against_a_stopped_server_process(tmp_path, private_lock_dir):
    """The whole server hung for real: ``sweeprig sim serve`` stopped with SIGSTOP."""
    import signal
    import time

    served_bench = tmp_path / "served.toml"
    server = subprocess.Popen(
        [sys.executable, "-m", "sweeprig", "sim", "serve", "--write-bench", str(served_bench)],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=dict(os.environ))
    try:
        deadline = time.monotonic() + 60
        while not served_bench.exists() or "[safe_state]" not in served_bench.read_text():
            assert server.poll() is None, server.communicate()
            assert time.monotonic() < deadline, "the simulated bench never started"
            time.sleep(0.05)
        text = served_bench.read_text(encoding="utf-8")
        # nothing answers a stopped process: a short timeout proves the same, sooner
        text = text.replace('timeout = "5 s"', 'timeout = "0.25 s"')
        served_bench.write_text(text, encoding="utf-8")
        server.send_signal(signal.SIGSTOP)
        try:
            done = run_cli("safe", "--bench", served_bench)
        finally:
            server.send_signal(signal.SIGCONT)
    finally:
        server.terminate()
        server.communicate(timeout=30)
    assert done.returncode == BENCH_UNSAFE_EXIT_CODE, done.stdout + done.stderr
    out = " ".join(done.stdout.split())
    assert "BENCH NOT PROVEN SAFE" in out
    for role in ("rf", "lo", "dc", "chamber"):
        assert f"role {role!r} (" in out
    assert "verified by read-back" not in out


def test_a_reply_left_over_from_a_query_cut_short_cannot_shift_the_read_back(tmp_path):
    """A stop signal can land between a query and its reply; the reply then waits in the
    socket. The safe state must still be proven (a fresh session on retry), not misread."""
    from sweeprig.engine.connect import open_bench
    from sweeprig.engine.safe import make_safe
    from sweeprig.formats.bench import load_bench
    from sweeprig.instruments import available_profiles

    with served() as sim:
        bench = load_bench(bench_file(sim, tmp_path, TIMEOUT), known_profiles=available_profiles())
        drivers = open_bench(bench, {"rf": "rf", "dc": "dc"})
        try:
            drivers.rf.set_value("output", True)
            drivers.rf.transport.write("*OPC?")  # its reply ("1") is never read: left over
            drivers.dc.transport.write("SYST:ERR?")
            outcome = make_safe(drivers, supply_safe_v=None, chamber_idle_c=None)
        finally:
            drivers.close()
        assert outcome.ok, outcome.failed
        look = outside_look(sim)
        assert look["rf"] == "0" and look["dc"] == "0", look


def test_safe_command_on_the_in_process_simulated_bench_says_there_is_nothing_to_do():
    """Its instruments end with the `run --sim` process: neither "safe" nor "unsafe" applies."""
    result = CliRunner().invoke(app, ["safe", "--bench",
                                      str(shipped_sequences_dir() / "benches" / "sim.toml")])
    assert result.exit_code == 2, result.output
    assert "in-process simulated bench" in result.output and "NOT PROVEN" not in result.output
    assert "Traceback" not in result.output


def test_an_unsafe_run_is_reported_unsafe_not_partial(tmp_path):
    from sweeprig.analysis.reduce import STATE_UNSAFE, reduce_run

    with served() as sim:
        bench = bench_file(sim, tmp_path)
        store_path = tmp_path / "s.sqlite"
        first = run_then_fault(sim, bench, store_path,
                               FaultSpec(role="lo", kind="swallow", match=OFF, max_count=3))
    assert first.status == "unsafe"
    with SqliteRunStore(store_path, create=False) as db:
        figures = reduce_run(db, first.run_id)
    assert figures.state == STATE_UNSAFE
    assert any("NOT proven safe" in note for note in figures.notes)
