"""check and plan say, before the run, which readings cannot be trusted and why; a sequence
with on_risk = "refuse" is refused (exit 2); figures not stated are named as assumed."""

from pathlib import Path

import pytest

from sweeprig.engine.session import shipped_sequences_dir
from tests.support import check_app, invoke

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "sequences" / "demo" / "kx2417-characterisation.toml"

AT_ZERO = """\
[part]
id = "KX-1"
expected_gain = "10 dB"
expected_lo_if_isolation = "30 dB"
expected_rf_if_isolation = "30 dB"
[mixing]
if_frequency = "100 MHz"
[analyzer]
on_risk = "{policy}"
[[study]]
name = "two-tone"
rf_frequency = "2.2 GHz"
tone_spacing = "1 MHz"
rf_power = "-10 dBm"
lo_power = "0 dBm"
analyzer = {{ attenuation = "0 dB" }}
read = ["wanted", "im3"]
"""


@pytest.fixture(scope="module")
def app():
    return check_app()


def write(tmp_path: Path, policy: str) -> Path:
    path = tmp_path / f"{policy}.toml"
    path.write_text(AT_ZERO.format(policy=policy), encoding="utf-8")
    return path


def test_check_warns_and_names_each_reading(app, tmp_path: Path) -> None:
    result = invoke(app, "check", write(tmp_path, "warn"))
    assert result.exit_code == 0, result.output
    out = result.output
    assert "warning:" in out and "cannot be trusted as planned" in out
    assert "two-tone: im3.lower: analyzer_distortion" in out
    # the simulated bench states every figure of its analyzer and sources (phase noise too)
    assert "assumed, not stated by the bench file" not in out
    assert "third-order intercept" not in out  # stated by the sim bench's [analyzer]


def test_check_refuses_by_policy(app, tmp_path: Path) -> None:
    result = invoke(app, "check", write(tmp_path, "refuse"))
    assert result.exit_code == 2
    assert "study[0].read" in result.output and "cannot be trusted" in result.output
    assert "Traceback" not in result.output


def test_plan_table_of_readings_at_risk(app, tmp_path: Path) -> None:
    result = invoke(app, "plan", write(tmp_path, "warn"))
    assert result.exit_code == 0, result.output
    out = result.output
    assert "Readings that cannot be trusted as planned" in out
    assert "analyzer_distortion: the analyzer's own distortion" in out
    refused = invoke(app, "plan", write(tmp_path, "refuse"))
    assert refused.exit_code == 2 and "cannot be trusted" in refused.output


def test_demo_plans_with_its_risks_named(app) -> None:
    result = invoke(app, "check", DEMO)
    assert result.exit_code == 0, result.output
    assert "source_harmonic" in result.output  # m×n spurs made by the sources' harmonics


def test_a_bench_without_figures_is_checked_with_marked_assumptions(app, tmp_path: Path):
    text = (shipped_sequences_dir() / "benches" / "sim.toml").read_text(encoding="utf-8")
    start, end = text.index("# BEGIN stated figures"), text.index("# END stated figures")
    bench = tmp_path / "bench.toml"
    bench.write_text(text[:start] + text[end:], encoding="utf-8")
    result = invoke(app, "check", write(tmp_path, "warn"), "--bench", bench)
    assert result.exit_code == 0, result.output
    assert "assumed, not stated by the bench file" in result.output
    assert "phase noise" in result.output
