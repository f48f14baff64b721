"""``sweeprig night``: a newcomer queues three parts for a night on the simulated bench."""

from __future__ import annotations

import json
import sys
from pathlib import Path

import pytest
from typer.testing import CliRunner

from sweeprig.cli import night_cmd
from sweeprig.cli.main import app
from sweeprig.engine.session import shipped_sequences_dir
from sweeprig.errors import InstrumentError
from sweeprig.store.sqlite import SqliteRunStore

QUICK = shipped_sequences_dir() / "demo" / "quick.toml"


def _plan(tmp_path: Path, extra: str = "") -> Path:
    parts = "".join(f'\n[[part]]\nsequence = "{QUICK.as_posix()}"\nserial = "S01{n}"\n'
                    for n in (1, 2, 3))
    path = tmp_path / "night.toml"
    path.write_text(f"format = 1\n\n[night]\nchange = \"by_hand\"\n{extra}{parts}",
                    encoding="utf-8")
    return path


def _night(tmp_path: Path, plan: Path, answers: str, *extra: str):
    return CliRunner().invoke(app, ["night", str(plan), "--sim", "--store",
                                    str(tmp_path / "night.sqlite"), "--quiet", *extra],
                              input=answers, env={"COLUMNS": "200"})


def _runs(tmp_path: Path) -> list[tuple[int, str, str]]:
    with SqliteRunStore(tmp_path / "night.sqlite", create=False) as store:
        return [(r.id, r.serial, r.status) for r in sorted(store.runs(), key=lambda r: r.id)]


def _summary(tmp_path: Path) -> dict:
    (path,) = tmp_path.glob("night.sqlite.night-*/night-summary.json")
    return json.loads(path.read_text(encoding="utf-8"))


def test_three_parts_in_one_night(tmp_path: Path) -> None:
    notified = tmp_path / "notified.json"
    script = tmp_path / "notify.py"
    script.write_text("import json, os, sys\njson.dump({k: v for k, v in os.environ.items() "
                      "if k.startswith('SWEEPRIG_')}, open(sys.argv[1], 'w'))\n",
                      encoding="utf-8")
    result = _night(tmp_path, _plan(tmp_path), "\n\n", "--notify",
                    f"{sys.executable} {script} {notified}")
    assert result.exit_code == 0, result.output
    assert result.output.count("Change the part now") == 2  # between parts, not before
    assert "mount serial S012" in result.output and "mount serial S013" in result.output
    assert _runs(tmp_path) == [(1, "S011", "complete"), (2, "S012", "complete"),
                               (3, "S013", "complete")]
    summary = _summary(tmp_path)
    assert summary["status"] == "complete"
    assert [(p["serial"], p["run_id"], p["status"]) for p in summary["parts"]] == [
        ("S011", 1, "complete"), ("S012", 2, "complete"), ("S013", 3, "complete")]
    assert "night: complete" in result.output
    # the night's bench time as predicted before it started, within 10 % (the figure)
    assert summary["predicted_bench_s"] == pytest.approx(summary["bench_s"], rel=0.10)
    assert "predicted bench time" in result.output
    env = json.loads(notified.read_text(encoding="utf-8"))
    assert env["SWEEPRIG_NIGHT_STATUS"] == "complete" and env["SWEEPRIG_RUN_IDS"] == "1 2 3"
    assert env["SWEEPRIG_SUMMARY"].endswith("night-summary.json")


def test_the_operator_can_end_the_night_at_a_part_change(tmp_path: Path) -> None:
    result = _night(tmp_path, _plan(tmp_path), "stop\n")
    assert result.exit_code == 1, result.output
    assert _runs(tmp_path) == [(1, "S011", "complete")]
    parts = _summary(tmp_path)["parts"]
    assert [p["status"] for p in parts] == ["complete", "not run", "not run"]
    assert "did not confirm" in parts[1]["reason"]


def _second_part_aborts(monkeypatch: pytest.MonkeyPatch) -> None:
    real = night_cmd.run_loaded
    calls = []

    def run_loaded(files, **kwargs):  # type: ignore[no-untyped-def]
        calls.append(files.sequence.part.serial)
        if files.sequence.part.serial == "S012":
            def fault(_result):  # type: ignore[no-untyped-def]
                raise InstrumentError("the analyzer stopped answering (test fault)",
                                      where="role 'sa'", fix="check the analyzer")
            kwargs["on_point"] = fault
        return real(files, **kwargs)

    monkeypatch.setattr(night_cmd, "run_loaded", run_loaded)


def test_one_part_aborting_does_not_stop_the_others(tmp_path: Path,
                                                    monkeypatch: pytest.MonkeyPatch) -> None:
    _second_part_aborts(monkeypatch)
    result = _night(tmp_path, _plan(tmp_path), "\n\n")
    assert result.exit_code == 1, result.output
    assert _runs(tmp_path) == [(1, "S011", "complete"), (2, "S012", "aborted"),
                               (3, "S013", "complete")]
    assert _summary(tmp_path)["status"] == "partial"
    assert "sweeprig resume 2" in result.output


def test_stop_on_abort_ends_the_night(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    _second_part_aborts(monkeypatch)
    result = _night(tmp_path, _plan(tmp_path, "stop_on_abort = true\n"), "\n\n")
    assert result.exit_code == 1, result.output
    assert [s for _i, _s, s in _runs(tmp_path)] == ["complete", "aborted"]
    assert _summary(tmp_path)["parts"][2]["status"] == "not run"


@pytest.mark.parametrize("delay_s", [0.0, 0.4, 1.5])
def test_ctrl_c_during_a_night_ends_it_cleanly(tmp_path: Path, delay_s: float) -> None:
    """SIGINT at a few moments of a three-part night (start-up, loading, the first runs):
    no traceback, the process exits on its own and non-zero, no run is left running, and no
    part starts after the stop."""
    import os
    import signal
    import sqlite3
    import subprocess
    import time

    from tests.support import catches_sigterm

    plan = _plan(tmp_path).read_text(encoding="utf-8").replace('"by_hand"', '"none"')
    (tmp_path / "night.toml").write_text(plan, encoding="utf-8")
    store = tmp_path / "night.sqlite"
    proc = subprocess.Popen(
        [sys.executable, "-m", "sweeprig", "night", str(tmp_path / "night.toml"), "--sim",
         "--store", str(store), "--quiet"], stdout=subprocess.PIPE, stderr=subprocess.PIPE,
        text=True, env={**os.environ, "COLUMNS": "200"})
    try:
        deadline = time.monotonic() + 60
        while proc.poll() is None and not catches_sigterm(proc.pid):
            assert time.monotonic() < deadline
            time.sleep(0.001)
        time.sleep(delay_s)
        if proc.poll() is None:
            proc.send_signal(signal.SIGINT)
        out, err = proc.communicate(timeout=120)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.communicate()
    assert "Traceback" not in out + err, out + err
    assert proc.returncode > 0 or (proc.returncode == 0 and "night: complete" in out), (
        proc.returncode, out, err)
    if store.exists():
        with sqlite3.connect(store) as db:
            statuses = [s for (s,) in db.execute("SELECT status FROM runs ORDER BY id")]
        assert "running" not in statuses
        if proc.returncode != 0 and "aborted" in statuses:
            assert statuses[-1] == "aborted"  # nothing ran after the stopped part


def _points(store: Path, run_id: int) -> list[int]:
    import sqlite3

    with sqlite3.connect(store) as db:
        return [i for (i,) in db.execute(
            "SELECT point_index FROM points WHERE run_id = ? ORDER BY point_index", (run_id,))]


def test_a_killed_night_is_resumed_as_a_night(tmp_path: Path) -> None:
    """SIGKILL in the middle of the second part: `status` names the command that resumes the
    night; `night --resume` keeps the first part, resumes the second run (every point once)
    and runs the third; the summary covers all three and the notification runs at the end."""
    import os
    import signal
    import sqlite3
    import subprocess
    import time

    plan = _plan(tmp_path).read_text(encoding="utf-8").replace('"by_hand"', '"none"')
    (tmp_path / "night.toml").write_text(plan, encoding="utf-8")
    store = tmp_path / "night.sqlite"
    proc = subprocess.Popen(
        [sys.executable, "-m", "sweeprig", "night", str(tmp_path / "night.toml"), "--sim",
         "--store", str(store), "--quiet", "--no-report"], stdout=subprocess.PIPE,
        stderr=subprocess.STDOUT, text=True, env={**os.environ, "COLUMNS": "200"})
    try:
        deadline = time.monotonic() + 120
        while True:
            assert proc.poll() is None, proc.communicate()[0]
            assert time.monotonic() < deadline
            if store.exists():
                try:
                    if len(_points(store, 2)) >= 3:
                        break
                except sqlite3.Error:
                    pass
            time.sleep(0.01)
        proc.send_signal(signal.SIGKILL)
        proc.communicate(timeout=30)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.communicate()
    assert _runs(tmp_path)[:2] == [(1, "S011", "complete"), (2, "S012", "interrupted")]
    before = _points(store, 2)

    status = CliRunner().invoke(app, ["status", "2", "--store", str(store)],
                                env={"COLUMNS": "300"})
    assert "interrupted" in status.output
    assert "part of night 1" in status.output
    assert f"sweeprig night {tmp_path / 'night.toml'} --resume --store {store} --sim" \
        in status.output

    notified = tmp_path / "notified.json"
    script = tmp_path / "notify.py"
    script.write_text("import json, os, sys\njson.dump({k: v for k, v in os.environ.items() "
                      "if k.startswith('SWEEPRIG_')}, open(sys.argv[1], 'w'))\n",
                      encoding="utf-8")
    again = _night(tmp_path, tmp_path / "night.toml", "", "--resume", "--no-report",
                   "--notify", f"{sys.executable} {script} {notified}")
    assert again.exit_code == 0, again.output
    assert "resuming night 1" in again.output
    assert "serial S011 complete already (run 1)" in again.output
    assert "resuming run 2" in again.output
    assert _runs(tmp_path) == [(1, "S011", "complete"), (2, "S012", "complete"),
                               (3, "S013", "complete")]
    after = _points(store, 2)
    assert len(after) == len(set(after)) and set(before) <= set(after)  # each point once
    summary = _summary(tmp_path)
    assert summary["status"] == "complete"
    assert [(p["serial"], p["run_id"]) for p in summary["parts"]] == [
        ("S011", 1), ("S012", 2), ("S013", 3)]
    env = json.loads(notified.read_text(encoding="utf-8"))
    assert env["SWEEPRIG_NIGHT_STATUS"] == "complete" and env["SWEEPRIG_RUN_IDS"] == "1 2 3"

    done = _night(tmp_path, tmp_path / "night.toml", "", "--resume")
    assert done.exit_code != 0 and "completed" in done.output  # nothing left to resume


def test_a_live_night_or_a_changed_plan_is_not_resumed(tmp_path: Path) -> None:
    from sweeprig.oslock import FileLock

    plan = _plan(tmp_path, "stop_on_abort = true\n")
    nothing = _night(tmp_path, plan, "", "--resume")
    assert nothing.exit_code == 2 and "no night of the plan" in nothing.output
    stopped = _night(tmp_path, plan, "stop\n", "--no-report")  # ends after the first part
    assert stopped.exit_code == 1, stopped.output
    assert "--resume --store" in stopped.output  # the night's own next step
    store = tmp_path / "night.sqlite"
    lock = FileLock(store.parent / f"{store.name}.night-1.lock")
    assert lock.try_acquire({"pid": 1})
    try:
        live = _night(tmp_path, plan, "", "--resume")
    finally:
        lock.release()
    assert live.exit_code == 2 and "still running in another process" in live.output
    plan.write_text(plan.read_text(encoding="utf-8") + "\n# changed\n", encoding="utf-8")
    changed = _night(tmp_path, plan, "", "--resume")
    assert changed.exit_code == 2 and "changed since night 1 started" in changed.output
    assert _runs(tmp_path) == [(1, "S011", "complete")]  # nothing else ran
