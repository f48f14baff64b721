"""`sweeprig runs`, `status` and `export` against a real store file."""

from __future__ import annotations

from datetime import UTC, datetime

import pandas as pd
import pytest
import typer
from typer.testing import CliRunner

from sweeprig.cli import store_cmd
from sweeprig.store import PointRecord, ReadingRecord, SqliteRunStore


@pytest.fixture
def app() -> typer.Typer:
    app = typer.Typer(add_completion=False)

    @app.callback()
    def _root() -> None:
        """test root"""

    store_cmd.register(app)
    return app


@pytest.fixture
def store_path(tmp_path):
    path = tmp_path / "runs.sqlite"
    with SqliteRunStore(path) as store:
        run_id = store.create_run(sequence_path="sequences/demo/gain.toml",
                                  sequence_text="x = 1\n", part="MX-100", serial="S-7",
                                  simulated=True, points_total=4)
        store.set_status(run_id, "running")
        for index in range(3):
            store.write_point(
                run_id,
                PointRecord(index, "gain", rf_freq_hz=2.4e9, rf_power_dbm=-20.0 + index,
                            wall_end=datetime.now(UTC)),
                [ReadingRecord("if", "marker", "if", 70e6, -27.0 + index, m=1, n=1)],
            )
        store.log_event(run_id, "warning", "retry", "analyzer timed out", {"attempt": 1})
        store.set_status(run_id, "complete")
    return path


def test_runs_lists(app, store_path):
    result = CliRunner().invoke(app, ["runs", "--store", str(store_path)],
                                env={"COLUMNS": "200"})
    assert result.exit_code == 0, result.output
    assert "MX-100" in result.output and "3/4" in result.output
    assert "complete" in result.output


def test_runs_empty_and_missing(app, tmp_path):
    empty = tmp_path / "empty.sqlite"
    SqliteRunStore(empty).close()
    result = CliRunner().invoke(app, ["runs", "--store", str(empty)])
    assert result.exit_code == 0 and "no runs" in result.output
    result = CliRunner().invoke(app, ["runs", "--store", str(tmp_path / "nope.sqlite")])
    assert result.exit_code == 5
    assert "no run store here" in result.output and "Traceback" not in result.output


def test_status(app, store_path):
    result = CliRunner().invoke(app, ["status", "1", "--store", str(store_path)])
    assert result.exit_code == 0, result.output
    for text in ("run 1", "complete", "3/4", "last point 2", "analyzer timed out"):
        assert text in result.output
    result = CliRunner().invoke(app, ["status", "42", "--store", str(store_path)])
    assert result.exit_code == 5 and "no run 42" in result.output


def test_export_both_formats_readable(app, store_path, tmp_path):
    out = tmp_path / "export"
    result = CliRunner().invoke(
        app, ["export", "1", "--to", str(out), "--store", str(store_path), "--format", "both"]
    )
    assert result.exit_code == 0, result.output
    points = pd.read_csv(out / "run-1-points.csv")
    readings = pd.read_parquet(out / "run-1-readings.parquet")
    assert list(points["point_index"]) == [0, 1, 2]
    assert list(readings["level_dbm"]) == [-27.0, -26.0, -25.0]
    assert pd.read_parquet(out / "run-1-points.parquet").shape[0] == 3
    assert pd.read_csv(out / "run-1-events.csv")["kind"].tolist() == ["retry"]
    assert (out / "run-1.json").is_file()


def test_export_bad_format(app, store_path, tmp_path):
    result = CliRunner().invoke(
        app, ["export", "1", "--to", str(tmp_path), "--store", str(store_path), "--format", "xls"]
    )
    assert result.exit_code != 0 and "Traceback" not in result.output


@pytest.mark.parametrize("command", ["runs", "status", "export"])
def test_help_has_example(app, command):
    result = CliRunner().invoke(app, [command, "--help"])
    assert result.exit_code == 0 and "Example" in result.output


@pytest.fixture
def long_names_store(tmp_path):
    """Runs with the long names a real store holds (the demo's sequence, a lot serial)."""
    path = tmp_path / "runs.sqlite"
    with SqliteRunStore(path) as store:
        for serial in ("L07-0012", "L07-0013"):
            run_id = store.create_run(
                sequence_path="sequences/demo/kx2417-characterisation.toml",
                sequence_text="x = 1\n", part="KX-2417 (fictional)", serial=serial,
                simulated=True, points_total=264)
            store.set_status(run_id, "complete")
    return path


def _runs_at(app, path, width: int) -> list[str]:
    result = CliRunner().invoke(app, ["runs", "--store", str(path)],
                                env={"COLUMNS": str(width)})
    assert result.exit_code == 0, result.output
    lines = result.output.splitlines()
    assert all(len(line) <= width for line in lines), result.output
    return lines


@pytest.mark.parametrize("width", [80, 120])
def test_runs_is_readable_at_80_and_120_columns(app, long_names_store, width):
    lines = _runs_at(app, long_names_store, width)
    text = "\n".join(lines)
    # no name broken into two-character pieces, no word per line
    for whole in ("complete", "KX-2417", "0/264", "kx2417-characterisation"):
        assert whole in text, text
    header = next(line for line in lines if line.lstrip().startswith("id "))
    assert all(name in header for name in ("status", "part", "points")), header
    if width == 120:
        assert "serial" in header and "L07-0012" in text and "0/264 (0%)" in text


def test_runs_at_120_columns_shows_every_column(app, long_names_store):
    header = next(line for line in _runs_at(app, long_names_store, 120)
                  if line.lstrip().startswith("id "))
    assert header.split() == ["id", "status", "part", "serial", "points", "started",
                              "duration", "sequence"]
