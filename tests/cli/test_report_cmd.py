"""`sweeprig report` against a small hand-written store: files written, summary printed,
exit codes with --fail-on-verdict, and clear messages (no traceback) for bad input."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
import typer
from typer.testing import CliRunner

from sweeprig.cli import report_cmd
from sweeprig.errors import VERDICT_FAILED_EXIT_CODE, VERDICT_INCONCLUSIVE_EXIT_CODE
from sweeprig.store import PointRecord, ReadingRecord, SqliteRunStore

SEQUENCE = """\
format = 1
[about]
title = "Report command test (fictional part)"
[part]
id = "MX-7 (fictional)"
serial = "S-42"
expected_gain = "12 dB"
[mixing]
if_frequency = "100 MHz"
[conditions]
supply = "3.3 V"
[[study]]
name = "gain"
rf_frequency = ["2.0 GHz", "2.2 GHz", "2.4 GHz"]
rf_power = "-25 dBm"
lo_power = "0 dBm"
read = ["wanted", "supply_current"]
[[spec]]
figure = "conversion_gain_db"
min = "9 dB"
max = "14 dB"
[[spec]]
figure = "supply_current_a"
max = "60 mA"
"""


def _write_run(store: SqliteRunStore, gain_db: float, *, points: int = 3,
               status: str = "complete", reason: str | None = None) -> int:
    run = store.create_run(sequence_path="sequences/mx7.toml", sequence_text=SEQUENCE,
                           part="MX-7 (fictional)", serial="S-42", simulated=True,
                           title="Report command test (fictional part)", points_total=3,
                           status="running")
    for index, rf_hz in enumerate((2.0e9, 2.2e9, 2.4e9)[:points]):
        lo_hz = rf_hz - 100e6
        store.write_point(
            run,
            PointRecord(index, "gain", supply_v=3.3, lo_freq_hz=lo_hz, lo_power_dbm=0.0,
                        rf_freq_hz=rf_hz, rf_power_dbm=-25.0, supply_current_a=0.03,
                        sim_start_s=10.0 * index, sim_end_s=10.0 * index + 1.0),
            [
                ReadingRecord("wanted", "wanted", "if", 100e6, -25.0 + gain_db, -110.0,
                              m=1, n=-1, rbw_hz=1e3, attenuation_db=10.0),
                ReadingRecord("supply_current", "supply_current", "dc",
                              extra={"current_a": 0.03, "voltage_v": 3.3}),
            ],
        )
    store.log_event(run, "warning", "retry", "analyzer timed out; retried", point_index=0)
    store.set_status(run, status, reason)  # type: ignore[arg-type]
    return run


@pytest.fixture
def store_path(tmp_path) -> Path:
    path = tmp_path / "runs.sqlite"
    with SqliteRunStore(path) as store:
        _write_run(store, 12.0)  # run 1: passes
        _write_run(store, 7.0)  # run 2: gain below its 9 dB minimum
        _write_run(store, 12.0, points=2, status="aborted", reason="stopped by SIGTERM")
    return path


@pytest.fixture
def app() -> typer.Typer:
    app = typer.Typer(add_completion=False)

    @app.callback()
    def _root() -> None:
        """test root"""

    report_cmd.register(app)
    return app


def _invoke(app: typer.Typer, *args: str):
    result = CliRunner().invoke(app, ["report", *args])
    assert "Traceback" not in result.output
    assert result.exception is None or isinstance(result.exception, SystemExit)
    return result


def test_report_writes_the_files_and_prints_the_summary(app, store_path, tmp_path):
    out = tmp_path / "out"
    result = _invoke(app, "1", "--store", str(store_path), "--out", str(out))
    assert result.exit_code == 0, result.output
    for name in ("report.html", "figures.json", "figures.csv", "figures.parquet",
                 "captures.csv", "captures.parquet"):
        assert (out / name).is_file(), name
    assert "verdict: PASS" in result.output and "Conversion gain" in result.output
    assert f"report: {out / 'report.html'}" in result.output.replace("\n", "")
    document = json.loads((out / "figures.json").read_text(encoding="utf-8"))
    assert document["verdict"] == "pass" and document["run"]["id"] == 1
    html = (out / "report.html").read_text(encoding="utf-8")
    assert "analyzer timed out; retried" in html  # events are in the report


def test_the_default_folder_is_beside_the_store(app, store_path, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path / "..")
    result = _invoke(app, "1", "--store", str(store_path))
    assert result.exit_code == 0, result.output
    assert (store_path.parent / "runs.sqlite.run-1" / "report.html").is_file()


@pytest.mark.parametrize(("run_id", "flag", "code", "verdict"), [
    ("1", True, 0, "PASS"),
    ("2", False, 0, "FAIL"),
    ("2", True, VERDICT_FAILED_EXIT_CODE, "FAIL"),
    ("3", False, 0, "INCONCLUSIVE"),
    # aborted: passing figures, but not every point measured; a script must not take it as a pass
    ("3", True, VERDICT_INCONCLUSIVE_EXIT_CODE, "INCONCLUSIVE"),
])
def test_exit_codes_with_fail_on_verdict(app, store_path, tmp_path, run_id, flag, code,
                                         verdict):
    args = [run_id, "--store", str(store_path), "--out", str(tmp_path / f"r{run_id}")]
    result = _invoke(app, *args, *(["--fail-on-verdict"] if flag else []))
    assert result.exit_code == code, result.output
    assert f"verdict: {verdict}" in result.output
    assert (VERDICT_FAILED_EXIT_CODE, VERDICT_INCONCLUSIVE_EXIT_CODE) == (6, 9)


def test_an_unknown_run_is_a_clear_error(app, store_path, tmp_path):
    result = _invoke(app, "99", "--store", str(store_path), "--out", str(tmp_path / "x"))
    assert result.exit_code == 5
    assert "there is no run 99" in result.output and "fix:" in result.output
    assert not (tmp_path / "x").exists()


def test_a_missing_store_is_a_clear_error(app, tmp_path):
    result = _invoke(app, "1", "--store", str(tmp_path / "none.sqlite"))
    assert result.exit_code == 5 and "no run store here" in result.output


def test_an_unwritable_folder_is_a_clear_error(app, store_path, tmp_path):
    blocker = tmp_path / "a-file"
    blocker.write_text("not a folder", encoding="utf-8")
    result = _invoke(app, "1", "--store", str(store_path), "--out", str(blocker / "sub"))
    assert result.exit_code == 5
    assert "cannot create the report folder" in result.output


def test_help_has_examples_and_exit_codes(app):
    result = CliRunner().invoke(app, ["report", "--help"])
    assert result.exit_code == 0
    assert "Example" in result.output and "--fail-on-verdict" in result.output


def test_markup_like_paths_are_printed_as_they_are(app, tmp_path):
    odd = tmp_path / "lot [red] 7[bold]"
    odd.mkdir()
    result = _invoke(app, "1", "--store", str(odd / "none.sqlite"))
    assert result.exit_code == 5
    assert "lot [red] 7[bold]" in result.output.replace("\n", "")
