"""When a run ends, sweeprig writes summary.json beside its report and runs the user's
notification command with the run's facts in its environment; the command never changes
how the run ended, and a sequence or bench file cannot set it."""

from __future__ import annotations

import json
import sys
from pathlib import Path

import pytest
from typer.testing import CliRunner

from sweeprig.cli.main import app
from sweeprig.engine.notify import (
    NOTIFY_ENV,
    RunEnd,
    notification_env,
    notify_command,
    run_notification,
)
from sweeprig.engine.session import shipped_sequences_dir
from sweeprig.errors import InputError
from sweeprig.store.paths import run_folder
from sweeprig.store.sqlite import SqliteRunStore
from tests.support import aborting_run_files

QUICK = shipped_sequences_dir() / "demo" / "quick.toml"
# A notification "script": writes the SWEEPRIG_* variables it was given to a JSON file.
RECORDER = ("import json, os, sys; json.dump({k: v for k, v in os.environ.items() "
            "if k.startswith('SWEEPRIG_')}, open(sys.argv[1], 'w'))")


def _recorder(out: Path) -> str:
    return f"{sys.executable} -c \"{RECORDER}\" {out}"


def test_the_command_comes_from_the_option_or_the_environment(monkeypatch):
    monkeypatch.delenv(NOTIFY_ENV, raising=False)
    assert notify_command(None) is None
    assert notify_command("notify-me 'run done' --to lab") == ("notify-me", "run done",
                                                               "--to", "lab")
    monkeypatch.setenv(NOTIFY_ENV, "from-env --quiet")
    assert notify_command(None) == ("from-env", "--quiet")
    assert notify_command("wins") == ("wins",)
    with pytest.raises(InputError) as err:
        notify_command("unclosed 'quote")
    assert "--notify" in str(err.value) and "quote" in str(err.value)


def test_a_failing_command_is_reported_never_raised(tmp_path):
    end = RunEnd(1, "complete", None, 3, 3, tmp_path / "s.sqlite", "pass", None, None, ())
    env = notification_env(end, None)
    assert env["SWEEPRIG_RUN_ID"] == "1" and env["SWEEPRIG_VERDICT"] == "pass"
    assert env["SWEEPRIG_REPORT"] == "" and env["SWEEPRIG_NEXT"] == ""
    missing = run_notification(["no-such-notifier-here"], env)
    assert not missing.ok and "not found" in missing.message
    failing = run_notification([sys.executable, "-c", "import sys; sys.exit(3)"], env)
    assert not failing.ok and "exited 3" in failing.message
    slow = run_notification([sys.executable, "-c", "import time; time.sleep(5)"], env,
                            timeout_s=0.2)
    assert not slow.ok and "did not finish" in slow.message


def test_a_complete_run_writes_its_summary_and_notifies(tmp_path, monkeypatch):
    monkeypatch.delenv(NOTIFY_ENV, raising=False)
    store, seen = tmp_path / "runs.sqlite", tmp_path / "seen.json"
    result = CliRunner().invoke(app, ["run", str(QUICK), "--sim", "--quiet", "--store",
                                      str(store), "--notify", _recorder(seen)])
    assert result.exit_code == 0, result.output
    assert "notification sent" in result.output
    summary_path = run_folder(store, 1) / "summary.json"
    summary = json.loads(summary_path.read_text(encoding="utf-8"))
    assert summary["run"] == 1 and summary["status"] == "complete"
    assert summary["points"] == {"done": 5, "total": 5}
    assert summary["verdict"] == "inconclusive" and summary["next"] == []
    assert Path(summary["report"]).is_file() and Path(summary["figures"]).is_file()
    assert sum(summary["limit_checks"].values()) == 4
    env = json.loads(seen.read_text(encoding="utf-8"))
    assert env["SWEEPRIG_RUN_ID"] == "1" and env["SWEEPRIG_RUN_STATUS"] == "complete"
    assert env["SWEEPRIG_VERDICT"] == "inconclusive"
    assert env["SWEEPRIG_SUMMARY"] == str(summary_path)
    assert env["SWEEPRIG_REPORT"] == summary["report"]
    with SqliteRunStore(store, create=False) as db:
        assert [e.kind for e in db.events(1) if e.kind == "notify"] == ["notify"]


def test_an_aborted_run_notifies_with_its_next_step_and_keeps_its_exit_code(tmp_path,
                                                                             monkeypatch):
    sequence, sim_bench = aborting_run_files(tmp_path, QUICK.read_text(encoding="utf-8"))
    store, seen = tmp_path / "runs.sqlite", tmp_path / "seen.json"
    monkeypatch.setenv(NOTIFY_ENV, _recorder(seen))  # from the environment this time
    result = CliRunner().invoke(app, ["run", str(sequence), "--sim", "--sim-bench",
                                      str(sim_bench), "--quiet", "--store", str(store)])
    assert result.exit_code == 1, result.output
    env = json.loads(seen.read_text(encoding="utf-8"))
    assert env["SWEEPRIG_RUN_STATUS"] == "aborted"
    assert env["SWEEPRIG_NEXT"].startswith("sweeprig resume 1 --store")
    summary = json.loads((run_folder(store, 1) / "summary.json").read_text(encoding="utf-8"))
    assert summary["status"] == "aborted" and summary["next"] == [env["SWEEPRIG_NEXT"]]


def test_a_failing_command_does_not_change_the_exit_code(tmp_path, monkeypatch):
    monkeypatch.delenv(NOTIFY_ENV, raising=False)
    store = tmp_path / "runs.sqlite"
    result = CliRunner().invoke(app, ["run", str(QUICK), "--sim", "--quiet", "--no-report",
                                      "--store", str(store), "--notify",
                                      f"{sys.executable} -c 'import sys; sys.exit(4)'"])
    assert result.exit_code == 0, result.output
    assert "exited 4" in result.output
    with SqliteRunStore(store, create=False) as db:
        (event,) = [e for e in db.events(1) if e.kind == "notify"]
    assert event.severity == "warning"


def test_a_bad_command_is_refused_before_anything_runs(tmp_path, monkeypatch):
    monkeypatch.delenv(NOTIFY_ENV, raising=False)
    store = tmp_path / "runs.sqlite"
    result = CliRunner().invoke(app, ["run", str(QUICK), "--sim", "--quiet", "--store",
                                      str(store), "--notify", "mail 'unclosed"])
    assert result.exit_code == 2, result.output
    assert "--notify" in result.output and "Traceback" not in result.output
    assert not store.exists()
