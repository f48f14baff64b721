"""A run's files are named after its store, so two stores in one folder never share a log,
a report folder, a lock or a failure note."""

from __future__ import annotations

from pathlib import Path

from typer.testing import CliRunner

from sweeprig.cli.main import app
from sweeprig.engine.session import shipped_sequences_dir
from sweeprig.store.paths import run_file_name, run_folder, run_log_path
from sweeprig.store.runlock import run_lock_path

QUICK = shipped_sequences_dir() / "demo" / "quick.toml"


def test_every_name_starts_with_the_store_file_name():
    store = Path("results") / "lot7.sqlite"
    assert run_folder(store, 3) == Path("results") / "lot7.sqlite.run-3"
    assert run_log_path(store, 3) == Path("results") / "lot7.sqlite.run-3.log"
    assert run_log_path(store, 3, "logs") == Path("logs") / "lot7.sqlite.run-3.log"
    assert run_file_name(store, 3, ".failed.txt") == "lot7.sqlite.run-3.failed.txt"
    # stores that differ only in their suffix still get their own names
    assert run_folder("a.sqlite", 1) != run_folder("a.db", 1)


def test_the_lock_follows_the_same_rule(tmp_path):
    store = tmp_path / "lot7.sqlite"
    store.touch()
    assert run_lock_path(store, 3).name == "lot7.sqlite.run-3.lock"


def test_two_stores_in_one_folder_keep_their_own_logs_and_reports(tmp_path):
    outputs = {}
    for name in ("a.sqlite", "b.sqlite"):
        store = tmp_path / name
        result = CliRunner().invoke(app, ["run", str(QUICK), "--sim", "--quiet",
                                          "--store", str(store)])
        assert result.exit_code in (0,), result.output
        report = run_folder(store, 1) / "report.html"
        log = run_log_path(store, 1)
        assert report.is_file() and log.is_file()
        outputs[name] = (report.read_text(encoding="utf-8"), log.read_text(encoding="utf-8"))
    assert outputs["a.sqlite"] != outputs["b.sqlite"]  # each its own run, neither overwritten
    assert not (tmp_path / "run-1").exists() and not (tmp_path / "run-1.log").exists()
