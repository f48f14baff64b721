"""The check, plan and schema commands through typer's CliRunner."""

import json
import xml.etree.ElementTree as ET
from pathlib import Path

import pytest

from tests.support import check_app, invoke

ROOT = Path(__file__).resolve().parents[2]
QUICK = ROOT / "sequences" / "demo" / "quick.toml"
SIM_BENCH = ROOT / "sequences" / "benches" / "sim.toml"


@pytest.fixture(scope="module")
def app():
    return check_app()


def run(app, *args: object):
    return invoke(app, *args)


HOT = """\
[part]
id = "KX-1"
expected_gain = "-7 dB"
[mixing]
if_frequency = "70 MHz"
[[study]]
name = "hot"
rf_frequency = "2.4 GHz"
rf_power = "14 dBm"
lo_power = "7 dBm"
read = ["wanted"]
"""


def test_check_ok(app) -> None:
    result = run(app, "check", QUICK)
    assert result.exit_code == 0
    assert "ok" in result.output and "quick.toml" in result.output
    assert "5 points" in result.output


def test_check_bad_file_and_junit(app, tmp_path: Path) -> None:
    bad = tmp_path / "bad.toml"
    bad.write_text(HOT.replace("rf_power", "rf_powr"), encoding="utf-8")
    hot = tmp_path / "hot.toml"
    hot.write_text(HOT, encoding="utf-8")
    junit = tmp_path / "out" / "check.xml"
    result = run(app, "check", QUICK, bad, hot, "--bench", SIM_BENCH, "--junit", junit)
    assert result.exit_code == 2  # the first failure is a file problem
    assert "unknown key 'rf_powr'" in result.output
    assert "did you mean 'rf_power'?" in result.output
    assert "Traceback" not in result.output
    root = ET.parse(junit).getroot()
    suite = root.find("testsuite")
    assert suite is not None and suite.get("tests") == "3" and suite.get("failures") == "2"
    cases = suite.findall("testcase")
    assert [c.get("name").rsplit("/", 1)[-1] for c in cases] == ["quick.toml", "bad.toml",
                                                                 "hot.toml"]
    assert cases[0].find("failure") is None
    assert cases[1].find("failure").get("type") == "InputError"
    hot_failure = cases[2].find("failure")
    assert hot_failure.get("type") == "SafetyLimitError"
    assert "rf source setting" in hot_failure.text


def test_check_safety_exit_code(app, tmp_path: Path) -> None:
    hot = tmp_path / "hot.toml"
    hot.write_text(HOT, encoding="utf-8")
    result = run(app, "check", hot)
    assert result.exit_code == 3
    assert "above the limit 15 dBm" in result.output and "Caution" in result.output


def test_check_bad_bench(app, tmp_path: Path) -> None:
    bench = tmp_path / "bench.toml"
    bench.write_bytes(b"[bench]\nname = \"x\xff\"\n")
    result = run(app, "check", QUICK, "--bench", bench)
    assert result.exit_code == 2
    assert "not valid UTF-8" in result.output


def test_check_missing_file(app, tmp_path: Path) -> None:
    result = run(app, "check", tmp_path / "none.toml")
    assert result.exit_code == 2
    assert "does not exist" in result.output


def test_plan_table(app) -> None:
    result = run(app, "plan", QUICK, "--sim")
    assert result.exit_code == 0, result.output
    out = result.output
    assert "5 points" in out
    assert "two-tone" in out and "gain" in out
    assert "analyzer input (IF port)" in out and "≤ 20 dBm" in out
    assert "total" in out


def test_plan_refusal(app, tmp_path: Path) -> None:
    hot = tmp_path / "hot.toml"
    hot.write_text(HOT, encoding="utf-8")
    result = run(app, "plan", hot, "--bench", SIM_BENCH)
    assert result.exit_code == 3
    assert "OVER LIMIT" in result.output
    assert "rf source setting would be 17.00 dBm" in result.output


def test_plan_bench_and_sim_conflict(app) -> None:
    result = run(app, "plan", QUICK, "--sim", "--bench", SIM_BENCH)
    assert result.exit_code == 2
    assert "both given" in result.output


def test_plan_too_many_points(app) -> None:
    result = run(app, "plan", QUICK, "--max-points", "3")
    assert result.exit_code == 2
    assert "5 points, above the maximum of 3" in result.output


@pytest.mark.parametrize("which", ["sequence", "bench"])
def test_schema(app, which: str) -> None:
    result = run(app, "schema", which)
    assert result.exit_code == 0
    schema = json.loads(result.stdout)
    assert schema["title"] == f"sweeprig {which} file"


def test_schema_bad_name(app) -> None:
    result = run(app, "schema", "part")
    assert result.exit_code == 2


@pytest.mark.parametrize("command", ["check", "plan", "schema"])
def test_help_has_an_example(app, command: str) -> None:
    result = run(app, command, "--help")
    assert result.exit_code == 0
    assert "Example:" in result.output and f"sweeprig {command}" in result.output


CALIBRATIONS = ROOT / "tests" / "corpus" / "calibrations"


def test_check_shows_the_calibration_status_and_its_grid(app) -> None:
    good = run(app, "check", QUICK, "--calibration", CALIBRATIONS / "other-instrument.toml")
    assert good.exit_code == 0, good.output
    assert "calibration " in good.output and "valid for" in good.output
    assert "compared with the bench's when a run starts" in good.output
    narrow = run(app, "check", QUICK, "--calibration", CALIBRATIONS / "grid-too-narrow.toml")
    assert narrow.exit_code == 2
    assert "grid-too-narrow.toml:20: loss.rf" in narrow.output and "2.3 GHz" in narrow.output
    expired = run(app, "check", QUICK, "--calibration", CALIBRATIONS / "expired.toml")
    assert expired.exit_code == 2 and "expired on 2026-02-01" in expired.output
    accepted = run(app, "check", QUICK, "--calibration", CALIBRATIONS / "expired.toml",
                   "--accept-calibration")
    assert accepted.exit_code == 0 and "WARNING" in accepted.output
    planned = run(app, "plan", QUICK, "--calibration", CALIBRATIONS / "other-instrument.toml")
    assert planned.exit_code == 0 and "valid for" in planned.output
    narrow_plan = run(app, "plan", QUICK, "--calibration",
                      CALIBRATIONS / "grid-too-narrow.toml")
    assert narrow_plan.exit_code == 2 and "grid-too-narrow.toml:20" in narrow_plan.output


def test_calibrate_then_run_with_it_from_the_command_line(tmp_path) -> None:
    from sweeprig.cli.main import app as full_app

    out = tmp_path / "cal.toml"
    made = invoke(full_app, "calibrate", QUICK, "--sim", "--out", out, "--repeats", "2",
                  "--sim-bench", "bench-errors")
    assert made.exit_code == 0, made.output
    assert "rf: 3 frequencies" in made.output and "lo: 3 frequencies" in made.output
    assert "if: 11 frequencies" in made.output and "not calibrated" not in made.output
    assert "safe state read back" in made.output and out.is_file()
    ran = invoke(full_app, "run", QUICK, "--sim", "--calibration", out, "--store",
                 tmp_path / "runs.sqlite", "--quiet", "--sim-bench", "bench-errors")
    assert ran.exit_code == 0, ran.output
    assert "(k = 2)" in ran.output and "figures corrected by the calibration" in ran.output
    refused = invoke(full_app, "calibrate", QUICK, "--out", tmp_path / "x.toml")
    assert refused.exit_code == 2 and "no bench given" in refused.output
    bad_days = invoke(full_app, "calibrate", QUICK, "--sim", "--out", tmp_path / "y.toml",
                      "--valid-days", "0")
    assert bad_days.exit_code != 0 and "--valid-days" in bad_days.output
    assert not (tmp_path / "x.toml").exists() and not (tmp_path / "y.toml").exists()


def test_check_lists_every_problem_of_a_file_up_to_twenty(app, tmp_path) -> None:
    typos = "".join(f"colour_{i} = 1\n" for i in range(25))  # 25 unknown keys in [part]
    path = tmp_path / "many.toml"
    path.write_text(HOT.replace('id = "KX-1"\n', 'id = "KX-1"\n' + typos), encoding="utf-8")
    junit = tmp_path / "check.xml"
    result = run(app, "check", path, "--junit", junit)
    assert result.exit_code == 2, result.output
    out = result.output
    assert "25 problems:" in out
    assert "1. " in out and "20. " in out and "21. " not in out
    assert "... and 5 more" in out
    assert "many.toml:3: part.colour_0: unknown key 'colour_0'" in out
    assert "many.toml:22: part.colour_19" in out  # each with its own line
    failure = ET.parse(junit).getroot().find(".//failure")
    assert failure is not None and "25 problems:" in (failure.text or "")


def test_other_commands_print_the_first_problem_and_count_the_rest(app, tmp_path) -> None:
    path = tmp_path / "two.toml"
    path.write_text(HOT.replace('id = "KX-1"\n', 'id = "KX-1"\nidd = 2\ncolour = 3\n'),
                    encoding="utf-8")
    result = run(app, "plan", path)
    assert result.exit_code == 2, result.output
    assert "(1 more problem in this file: `sweeprig check` lists every one)" in result.output


def test_check_lists_every_cross_key_problem_not_only_the_first(app, tmp_path) -> None:
    """Problems across keys (found after the file's shape is valid) are listed together:
    a zero temperature tolerance, a negative expected current, a study name used twice and
    two broken limits, each at its own line."""
    text = HOT.replace('id = "KX-1"\n', 'id = "KX-1"\nexpected_supply_current = "-3 mA"\n')
    text += ('\n[[spec]]\nfigure = "conversion_gain_db"\nstudy = "zz"\nmin = "3 dB"\n'
             '\n[[spec]]\nfigure = "conversion_gain_db"\nmin = "13 dB"\nmax = "3 dB"\n')
    path = tmp_path / "cross.toml"
    path.write_text(text, encoding="utf-8")
    result = run(app, "check", path)
    assert result.exit_code == 2, result.output
    out = result.output
    assert "3 problems:" in out, out
    assert "part.expected_supply_current" in out
    assert "no study is named 'zz'" in out and "min 13 is above max 3" in out
