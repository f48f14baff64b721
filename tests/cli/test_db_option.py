"""The one-bench commands against the lab database (``--db`` or ``SWEEPRIG_DB``): ``run``,
``runs``, ``status``, ``report`` and ``resume``; the URL's password is never printed and never
written into a file the tool makes."""

from __future__ import annotations

from pathlib import Path

import pytest
from typer.testing import CliRunner

from sweeprig.cli.main import app
from sweeprig.store.postgres import PostgresRunStore

TINY = Path(__file__).resolve().parents[1] / "corpus" / "_support" / "tiny-sequence.toml"
SECRET = "s3cret-Pw"


def _with_password(url: str) -> str:
    """``url`` with a password (the test server trusts loopback, so it is never asked for: it
    is only there to be kept out of everything)."""
    return url.replace("sweeprig@", f"sweeprig:{SECRET}@", 1)


def _cli(*args: object, env: dict[str, str] | None = None):
    return CliRunner().invoke(app, [str(a) for a in args], env={"COLUMNS": "200", **(env or {})})


def _files_holding(folder: Path, text: str) -> list[Path]:
    return [p for p in folder.rglob("*") if p.is_file()
            and text.encode() in p.read_bytes()]


def test_run_runs_status_report_resume_on_the_lab_database(pg_url, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    url = _with_password(pg_url)
    outputs = [_cli("run", TINY, "--sim", "--quiet", "--db", url)]
    assert outputs[0].exit_code == 0, outputs[0].output
    with PostgresRunStore(pg_url) as store:
        (run,) = store.runs()
        assert run.status == "complete" and run.points_done == run.points_total
        assert store.stored_figures([run.id]), "figures not kept with the finished run"
    outputs.append(_cli("runs", env={"SWEEPRIG_DB": url}))
    assert outputs[-1].exit_code == 0 and "tiny-sequence" in outputs[-1].output
    outputs.append(_cli("status", run.id, "--db", url))
    assert outputs[-1].exit_code == 0 and "complete" in outputs[-1].output
    outputs.append(_cli("report", run.id, "--db", url, "--out", tmp_path / "rep"))
    assert outputs[-1].exit_code == 0, outputs[-1].output
    assert (tmp_path / "rep" / "report.html").exists()
    outputs.append(_cli("resume", run.id, "--db", url, "--quiet"))  # nothing left to do
    assert outputs[-1].exit_code != 0 and "fix:" in outputs[-1].output
    for result in outputs:
        assert SECRET not in result.output and "Traceback" not in result.output
    assert _files_holding(tmp_path, SECRET) == []
    assert any(tmp_path.iterdir())  # the run's log, summary and report were written here


def test_store_and_db_together_are_refused(pg_url, tmp_path):
    result = _cli("runs", "--store", tmp_path / "x.sqlite", "--db", _with_password(pg_url))
    assert result.exit_code == 2 and "--store / --db" in result.output
    assert SECRET not in result.output


@pytest.mark.parametrize("command", ["runs", "status", "report"])
def test_a_db_that_is_not_a_postgresql_url_is_refused(command, tmp_path):
    args = [command] + ([] if command == "runs" else ["1"])
    result = _cli(*args, "--db", f"mysql://lab:{SECRET}@h/db")
    assert result.exit_code == 2 and "not a PostgreSQL URL" in result.output
    assert SECRET not in result.output and "fix:" in result.output

