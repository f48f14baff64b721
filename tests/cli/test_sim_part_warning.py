"""``run --sim`` and ``plan`` print a warning when the simulated part cannot serve the
sequence's frequency plan (an upconverter sequence on the bench's own downconverter)."""

from __future__ import annotations

from pathlib import Path

from typer.testing import CliRunner

from sweeprig.cli.main import app
from sweeprig.engine.session import shipped_sequences_dir

DEMO = shipped_sequences_dir() / "demo" / "kx5860u-upconverter.toml"
WARNING = "is a downconverter, but the sequence is written for an upconverter"


def _upconverter_without_sim_part(tmp_path: Path) -> Path:
    text = DEMO.read_text(encoding="utf-8").replace('sim_part = "kx-5860u"', "")
    text = text[:text.index("# Gain across the IF input band")]  # the first study only
    path = tmp_path / "up.toml"
    path.write_text(text, encoding="utf-8")
    return path


def _flat(output: str) -> str:
    return " ".join(output.split())


def test_run_sim_prints_the_warning(tmp_path: Path) -> None:
    path = _upconverter_without_sim_part(tmp_path)
    result = CliRunner().invoke(app, ["run", str(path), "--sim", "--store",
                                      str(tmp_path / "runs.sqlite"), "--no-report"])
    assert "warning:" in result.output
    assert WARNING in _flat(result.output), result.output


def test_plan_prints_the_warning_and_names_the_trade_axes(tmp_path: Path) -> None:
    result = CliRunner().invoke(app, ["plan", str(_upconverter_without_sim_part(tmp_path))])
    assert result.exit_code == 0, result.output
    assert WARNING in _flat(result.output), result.output
    assert "if_power ×1" in result.output  # an upconverter's input axes in its own words
    plain = CliRunner().invoke(app, ["plan", str(DEMO)])
    assert "warning: the simulated part" not in _flat(plain.output)
