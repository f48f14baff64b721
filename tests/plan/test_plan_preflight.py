"""Pre-flight: every point against every limit, refusals that name point, port and limit."""

from pathlib import Path

import pytest

from sweeprig.errors import InputError, SafetyLimitError
from sweeprig.formats.bench import load_bench
from sweeprig.formats.sequence import sequence_from_dict
from sweeprig.plan import check_limits, preflight

ROOT = Path(__file__).resolve().parents[2]
SIM_BENCH = ROOT / "sequences" / "benches" / "sim.toml"


@pytest.fixture(scope="module")
def bench():
    return load_bench(SIM_BENCH)


def seq(study: dict, part: dict | None = None, **top: object):
    data = {
        "part": {"id": "KX-1", "expected_gain": "-7 dB", **(part or {})},
        "mixing": {"if_frequency": "70 MHz"},
        "study": [{"name": "s", "rf_frequency": "2.4 GHz", "rf_power": -20, "lo_power": 7,
                   "read": ["wanted"], **study}],
        **top,
    }
    return sequence_from_dict(data)


def test_sim_bench_and_demo_pass(bench) -> None:
    from sweeprig.formats.sequence import load_sequence

    report = preflight(load_sequence(ROOT / "sequences" / "demo" / "quick.toml"), bench)
    assert report.ok and report.points_checked == 5


def test_source_limit_names_point_port_and_limit(bench) -> None:
    # rf source setting = DUT power + 3.0 dB path loss; limit 15 dBm → 12.5 dBm at the DUT
    # gives 15.5 dBm at the source: refused.
    s = seq({"rf_power": [0, 10, 12.5, 14]})
    with pytest.raises(SafetyLimitError) as info:
        preflight(s, bench)
    err = info.value
    assert "rf source setting would be 15.50 dBm" in err.what
    assert "limit 15 dBm" in err.what
    assert "limits.source_max_power.rf" in err.what and "sim.toml:" in err.what
    assert "point 2 (study 's'" in err.what and "at 12.5 dBm" in err.what
    assert "Caution" in err.what and "damage" in err.what
    assert err.exit_code == 3


def test_report_keeps_every_check(bench) -> None:
    report = check_limits(seq({"rf_power": [0, 10, 12.5, 14]}), bench)
    assert not report.ok
    rf = next(c for c in report.checks if c.label == "rf source setting")
    assert rf.violation_index == 2 and rf.worst == pytest.approx(17.0) and rf.worst_index == 3
    lo = next(c for c in report.checks if c.label == "lo source setting")
    assert lo.ok and lo.worst == pytest.approx(9.0)  # 7 dBm + 2.0 dB path loss


def test_two_tone_total_against_part_rating(bench) -> None:
    # Two tones of 12.2 dBm each are 15.2 dBm in all (10·log10(2) = 3.01 dB more): above the
    # part's 15 dBm rating although each tone alone is below it.
    s = seq({"tone_spacing": "1 MHz", "rf_power": 12.2, "read": ["wanted", "im3"]})
    report = check_limits(s, bench)
    dut = next(c for c in report.checks if c.label.startswith("DUT RF input"))
    assert dut.worst == pytest.approx(12.2 + 3.0103, abs=1e-3)
    assert not dut.ok
    rf2 = next(c for c in report.checks if c.label == "rf2 source setting")
    assert rf2.worst == pytest.approx(21.2) and not rf2.ok


def test_analyzer_input_prediction(bench) -> None:
    # IF port: LO leakage with unknown isolation counts in full: 16 dBm LO − 1.5 dB loss.
    s = seq({"lo_power": 16, "rf_power": -30})
    sa = next(c for c in check_limits(s, bench).checks if c.label.startswith("analyzer"))
    assert sa.worst == pytest.approx(14.5, abs=0.01)
    # With a stated 30 dB isolation it is 30 dB lower (the wanted output then dominates less).
    s = seq({"lo_power": 16, "rf_power": -30},
            part={"expected_lo_if_isolation": 30, "expected_rf_if_isolation": 30})
    sa = next(c for c in check_limits(s, bench).checks if c.label.startswith("analyzer"))
    assert sa.worst < -14


def test_analyzer_limit_refusal(tmp_path: Path) -> None:
    text = (SIM_BENCH.read_text(encoding="utf-8")
            .replace('analyzer_max_input = "20 dBm"', 'analyzer_max_input = "0 dBm"'))
    path = tmp_path / "bench.toml"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(SafetyLimitError) as info:
        preflight(seq({"lo_power": 7}), load_bench(path))
    assert "analyzer input (IF port)" in info.value.what
    assert "limits.analyzer_max_input" in info.value.what


def test_rf_port_reading_counts_reflected_rf(bench) -> None:
    s = seq({"rf_power": 10, "read": ["lo_at_rf"]}, part={"expected_lo_rf_isolation": 40})
    sa_rf = next(c for c in check_limits(s, bench).checks if c.label.endswith("(RF port)"))
    # full RF power as if reflected, minus the 2.5 dB RF-port path loss (+ tiny LO leakage)
    assert sa_rf.worst == pytest.approx(7.5, abs=0.01)


def test_image_frequency_checked_at_the_source(tmp_path: Path) -> None:
    csv = tmp_path / "rf.csv"
    csv.write_text("2.3e9,3\n2.5e9,3\n", encoding="utf-8")
    text = SIM_BENCH.read_text(encoding="utf-8").replace('rf = "3.0 dB"',
                                                          'rf = { csv = "rf.csv" }')
    path = tmp_path / "bench.toml"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(InputError) as info:
        preflight(seq({"read": ["image"]}), load_bench(path))  # image at 2.26 GHz
    assert "2.26 GHz" in info.value.what and "outside the table" in info.value.what
    assert "path_loss.rf" in info.value.where


def test_supply_and_chamber_limits(bench) -> None:
    s = seq({}, conditions={"supply": [3.3, 6.0], "temperature": [25, 150]})
    report = check_limits(s, bench)
    bad = {(c.label, c.bound) for c in report.violations}
    # bench limit and part rating are both 5.5 V: the one written first names the limit
    assert ("supply voltage", "max") in bad and ("chamber set point", "max") in bad
    supply = next(c for c in report.violations if c.label == "supply voltage")
    assert "limits.supply_max_voltage" in supply.limit_key
    with pytest.raises(SafetyLimitError) as info:
        preflight(s, bench)
    # the first violating point in index order: 25 degC, 6.0 V (index 1)
    assert "point 1 " in info.value.what and "6 V" in info.value.what


def test_missing_limit_is_an_input_error(tmp_path: Path) -> None:
    text = SIM_BENCH.read_text(encoding="utf-8")
    assert ', lo = "18 dBm" }' in text
    path = tmp_path / "bench.toml"
    path.write_text(text.replace(', lo = "18 dBm" }', " }"), encoding="utf-8")
    with pytest.raises(InputError) as info:
        preflight(seq({}), load_bench(path))
    assert "limits.source_max_power.lo" in info.value.what


def test_missing_role(tmp_path: Path) -> None:
    text = SIM_BENCH.read_text(encoding="utf-8").replace(
        'rf2     = { resource = "sim", profile = "scpi-source" }\n', "")
    path = tmp_path / "bench.toml"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(InputError) as info:
        preflight(seq({"tone_spacing": "1 MHz", "read": ["im3"]}), load_bench(path))
    assert "no 'rf2' role" in info.value.what
    assert "[roles.rf2]" in (info.value.fix or "")


def test_large_plan_checked_quickly(bench) -> None:
    # 10^6 points are checked vectorised; the worst point is found exactly.
    s = seq({"rf_frequency": {"start": "2 GHz", "stop": "3 GHz", "points": 1000},
             "rf_power": {"start": -30, "stop": 0, "points": 1000}})
    report = check_limits(s, bench)
    assert report.points_checked == 10**6
    rf = next(c for c in report.checks if c.label == "rf source setting")
    assert rf.worst == pytest.approx(3.0) and rf.worst_index == 999


def test_large_study_has_its_analyzer_settings_checked_at_the_corners(bench) -> None:
    # reading by reading planning costs about 0.1 ms a point: a 10^6-point study is checked
    # at the corners of its grid, and the report says so
    s = seq({"rf_frequency": {"start": "2 GHz", "stop": "3 GHz", "points": 1000},
             "rf_power": {"start": -30, "stop": 0, "points": 1000}})
    report = check_limits(s, bench)
    assert any("corners" in note and "'s'" in note for note in report.notes)
    centre = next(c for c in report.checks if c.label == "analyzer centre frequency"
                  and c.bound == "max")
    assert centre.worst == pytest.approx(70e6)  # the wanted output: the LO follows the RF


def test_small_study_is_checked_reading_by_reading(bench) -> None:
    report = check_limits(seq({"rf_power": [-30, -20]}), bench)
    assert report.ok and report.notes == []
    labels = {c.label for c in report.checks}
    assert {"rf source frequency", "lo source frequency", "analyzer RBW",
            "analyzer reference level"} <= labels


def test_a_mangled_amount_is_written_by_its_magnitude() -> None:
    """A number far outside any instrument (a mangled file: 1.5e307 degC) is written with
    six significant digits, not its three hundred; ordinary ones with two decimals."""
    from sweeprig.plan.preflight import format_amount

    assert format_amount(1.4980776123850002e307, "degC") == "1.49808e+307 degC"
    assert format_amount(-70.0, "degC") == "-70.00 degC"
    assert format_amount(float("inf"), "V") == "inf V"
    assert format_amount(6.0, "V", precise=False) == "6 V"
