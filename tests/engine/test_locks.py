"""One instrument, one run, whatever the bench files call it; one run, one process.

Against simulated benches served in the test process (reached over real pyvisa/TCP), with the
holding run in a separate ``sweeprig`` process where the test must kill it."""

from __future__ import annotations

import os
import re
import signal
import sqlite3
import subprocess
import sys
import time
from datetime import UTC, datetime
from pathlib import Path

import pytest
from typer.testing import CliRunner

from sweeprig.cli.main import app
from sweeprig.clock import VirtualClock
from sweeprig.engine.locks import BenchBusy, BenchLock, identity_key
from sweeprig.engine.session import (
    resume_run,
    run_sequence,
    served_bench_text,
    shipped_sequences_dir,
)
from sweeprig.errors import InputError
from sweeprig.sim.bench import start_sim_bench
from sweeprig.store.runlock import RunBusy, hold_run_lock, run_lock_held
from sweeprig.store.sqlite import SqliteRunStore
from tests.support import points_stored

SLOW = Path(__file__).parent / "data" / "slow.toml"
QUICK = shipped_sequences_dir() / "demo" / "quick.toml"





def _start_run(sequence: Path, bench: Path, store_path: Path) -> subprocess.Popen[str]:
    return subprocess.Popen(
        [sys.executable, "-m", "sweeprig", "run", str(sequence), "--bench", str(bench),
         "--store", str(store_path), "--quiet", "--no-report"],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=dict(os.environ))


def _wait_for_points(proc: subprocess.Popen[str], store_path: Path, n: int) -> None:
    deadline = time.monotonic() + 60
    while points_stored(store_path) < n:
        assert proc.poll() is None, proc.communicate()
        assert time.monotonic() < deadline, "the run never got going"
        time.sleep(0.05)


def _respell(resource: str) -> str:
    """The same served instrument, named the way another bench file might name it (in a way
    pyvisa also opens: it reads the SOCKET keyword only in capitals)."""
    match = re.fullmatch(r"TCPIP0::127\.0\.0\.1::(\d+)::SOCKET", resource)
    assert match, resource
    return f"TCPIP::localhost::{match.group(1)}::SOCKET"


def _bench(folder: Path, name: str, resources: dict[str, str]) -> Path:
    path = folder / name
    path.write_text(served_bench_text(resources), encoding="utf-8")
    return path


class _Recorder:
    """Records every command a served instrument receives."""

    def __init__(self, sim) -> None:
        self.sent: dict[str, list[str]] = {}
        self._sim = sim
        self._originals = {}
        for role, inst in sim.instruments.items():
            self._originals[role] = inst.handle
            inst.handle = self._wrap(role, inst.handle)

    def _wrap(self, role, handle):
        def wrapped(message: str):
            self.sent.setdefault(role, []).append(message)
            return handle(message)
        return wrapped

    def restore(self) -> None:
        for role, handle in self._originals.items():
            self._sim.instruments[role].handle = handle


@pytest.mark.slow
def test_the_same_instruments_under_other_names_are_refused_then_free_when_killed(
        tmp_path, realtime_sim_bench, private_lock_dir):
    sim = realtime_sim_bench
    first = _bench(tmp_path, "first.toml", dict(sim.resources))
    other = _bench(tmp_path, "other.toml", {r: _respell(v) for r, v in sim.resources.items()})
    store_a, store_b = tmp_path / "a.sqlite", tmp_path / "b.sqlite"
    proc = _start_run(SLOW, first, store_a)
    try:
        _wait_for_points(proc, store_a, 2)
        result = CliRunner().invoke(app, ["run", str(QUICK), "--bench", str(other),
                                          "--store", str(store_b), "--quiet", "--no-report"])
        assert result.exit_code == BenchBusy.exit_code == 7, result.output
        assert "in use by" in result.output and str(store_a) in result.output
        assert "Traceback" not in result.output
        assert points_stored(store_b) == 0
        proc.send_signal(signal.SIGKILL)  # the holder dies without a word
        proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.communicate(timeout=60)
    # The kernel released its locks with the process: the other spelling takes them at once.
    respelled = [_respell(v) for v in sim.resources.values()]
    with BenchLock(respelled, "run B", private_lock_dir) as lock:
        assert len(lock.keys) == len(respelled)


@pytest.fixture
def twin_sim_bench():
    """A second simulated bench whose instruments answer *IDN? exactly like the first's."""
    with start_sim_bench(clock=VirtualClock()) as bench:
        yield bench


@pytest.mark.slow
def test_an_instrument_held_under_another_address_is_refused_after_idn_before_any_output(
        tmp_path, realtime_sim_bench, twin_sim_bench):
    # The twin's resources differ (other ports), its identities do not: to the locks it is the
    # same set of instruments, as one instrument reached through two interfaces would be.
    sim, twin = realtime_sim_bench, twin_sim_bench
    first = _bench(tmp_path, "first.toml", dict(sim.resources))
    second = _bench(tmp_path, "second.toml", dict(twin.resources))
    store_a = tmp_path / "a.sqlite"
    proc = _start_run(SLOW, first, store_a)
    recorder = _Recorder(twin)
    try:
        _wait_for_points(proc, store_a, 2)
        result = CliRunner().invoke(app, ["run", str(QUICK), "--bench", str(second),
                                          "--store", str(tmp_path / "b.sqlite"), "--quiet",
                                          "--no-report"])
    finally:
        recorder.restore()
        proc.send_signal(signal.SIGTERM)
        proc.communicate(timeout=60)
    assert result.exit_code == 7, result.output
    assert "in use by" in result.output and str(store_a) in result.output
    # Identification was all it got: not even its error queue was read.
    sent = [m for messages in recorder.sent.values() for m in messages]
    assert sent and all(m.strip().upper() == "*IDN?" for m in sent), sent
    for role in ("rf", "lo"):
        assert twin.instruments[role].output_on is False
    assert points_stored(tmp_path / "b.sqlite") == 0


def test_identity_keys_ignore_case_and_firmware_and_skip_units_without_serial() -> None:
    a = identity_key("Tarnwick Labs,TW-SG6,SG6-10001,1.0")
    assert a == identity_key(" TARNWICK LABS , tw-sg6 , sg6-10001 , 2.3")
    assert a != identity_key("Tarnwick Labs,TW-SG6,SG6-10002,1.0")
    assert identity_key("Tarnwick Labs,TW-SG6,0,1.0") is None
    assert identity_key("garbled") is None


def test_a_bench_lock_takes_all_or_none(tmp_path) -> None:
    held = BenchLock(["TCPIP::192.0.2.10::5025::SOCKET"], "run A", tmp_path).acquire()
    try:
        wanting = BenchLock(["GPIB::7::INSTR", "tcpip0::192.0.2.10::5025::socket"], "run B",
                            tmp_path)
        with pytest.raises(BenchBusy, match="run A"):
            wanting.acquire()
        assert wanting.keys == ()
        with BenchLock(["GPIB0::7::INSTR"], "run C", tmp_path) as free:  # B kept nothing
            assert free.keys
    finally:
        held.release()


# -- the run lock: liveness and resume ------------------------------------------------------------


def _aborted_sim_run(store_path: Path) -> int:
    """A --sim run of the slow sequence stopped (Ctrl-C) after three points."""
    count = 0

    def stop_after_three(_result) -> None:
        nonlocal count
        count += 1
        if count == 3:
            raise KeyboardInterrupt

    outcome = run_sequence(SLOW, sim=True, store_path=store_path, on_point=stop_after_three)
    assert outcome.status == "aborted"
    return outcome.run_id


def test_a_resume_of_a_run_another_process_holds_is_refused(tmp_path) -> None:
    store_path = tmp_path / "s.sqlite"
    run_id = _aborted_sim_run(store_path)
    assert not run_lock_held(store_path, run_id)
    holder = hold_run_lock(store_path, run_id, "a resume of run 1 (this test)")
    try:
        with pytest.raises(RunBusy) as err:
            resume_run(run_id, store_path=store_path)
        assert "this test" in str(err.value) and str(os.getpid()) in str(err.value)
        result = CliRunner().invoke(app, ["resume", str(run_id), "--store", str(store_path),
                                          "--quiet", "--no-report"])
        assert result.exit_code == 7 and "Traceback" not in result.output, result.output
        with SqliteRunStore(store_path) as store:
            assert store.run(run_id).status == "running" or \
                store.run(run_id).stored_status == "aborted"
            assert not [e for e in store.events(run_id) if e.kind == "resume"]
    finally:
        holder.release()
    outcome = resume_run(run_id, store_path=store_path)
    assert outcome.status == "complete", outcome.reason
    assert not run_lock_held(store_path, run_id)


def test_a_run_alive_on_another_host_by_its_heartbeat_is_not_resumed(tmp_path) -> None:
    store_path = tmp_path / "s.sqlite"
    run_id = _aborted_sim_run(store_path)
    with sqlite3.connect(store_path) as db:  # as a run on another machine sharing the store
        db.execute("UPDATE runs SET status = 'running', host = 'bench-pc-2', pid = 4242, "
                   "heartbeat_utc = ? WHERE id = ?",
                   (datetime.now(UTC).isoformat(), run_id))
    with pytest.raises(InputError, match=r"may still be running .*4242 on bench-pc-2"):
        resume_run(run_id, store_path=store_path)
    assert not run_lock_held(store_path, run_id)


PAUSED_RESUME = """
import sys
from sweeprig.engine.session import resume_run
def started(run_id, total, files):
    print("started", flush=True)
    sys.stdin.readline()  # hold here, run lock held and run recorded as running
outcome = resume_run(int(sys.argv[1]), store_path=sys.argv[2], on_start=started)
print(outcome.status, flush=True)
"""


def _status(store_path: Path, run_id: int) -> str:
    """The run's status as `sweeprig runs` and `sweeprig status` show it."""
    with SqliteRunStore(store_path, create=False) as store:
        return store.run(run_id).status


@pytest.mark.skipif(os.name == "nt", reason="kill -9 is POSIX")
def test_while_one_resume_runs_a_second_is_refused_and_a_kill_frees_the_run(tmp_path) -> None:
    store_path = tmp_path / "s.sqlite"
    run_id = _aborted_sim_run(store_path)
    first = subprocess.Popen([sys.executable, "-c", PAUSED_RESUME, str(run_id), str(store_path)],
                             stdin=subprocess.PIPE, stdout=subprocess.PIPE,
                             stderr=subprocess.PIPE, text=True)
    try:
        assert first.stdout is not None and first.stdout.readline().strip() == "started", \
            first.communicate()
        assert _status(store_path, run_id) == "running"  # its lock is held: alive
        second = CliRunner().invoke(app, ["resume", str(run_id), "--store", str(store_path),
                                          "--quiet", "--no-report"])
        assert second.exit_code == 7, second.output
        assert f"process {first.pid}" in second.output and "a resume of run" in second.output
        first.send_signal(signal.SIGKILL)
        first.communicate(timeout=60)
    finally:
        if first.poll() is None:
            first.kill()
            first.communicate(timeout=60)
    assert _status(store_path, run_id) == "interrupted"  # no process, whatever the store says
    outcome = resume_run(run_id, store_path=store_path)
    assert outcome.status == "complete", outcome.reason
    with SqliteRunStore(store_path) as store:
        assert sorted(store.points_frame(run_id)["point_index"]) == list(range(60))
        assert len([e for e in store.events(run_id) if e.kind == "resume"]) == 2


@pytest.mark.slow
def test_two_simultaneous_resumes_of_a_sim_run_exactly_one_proceeds(tmp_path) -> None:
    store_path = tmp_path / "s.sqlite"
    run_id = _aborted_sim_run(store_path)
    command = [sys.executable, "-m", "sweeprig", "resume", str(run_id), "--store",
               str(store_path), "--quiet", "--no-report"]
    procs = [subprocess.Popen(command, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                              text=True, env=dict(os.environ)) for _ in range(2)]
    results = [p.communicate(timeout=300) for p in procs]
    codes = sorted(p.returncode for p in procs)
    outputs = "\n".join(out + err for out, err in results)
    assert codes[0] == 0 and codes[1] != 0, outputs
    # Refused by the run lock while the other ran, or, if it came after, as complete.
    assert ("is being run by a resume" in outputs and codes[1] == 7) or \
        "already complete" in outputs, outputs
    assert "Traceback" not in outputs
    with SqliteRunStore(store_path) as store:
        assert len([e for e in store.events(run_id) if e.kind == "resume"]) == 1
        points = store.points_frame(run_id)
        assert store.run(run_id).status == "complete"
    assert sorted(points["point_index"]) == list(range(60))  # each exactly once
