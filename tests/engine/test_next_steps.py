"""After a run that did not complete, sweeprig says what to type next, in order: ``safe``
first where a real bench may be live, then ``resume``; ``run`` prints it, the store records
it, and ``status`` repeats it."""

from __future__ import annotations

import shlex
from pathlib import Path

from typer.testing import CliRunner

from sweeprig.cli.main import app
from sweeprig.engine.next_steps import next_steps
from sweeprig.engine.session import shipped_sequences_dir
from sweeprig.store.sqlite import SqliteRunStore
from tests.support import aborting_run_files

QUICK = shipped_sequences_dir() / "demo" / "quick.toml"


def test_the_rule():
    real = {"bench_path": "lab/bench 3.toml", "simulated": False}
    assert next_steps("complete", 4, "r.sqlite", **real) == ()
    assert next_steps("running", 4, "r.sqlite", **real) == ()
    assert next_steps("aborted", 4, "r.sqlite", **real) == (
        "sweeprig resume 4 --store r.sqlite",)
    for live in ("unsafe", "interrupted"):  # the process may have left outputs on
        assert next_steps(live, 4, "r.sqlite", **real) == (
            "sweeprig safe --bench 'lab/bench 3.toml'", "sweeprig resume 4 --store r.sqlite")
    sim = {"bench_path": None, "simulated": True}
    assert next_steps("interrupted", 2, "s.sqlite", **sim) == (
        "sweeprig resume 2 --store s.sqlite",)  # nothing outlives a simulated bench
    assert next_steps("aborted", 2, "s.sqlite", sim_description="my sim.toml", **sim) == (
        "sweeprig resume 2 --store s.sqlite --sim-bench 'my sim.toml'",)
    # every command is one shell word per argument, whatever the path holds
    (step,) = next_steps("aborted", 2, "a b;rm -rf x.sqlite", **sim)
    assert shlex.split(step)[-1] == "a b;rm -rf x.sqlite"


def test_an_aborted_run_prints_records_and_status_repeats_the_next_step(tmp_path: Path):
    sequence, sim_bench = aborting_run_files(tmp_path, QUICK.read_text(encoding="utf-8"))
    store = tmp_path / "runs.sqlite"
    result = CliRunner().invoke(app, ["run", str(sequence), "--sim", "--sim-bench",
                                      str(sim_bench), "--store", str(store), "--quiet"])
    assert result.exit_code == 1, result.output
    resume = f"sweeprig resume 1 --store {store} --sim-bench {sim_bench}"
    assert f"next: {resume}" in result.output.replace("\n", "")
    with SqliteRunStore(store, create=False) as db:
        (event,) = [e for e in db.events(1) if e.kind == "next_steps"]
    assert event.details["commands"] == [resume]
    status = CliRunner().invoke(app, ["status", "1", "--store", str(store)])
    assert status.exit_code == 0, status.output
    assert f"next: sweeprig resume 1 --store {store}" in status.output.replace("\n", "")


def test_a_complete_run_has_no_next_step(tmp_path: Path):
    store = tmp_path / "runs.sqlite"
    result = CliRunner().invoke(app, ["run", str(QUICK), "--sim", "--store", str(store),
                                      "--quiet", "--no-report"])
    assert result.exit_code == 0, result.output
    assert "next:" not in result.output
    with SqliteRunStore(store, create=False) as db:
        assert not [e for e in db.events(1) if e.kind == "next_steps"]
