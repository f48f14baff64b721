"""The README's calibration path works as written: calibrate the simulated bench in one
command, run with that calibration, and the report shows each figure with its ± uncertainty
and the calibration it used (the quick look here; the demo's block in
tests/perf/test_perf_calibration.py)."""

from __future__ import annotations

import re
import shlex
from pathlib import Path

import pytest
from typer.testing import CliRunner

from sweeprig.cli.main import app

ROOT = Path(__file__).resolve().parents[2]
README = ROOT / "README.md"


def readme_commands(pattern: str) -> list[list[str]]:
    """The README's ``sweeprig`` command lines matching ``pattern`` (comments cut), as
    arguments with the repository's ``sequences/`` made absolute."""
    out = []
    for line in README.read_text(encoding="utf-8").splitlines():
        text = line.strip()
        if not text.startswith("sweeprig ") or not re.search(pattern, text):
            continue
        args = shlex.split(text.split(" #", 1)[0])[1:]
        out.append([str(ROOT / a) if a.startswith("sequences/") else a for a in args])
    return out


def _invoke(args: list[str]) -> str:
    result = CliRunner().invoke(app, args)
    assert "Traceback" not in result.output
    assert result.exit_code in (0, 9), result.output  # 9: an inconclusive verdict
    return result.output


def test_the_readme_calibrates_and_runs_the_quick_look_on_the_default_bench(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.chdir(tmp_path)
    (calibrate,) = readme_commands(r"^sweeprig calibrate sequences/demo/quick\.toml")
    (run,) = readme_commands(r"^sweeprig run sequences/demo/quick\.toml .*--calibration")
    # the default simulated bench is the one with a real bench's errors (no --sim-bench)
    assert "--sim-bench" not in calibrate and "--sim-bench" not in run
    out = _invoke(calibrate)
    assert "calibration written: cal.toml" in out and "rf: " in out
    assert (tmp_path / "cal.toml").exists()
    out = _invoke(run)
    assert "figures corrected by the calibration cal.toml" in out
    assert re.search(r"Conversion gain .* 1\d\.\d\d ± 0\.\d\d dB", out)
    # the run wrote its report where the README's `sweeprig report 1` re-makes it
    assert readme_commands(r"^sweeprig report 1\b")
    html = (tmp_path / "results" / "sweeprig.sqlite.run-1" / "report.html").read_text("utf-8")
    assert "± 0." in html and "corrected by the calibration cal.toml" in html


def test_the_readme_demo_block_is_the_same_path() -> None:
    # The demo's three commands are this path with the demo sequence (its figures are
    # checked by tests/engine/test_calibrated_figures.py and printed by the benchmark).
    (calibrate,) = readme_commands(r"^sweeprig calibrate \S+kx2417")
    (run,) = readme_commands(r"^sweeprig run \S+kx2417\S* .*--calibration")
    assert calibrate[2:] == ["--sim", "--out", "cal.toml"]
    assert run[2:] == ["--sim", "--calibration", "cal.toml"]
    assert Path(calibrate[1]).exists() and calibrate[1] == run[1]
