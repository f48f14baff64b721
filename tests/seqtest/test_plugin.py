"""The sequence-test plugin, checked with pytest's own ``pytester`` fixture: what it collects
(sequences only, not benches, fragments, golden files or other TOML), a passing and a
failing sequence with the readable table, golden figures, tag markers, pytest's JUnit XML
and ``--changed-since``. Runs that execute a sequence go through a subprocess: pytester's
in-process runs drop the modules they imported, and numpy refuses to be loaded twice."""

from __future__ import annotations

import re
import shutil
import subprocess
from pathlib import Path
from xml.etree import ElementTree

import pytest

from sweeprig.engine.session import shipped_sequences_dir

TINY = Path(__file__).parent / "data" / "tiny.toml"
BENCH = shipped_sequences_dir() / "benches" / "sim.toml"


def _project(pytester: pytest.Pytester, *, failing: bool = False) -> Path:
    folder = pytester.path / "seqs"
    folder.mkdir()
    text = TINY.read_text(encoding="utf-8")
    (folder / "tiny.toml").write_text(text, encoding="utf-8")
    if failing:
        (folder / "too-strict.toml").write_text(
            text.replace('min = "9 dB"', 'min = "13.5 dB"').replace(
                'tags = ["quick", "smoke test"]', 'tags = ["strict"]'), encoding="utf-8")
    shutil.copy(BENCH, folder / "bench.toml")  # a bench file: not a test
    (folder / "fragment.toml").write_text(  # a fragment (no [part]): not a test
        '[[study]]\nname = "x"\nrf_frequency = "2 GHz"\nrf_power = "-20 dBm"\n'
        'lo_power = "0 dBm"\nread = ["wanted"]\n', encoding="utf-8")
    (folder / "settings.toml").write_text('[tool]\nname = "anything"\n', encoding="utf-8")
    return folder


def test_only_sequences_are_collected(pytester):
    folder = _project(pytester, failing=True)
    (folder / "tiny.golden.toml").write_text("format = 1\n", encoding="utf-8")
    result = pytester.runpytest("--collect-only", "-q", str(folder))
    out = result.stdout.str()
    assert "tiny.toml::tiny" in out and "too-strict.toml::too-strict" in out, out
    for name in ("bench.toml", "fragment.toml", "settings.toml", "golden"):
        assert name not in out, out
    assert "2 tests collected" in out


def test_nothing_is_collected_from_the_projects_own_testpaths(pytester):
    folder = _project(pytester)
    pytester.makeini(f"[pytest]\ntestpaths = {folder.name}\n")
    assert "no tests collected" in pytester.runpytest("--collect-only", "-q").stdout.str()


def test_a_failing_sequence_prints_the_figures_that_missed(pytester):
    folder = _project(pytester, failing=True)
    xml = pytester.path / "out.xml"
    result = pytester.runpytest_subprocess(str(folder), f"--junitxml={xml}",
                                           "-p", "no:cacheprovider")
    result.assert_outcomes(passed=1, failed=1)
    out = result.stdout.str()
    assert "run verdict FAIL" in out
    assert "limits missed:" in out
    row = next(line for line in out.splitlines() if line.startswith("conversion_gain"))
    assert "≥ 13.5 dB" in row and "gain" in row and "dB" in row
    measured, missed = re.search(r"(\d+\.\d+) dB\s+(\d+\.\d+) dB", row).groups()
    assert float(missed) == pytest.approx(13.5 - float(measured), abs=1e-3), row
    cases = {c.get("name"): c for c in ElementTree.parse(xml).iter("testcase")}
    assert set(cases) == {"tiny", "too-strict"}
    assert cases["too-strict"].find("failure") is not None
    props = {p.get("name"): p.get("value") for p in cases["tiny"].iter("property")}
    assert props["run_verdict"] == "pass"


def test_tags_become_markers(pytester):
    folder = _project(pytester, failing=True)
    out = pytester.runpytest("--collect-only", "-q", "-m", "strict", "--strict-markers",
                             str(folder)).stdout.str()
    assert "too-strict" in out and "tiny.toml" not in out, out
    out = pytester.runpytest("--collect-only", "-q", "-m", "smoke_test",
                             str(folder)).stdout.str()
    assert "tiny.toml::tiny" in out and "too-strict" not in out, out


def test_golden_figures_out_of_tolerance_fail_with_a_table(pytester):
    folder = _project(pytester)
    (folder / "tiny.golden.toml").write_text(
        'format = 1\n\n[[figure]]\nname = "conversion_gain"\nvalue = 20.0\n'
        'tolerance = 0.5\nconditions = { study = "gain" }\n', encoding="utf-8")
    result = pytester.runpytest_subprocess(str(folder), "-p", "no:cacheprovider")
    result.assert_outcomes(failed=1)
    out = result.stdout.str()
    assert "golden figures missed:" in out and "20 ± 0.5 dB" in out, out


def test_a_golden_file_naming_an_unknown_figure_is_refused(pytester):
    folder = _project(pytester)
    (folder / "tiny.golden.toml").write_text(
        'format = 1\n\n[[figure]]\nname = "conversion_gian"\nvalue = 12.0\n'
        'tolerance = 0.5\n', encoding="utf-8")
    result = pytester.runpytest_subprocess(str(folder), "-p", "no:cacheprovider")
    result.assert_outcomes(failed=1)
    out = result.stdout.str()
    assert "refused before the run" in out
    assert "tiny.golden.toml:4: figure[0].name" in out, out
    assert "unknown figure 'conversion_gian'" in out and "conversion_gain" in out


def test_changed_since_keeps_only_the_touched_sequences(pytester):
    if shutil.which("git") is None:
        pytest.skip("git is not installed")
    folder = _project(pytester, failing=True)
    git = ["git", "-c", "user.name=t", "-c", "user.email=t@example.invalid"]
    subprocess.run(["git", "init", "-q"], cwd=pytester.path, check=True)
    subprocess.run([*git, "add", "-A"], cwd=pytester.path, check=True)
    subprocess.run([*git, "commit", "-qm", "start"], cwd=pytester.path, check=True)
    path = folder / "too-strict.toml"
    path.write_text(path.read_text(encoding="utf-8") + "\n# touched\n", encoding="utf-8")
    out = pytester.runpytest("--collect-only", "-q", "--changed-since", "HEAD",
                             str(folder)).stdout.str()
    assert "too-strict" in out and "tiny.toml" not in out, out
    result = pytester.runpytest("--collect-only", "-q", "--changed-since", "no-such-rev",
                                str(folder))
    assert "no-such-rev" in result.stderr.str() + result.stdout.str()
