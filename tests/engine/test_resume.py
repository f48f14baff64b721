"""Resume exactly once, one bench one run, and the bus log — against a simulated bench
served in the test process, with the engine in a separate ``sweeprig`` process where the
test must kill it."""

from __future__ import annotations

import json
import os
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import pytest
from typer.testing import CliRunner

from sweeprig.cli.main import app
from sweeprig.clock import VirtualClock
from sweeprig.engine.locks import BenchBusy, lock_file
from sweeprig.engine.session import (
    resume_run,
    run_sequence,
    served_bench_text,
    shipped_sequences_dir,
)
from sweeprig.errors import InputError
from sweeprig.sim.bench import resolve_description, start_sim_bench
from sweeprig.sim.faults import FaultSpec
from sweeprig.store.sqlite import SqliteRunStore
from sweeprig.transport.resources import lock_keys
from tests.support import points_stored

SLOW = Path(__file__).parent / "data" / "slow.toml"
QUICK = shipped_sequences_dir() / "demo" / "quick.toml"
SLOW_POINTS = 60


def _bench_file(sim, folder: Path) -> Path:
    path = folder / "bench.toml"
    path.write_text(served_bench_text(sim.resources), encoding="utf-8")
    return path




def _start_run(sequence: Path, bench: Path, store_path: Path) -> subprocess.Popen[str]:
    return subprocess.Popen(
        [sys.executable, "-m", "sweeprig", "run", str(sequence), "--bench", str(bench),
         "--store", str(store_path), "--quiet"],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=dict(os.environ),
    )


def _wait_for_points(proc: subprocess.Popen[str], store_path: Path, n: int) -> None:
    deadline = time.monotonic() + 60
    while points_stored(store_path) < n:
        assert proc.poll() is None, proc.communicate()
        assert time.monotonic() < deadline, "the run never got going"
        time.sleep(0.05)


def test_killed_run_is_interrupted_and_resumes_with_every_point_exactly_once(
        tmp_path, realtime_sim_bench):
    sim = realtime_sim_bench
    bench = _bench_file(sim, tmp_path)
    store_path = tmp_path / "s.sqlite"
    proc = _start_run(SLOW, bench, store_path)
    try:
        _wait_for_points(proc, store_path, 5)
        proc.send_signal(signal.SIGKILL)  # a power cut: no safe state is possible
    finally:
        if proc.poll() is None:
            proc.kill()
        proc.communicate(timeout=30)
    assert sim.instruments["rf"].output_on  # nothing in a killed process can switch it off
    safe = CliRunner().invoke(app, ["safe", "--bench", str(bench)])
    assert safe.exit_code == 0, safe.output
    for role in ("rf", "rf2", "lo"):
        assert sim.instruments[role].output_on is False
    assert sim.instruments["dc"].output_on is False
    with SqliteRunStore(store_path) as store:
        run = store.runs()[0]
        assert run.status == "interrupted"  # not "running": its process is gone
        stored_before = store.done_point_indices(run.id)
    assert 5 <= len(stored_before) < SLOW_POINTS

    outcome = resume_run(run.id, store_path=store_path)
    assert outcome.status == "complete", outcome.reason
    with SqliteRunStore(store_path) as store:
        points = store.points_frame(run.id)
        readings = store.readings_frame(run.id)
        events = store.events(run.id)
        assert store.run(run.id).status == "complete"
    assert sorted(points["point_index"]) == list(range(SLOW_POINTS))  # each exactly once
    assert readings.groupby("point_index").size().eq(1).all()  # one 'wanted' reading each
    assert readings["level_dbm"].notna().all()
    assert any(e.kind == "resume" for e in events)
    for role in ("rf", "lo"):
        assert sim.instruments[role].output_on is False


@pytest.fixture
def faulty_sim_bench():
    """A simulated bench whose analyzer reports one error (at its 30th command)."""
    fault = FaultSpec(role="sa", kind="error", at_command=30, code=-222,
                      text="Data out of range")
    description = resolve_description(None).model_copy(update={"faults": (fault,)})
    with start_sim_bench(description, clock=VirtualClock()) as sim:
        yield sim


def _aborted_run(tmp_path: Path, sim) -> tuple[Path, Path, int]:
    """A run of a copy of the quick sequence stopped by an instrument error (stop policy)."""
    sequence = tmp_path / "seq.toml"
    sequence.write_text(QUICK.read_text(encoding="utf-8")
                        + '\n[recovery]\non_error = "stop"\npoint_attempts = 1\n')
    bench = _bench_file(sim, tmp_path)
    store_path = tmp_path / "s.sqlite"
    outcome = run_sequence(sequence, bench, store_path=store_path)
    assert outcome.status == "aborted"
    return sequence, store_path, outcome.run_id


def test_resume_refuses_a_changed_sequence_file_naming_the_line(tmp_path, faulty_sim_bench):
    sequence, store_path, run_id = _aborted_run(tmp_path, faulty_sim_bench)
    text = sequence.read_text(encoding="utf-8")
    sequence.write_text(text.replace('settle = "20 ms"', 'settle = "30 ms"'))
    with pytest.raises(InputError) as err:
        resume_run(run_id, store_path=store_path)
    message = str(err.value)
    assert "seq.toml" in message and "line" in message and "settle" in message
    assert "--accept-changes" in message
    outcome = resume_run(run_id, store_path=store_path, accept_changes=True)
    assert outcome.status == "complete"


def test_resume_refuses_instruments_that_answer_differently(tmp_path, faulty_sim_bench):
    sim_bench = faulty_sim_bench
    _, store_path, run_id = _aborted_run(tmp_path, sim_bench)
    with sqlite3.connect(store_path) as db:
        db.execute("UPDATE instruments SET idn = 'Tarnwick Labs,TW-SA13,SA13-9999,0.9' "
                   "WHERE role = 'sa'")
    with pytest.raises(InputError) as err:
        resume_run(run_id, store_path=store_path)
    assert "sa: was" in str(err.value) and "SA13-9999" in str(err.value)
    for role in ("rf", "rf2", "lo"):
        assert sim_bench.instruments[role].output_on is False


def test_resume_of_a_complete_run_is_refused(tmp_path, sim_bench):
    bench = _bench_file(sim_bench, tmp_path)
    outcome = run_sequence(QUICK, bench, store_path=tmp_path / "s.sqlite")
    with pytest.raises(InputError, match="already complete"):
        resume_run(outcome.run_id, store_path=tmp_path / "s.sqlite")


def test_a_second_run_on_a_held_bench_is_refused_naming_the_holder(tmp_path,
                                                                   realtime_sim_bench):
    sim = realtime_sim_bench
    bench = _bench_file(sim, tmp_path)
    store_a = tmp_path / "a.sqlite"
    proc = _start_run(SLOW, bench, store_a)
    try:
        _wait_for_points(proc, store_a, 1)
        with pytest.raises(BenchBusy) as err:
            run_sequence(QUICK, bench, store_path=tmp_path / "b.sqlite")
        assert str(store_a) in str(err.value) and "in use" in str(err.value)
    finally:
        proc.send_signal(signal.SIGTERM)
        proc.communicate(timeout=60)
    assert not (tmp_path / "b.sqlite").exists() or points_stored(tmp_path / "b.sqlite") == 0


def test_lock_files_left_by_a_killed_run_hold_nothing(tmp_path, sim_bench, private_lock_dir):
    # A killed run leaves its lock files (the kernel has released the locks themselves):
    # whatever they say, the next run takes them, with no stale-lock guesswork.
    bench = _bench_file(sim_bench, tmp_path)
    private_lock_dir.mkdir(parents=True, exist_ok=True)
    for resource in sim_bench.resources.values():
        for key in lock_keys(resource):
            lock_file(key, private_lock_dir).write_text(json.dumps(
                {"run": "run 99 (store old.sqlite)", "pid": 1, "host": "elsewhere"}))
    outcome = run_sequence(QUICK, bench, store_path=tmp_path / "s.sqlite")
    assert outcome.status == "complete"
    rf_files = [lock_file(k, private_lock_dir) for k in lock_keys(sim_bench.resources["rf"])]
    assert not any(f.exists() for f in rf_files)  # taken, then deleted while held, at the end


def test_bus_log_records_every_exchange_and_prints_a_point(tmp_path, sim_bench):
    bench = _bench_file(sim_bench, tmp_path)
    store_path = tmp_path / "s.sqlite"
    outcome = run_sequence(QUICK, bench, store_path=store_path, bus_log=True)
    assert outcome.status == "complete"
    with SqliteRunStore(store_path) as store:
        entries = store.bus_log(outcome.run_id)
    assert {"rf", "lo", "sa", "dc"} <= {e.role for e in entries}
    assert any(e.sent.startswith("*IDN?") for e in entries)
    result = CliRunner().invoke(app, ["bus", str(outcome.run_id), "--store", str(store_path),
                                      "--point", "1", "--role", "sa"])
    assert result.exit_code == 0, result.output
    assert "CALC:MARK1:Y?" in result.output and " sa " in result.output
    missing = CliRunner().invoke(app, ["bus", str(outcome.run_id), "--store", str(store_path),
                                       "--point", "999"])
    assert missing.exit_code != 0 and "Traceback" not in missing.output
