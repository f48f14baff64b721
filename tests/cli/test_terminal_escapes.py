"""Nothing a file holds reaches the terminal raw, and a message quotes a file one token at most.

Run through the real command tree (``sweeprig.cli.main.app``): plan, check and its JUnit
report, run, status, runs and report with a sequence whose title, operator and part id hold
escape sequences (OSC retitles the window, CSI clears the screen; ECMA-48) and a
right-to-left override (Unicode UAX #9).
"""

from __future__ import annotations

import xml.etree.ElementTree as ET
from pathlib import Path

import pytest
from typer.testing import CliRunner

from sweeprig.cli.main import app

CORPUS = Path(__file__).resolve().parents[1] / "corpus"
TINY = (CORPUS / "_support" / "tiny-sequence.toml").read_text(encoding="utf-8")
ROOT = Path(__file__).resolve().parents[2]
SIM_BENCH = ROOT / "sequences" / "benches" / "sim.toml"
RAW = ("\x1b", "\x07", "\x9b", "\u202e", "\r")
SECRET = "wJalrXUtnFEMI-FICTIONAL-KEY"


def cli(*args: object) -> str:
    result = CliRunner().invoke(app, [str(a) for a in args], env={"COLUMNS": "200"})
    assert result.exception is None or isinstance(result.exception, SystemExit), result.output
    return result.output


def assert_escaped(output: str) -> None:
    raw = [c for c in RAW if c in output]
    assert not raw, f"raw control characters {raw!r} in:\n{output!r}"


@pytest.fixture
def hostile(tmp_path: Path) -> Path:
    path = tmp_path / "hostile.toml"
    path.write_text(TINY.replace(
        '[part]\nid = "KX-0001 (fictional)"',
        '[about]\ntitle = "T\\u001b]0;pwned\\u0007\\u001b[2J\\r"\noperator = "op\\u001b[31m\\u009b"'
        '\n\n[part]\nid = "KX\\u001b[2J-1\\u202e"'), encoding="utf-8")
    return path


def test_plan_shows_title_and_part_escaped(hostile: Path) -> None:
    output = cli("plan", hostile)
    assert_escaped(output)
    assert "T\\x1b]0;pwned\\x07\\x1b[2J\\x0d" in output
    assert "KX\\x1b[2J-1\\u202e" in output


def test_a_run_and_everything_that_shows_it_later(hostile: Path, tmp_path: Path) -> None:
    store = tmp_path / "runs.sqlite"
    outputs = {
        "run": cli("run", hostile, "--sim", "--store", store, "--quiet", "--no-report"),
        "status": cli("status", "1", "--store", store),
        "runs": cli("runs", "--store", store),
        "report": cli("report", "1", "--store", store),
    }
    for name, output in outputs.items():
        assert "Traceback" not in output, name
        assert_escaped(output)
    assert "op\\x1b[31m\\x9b" in outputs["status"]
    assert "KX\\x1b[2J-1\\u202e" in outputs["report"]


def test_a_file_name_holding_escapes_is_shown_escaped(tmp_path: Path) -> None:
    named = tmp_path / "x\x1b[2J.toml"
    named.write_text(TINY, encoding="utf-8")
    output = cli("check", named)
    assert_escaped(output)
    assert "x\\x1b[2J.toml" in output


def test_junit_report_quotes_no_secret_and_no_control_character(tmp_path: Path) -> None:
    """A credentials file given as a Touchstone table: the message names the file, line and
    what was expected, quoting one token at most, on the terminal and in the JUnit report."""
    creds = tmp_path / "credentials.s2p"
    creds.write_text(f"aws_access_key_id = AKIAFICTIONAL\naws_secret_access_key = {SECRET}\n"
                     "\x1b]0;pwned\x07 = 1\n", encoding="utf-8")
    bench = tmp_path / "bench.toml"
    bench.write_text(SIM_BENCH.read_text(encoding="utf-8").replace(
        'rf = "3.0 dB"', f"rf = {{ touchstone = '{creds.as_posix()}' }}"), encoding="utf-8")
    junit = tmp_path / "check.xml"
    output = cli("check", CORPUS / "_support" / "tiny-sequence.toml", "--bench", bench,
                 "--junit", junit)
    report = junit.read_text(encoding="utf-8")
    for text in (output, report):
        assert SECRET not in text and "AKIAFICTIONAL" not in text
        assert_escaped(text)
    assert "credentials.s2p:1" in output and "'aws_access_key_id' is not a number" in output
    failure = ET.parse(junit).getroot().find("testsuite/testcase/failure")
    assert failure is not None and "credentials.s2p:1" in (failure.text or "")
