"""Lazy expansion: order, stable indices, counts without expanding, readings per point."""

import itertools
import math
from pathlib import Path

import pytest

from sweeprig.errors import InputError
from sweeprig.formats.bench import load_bench
from sweeprig.formats.sequence import load_sequence, sequence_from_dict
from sweeprig.plan import count_points, iter_points, layout, point_at, study_counts

ROOT = Path(__file__).resolve().parents[2]
SIM_BENCH = ROOT / "sequences" / "benches" / "sim.toml"


def seq(studies: list[dict], **top: object):
    data = {
        "part": {"id": "KX-1", "expected_gain": "-7 dB", "expected_lo_if_isolation": "35 dB"},
        "mixing": {"if_frequency": "70 MHz"},
        "study": studies,
        **top,
    }
    return sequence_from_dict(data, max_points=10**12)


GAIN = {
    "name": "gain",
    "rf_frequency": {"start": "2.3 GHz", "stop": "2.5 GHz", "step": "100 MHz"},
    "rf_power": ["-30 dBm", "-20 dBm"],
    "lo_power": "7 dBm",
    "read": ["wanted"],
}


def test_order_slow_settings_outermost() -> None:
    s = seq([GAIN, {**GAIN, "name": "second", "rf_frequency": "2.4 GHz"}],
            conditions={"temperature": [-40, 25, 85], "supply": [3.0, 3.3]})
    points = list(iter_points(s))
    assert len(points) == count_points(s) == 3 * 2 * (6 + 2)
    assert [p.index for p in points] == list(range(len(points)))
    # temperature outermost (in the order of least chamber travel from room temperature:
    # 25, 85, -40 degC), then supply, then the studies in file order
    assert [p.temperature_c for p in points[:16]] == [25.0] * 16
    assert [p.temperature_c for p in points[16::16]] == [85.0, -40.0]
    assert [p.supply_v for p in points[:8]] == [3.0] * 8
    assert [p.study for p in points[:8]] == ["gain"] * 6 + ["second"] * 2
    # within the study: rf_frequency (outer) then rf_power (inner), the default nesting
    assert [(p.rf_freq_hz, p.rf_power_dbm) for p in points[:4]] == [
        (2.3e9, -30.0), (2.3e9, -20.0), (2.4e9, -30.0), (2.4e9, -20.0)]
    assert points[-1].temperature_c == -40.0 and points[-1].supply_v == 3.3


def test_temperatures_in_the_order_of_least_chamber_travel() -> None:
    """From room temperature (23 degC) a chamber travels least going to the nearer end first
    and then to the other; "as_written" keeps the file's order."""
    def order(temperatures, **extra):
        s = seq([GAIN], conditions={"temperature": temperatures, **extra})
        return [p.temperature_c for p in iter_points(s)][::6]

    assert order([-40, 25, 85]) == [25.0, 85.0, -40.0]  # 187 degC of travel, not 188
    assert order([85, -40, 25]) == [25.0, 85.0, -40.0]
    assert order([-55, 25, 125]) == [-55.0, 25.0, 125.0]  # 258, not 282
    assert order([-40, -10]) == [-10.0, -40.0]
    assert order([-40, 25, 85], temperature_order="as_written") == [-40.0, 25.0, 85.0]


def test_declared_nesting() -> None:
    s = seq([{**GAIN, "nesting": ["rf_power"]}])
    got = [(p.rf_power_dbm, p.rf_freq_hz) for p in iter_points(s)]
    assert got[:3] == [(-30.0, 2.3e9), (-30.0, 2.4e9), (-30.0, 2.5e9)]


def test_lo_follows_rf_and_explicit_lo() -> None:
    s = seq([GAIN, {**GAIN, "name": "fixed-lo", "lo_frequency": "2.33 GHz",
                    "rf_frequency": ["2.40 GHz", "2.41 GHz"], "rf_power": -20}])
    pts = list(iter_points(s))
    assert pts[0].lo_freq_hz == 2.23e9 and pts[0].if_freq_hz == 70e6
    fixed = [p for p in pts if p.study == "fixed-lo"]
    assert [p.lo_freq_hz for p in fixed] == [2.33e9, 2.33e9]
    assert [p.if_freq_hz for p in fixed] == pytest.approx([70e6, 80e6])


def test_indices_are_stable_and_resumable() -> None:
    s = seq([GAIN], conditions={"temperature": [25, 85]})
    first = list(iter_points(s))
    again = list(iter_points(s))
    assert first == again
    resumed = list(iter_points(s, start=5))
    assert resumed == first[5:]
    for p in first:
        assert point_at(s, p.index) == p
    with pytest.raises(IndexError):
        point_at(s, len(first))


def test_same_file_same_numbering(tmp_path: Path) -> None:
    path = ROOT / "sequences" / "demo" / "quick.toml"
    a = [(p.index, p.study, p.rf_freq_hz, p.rf_power_dbm) for p in
         iter_points(load_sequence(path))]
    b = [(p.index, p.study, p.rf_freq_hz, p.rf_power_dbm) for p in
         iter_points(load_sequence(path))]
    assert a == b


def test_huge_plan_is_counted_not_expanded() -> None:
    big = {**GAIN, "rf_frequency": {"start": "1 GHz", "stop": "2 GHz", "points": 1_000_000},
           "rf_power": {"start": -30, "stop": 0, "points": 1000}}
    s = seq([big])
    assert count_points(s) == 10**9  # arithmetic: 10^6 × 10^3
    assert study_counts(s) == {"gain": 10**9}
    # Expansion is lazy: the last point is built directly from its index.
    last = point_at(s, 10**9 - 1)
    assert last.rf_freq_hz == 2e9 and last.rf_power_dbm == 0.0
    # ...and iter_points refuses it with the count in the message.
    with pytest.raises(InputError, match="1,000,000,000 points"):
        next(iter_points(s))
    lazy = iter_points(s, max_points=10**10, start=10**9 - 2)
    assert [p.index for p in lazy] == [10**9 - 2, 10**9 - 1]


def test_range_shapes() -> None:
    s = seq([{**GAIN, "rf_frequency": {"start": "1 GHz", "stop": "8 GHz", "points": 4,
                                       "scale": "log"}, "rf_power": -20}])
    freqs = [p.rf_freq_hz for p in iter_points(s)]
    assert freqs == pytest.approx([1e9, 2e9, 4e9, 8e9])
    s = seq([{**GAIN, "rf_power": {"start": -30, "stop": -20, "step": 2.5}}])
    assert [p.rf_power_dbm for p in itertools.islice(iter_points(s), 5)] == [
        -30.0, -27.5, -25.0, -22.5, -20.0]


def test_readings_two_tone_and_attenuation_check() -> None:
    tt = {"name": "tt", "rf_frequency": "2.4 GHz", "tone_spacing": "1 MHz",
          "rf_power": -20, "lo_power": 7, "read": ["wanted", "im3", "im2"],
          "attenuation_check": True}
    (p,) = list(iter_points(seq([tt])))
    assert p.rf2_freq_hz == pytest.approx(2.401e9) and p.rf2_power_dbm == -20.0
    by_name = {r.name: r for r in p.readings}
    assert set(by_name) == {"wanted", "wanted.tone2", "im3.lower", "im3.upper", "im2.diff",
                            "im2.sum", "im3.lower.att10", "im3.upper.att10", "im2.diff.att10",
                            "im2.sum.att10"}
    assert by_name["im3.lower"].freq_hz == pytest.approx(69e6)
    assert by_name["im3.upper"].freq_hz == pytest.approx(72e6)
    assert by_name["im2.diff"].freq_hz == pytest.approx(1e6)
    check = by_name["im3.lower.att10"]
    assert check.attenuation_check and check.repeat_of == "im3.lower"
    assert check.analyzer.attenuation_db == by_name["im3.lower"].analyzer.attenuation_db + 10
    # Auto RBW keeps the neighbouring tones (1 MHz away) out: at most a tenth of that.
    assert by_name["im3.lower"].analyzer.rbw_hz <= 100e3
    assert by_name["im3.lower"].analyzer.span_hz <= 1e6


def test_image_reading_retunes_the_rf() -> None:
    s = seq([{**GAIN, "rf_frequency": "2.4 GHz", "rf_power": -20, "read": ["image"]}])
    (p,) = list(iter_points(s))
    (r,) = p.readings
    assert r.rf_retune_hz == pytest.approx(2.26e9)  # 2·f_LO − f_RF
    assert r.freq_hz == pytest.approx(70e6) and r.port == "if"


def test_mxn_products_and_ports() -> None:
    s = seq([{**GAIN, "rf_frequency": "2.4 GHz", "rf_power": -20,
              "read": [{"kind": "mxn", "order": 3, "max_frequency": "5 GHz"}, "lo_at_rf",
                       "supply_current", "input_power"]}],
            conditions={"supply": "3.3 V"})  # reading supply_current needs a supply set
    (p,) = list(iter_points(s))
    names = [r.name for r in p.readings]
    assert "mxn.1x-1" in names and "mxn.1x1" in names  # 70 MHz and 4.73 GHz
    assert "mxn.2x1" not in names  # 7.06 GHz is above max_frequency
    lo_rf = next(r for r in p.readings if r.kind == "lo_at_rf")
    assert lo_rf.port == "rf" and lo_rf.freq_hz == pytest.approx(2.33e9)
    current = next(r for r in p.readings if r.kind == "supply_current")
    assert current.instrument == "dc" and current.analyzer is None
    pm = next(r for r in p.readings if r.kind == "input_power")
    assert pm.instrument == "pm" and pm.freq_hz == 2.4e9


def test_auto_settings_follow_the_rules() -> None:
    s = seq([{**GAIN, "rf_frequency": "2.4 GHz", "rf_power": -10, "read": ["wanted"]}])
    bench = load_bench(SIM_BENCH)
    (p,) = list(iter_points(s, bench))
    a = p.readings[0].analyzer
    # Predicted IF-port input (sim bench: 1.5 dB IF loss): wanted −10 − 7 − 1.5, LO leakage
    # 7 − 35 − 1.5, RF feedthrough with unknown isolation (0 dB) −10 − 1.5, and the other
    # sideband (sum frequency, 4.73 GHz) as strong as the wanted, added as powers.
    total = 10 * math.log10(sum(10 ** (x / 10) for x in (-18.5, -29.5, -11.5, -18.5)))
    assert total == pytest.approx(-9.99, abs=0.01)
    # Attenuation: smallest even dB bringing the total down to the −20 dBm mixer level.
    assert a.attenuation_db == 2 * math.ceil((total + 20) / 2) == 12.0
    assert a.reference_level_dbm == 5 * math.ceil((total + 3) / 5)
    assert a.center_hz == pytest.approx(70e6)
    # RBW: widest 1-3-10 step whose DANL (−174 + NF 24 + attenuation + 10·log10 RBW) sits
    # 10 dB below the expected wanted level −18.5 dBm; capped at 1 MHz.
    danl_ok = -18.5 - 10
    widest = 10 ** ((danl_ok + 174 - 24 - a.attenuation_db) / 10)
    assert a.rbw_hz == min(1e6, max(r for r in (1e5, 3e5, 1e6) if r <= widest))
    assert a.span_hz == pytest.approx(20 * a.rbw_hz)
    assert a.averages == 1
    # 2.5·span/RBW² per sweep, at least 1 ms (common practice, no single source)
    assert a.sweep_time_s == pytest.approx(max(2.5 * a.span_hz / a.rbw_hz**2, 1e-3))


def test_explicit_analyzer_settings_win() -> None:
    s = seq([{**GAIN, "rf_frequency": "2.4 GHz", "rf_power": -20,
              "analyzer": {"rbw": "10 kHz", "averages": 4},
              "read": [{"kind": "wanted", "analyzer": {"span": "200 kHz", "rbw": "auto"}}]}],
            analyzer={"attenuation": "20 dB"})
    (p,) = list(iter_points(s))
    a = p.readings[0].analyzer
    assert a.span_hz == 200e3 and a.attenuation_db == 20.0 and a.averages == 4
    # "auto" at the reading overrides the study's 10 kHz: same RBW as with no setting at all.
    plain = seq([{**GAIN, "rf_frequency": "2.4 GHz", "rf_power": -20, "read": ["wanted"]}],
                analyzer={"attenuation": "20 dB"})
    assert a.rbw_hz == next(iter_points(plain)).readings[0].analyzer.rbw_hz
    assert layout(s).total == 1


def test_a_run_takes_the_points_its_pre_flight_planned_and_they_are_the_same() -> None:
    from sweeprig.plan.preflight import preflight

    sequence = load_sequence(ROOT / "sequences" / "demo" / "quick.toml")
    bench = load_bench(SIM_BENCH)
    report = preflight(sequence, bench)
    kept = report.points
    assert kept is not None and kept.keeps_all
    taken = list(iter_points(sequence, bench, planned=kept))
    assert taken == list(iter_points(sequence, bench))  # planned afresh: the same points
    assert [p.index for p in taken] == list(range(count_points(sequence)))
    assert not kept._kept  # each let go once taken
    # a builder of another bench object is not used
    other = load_bench(SIM_BENCH)
    assert list(iter_points(sequence, other, planned=kept, stop=2)) == taken[:2]
