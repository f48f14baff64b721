"""Predicted real-bench duration: settling, sweeps, chamber ramps and soaks, overhead."""

import pytest

from sweeprig.formats.sequence import sequence_from_dict
from sweeprig.plan import estimate_duration, format_duration, iter_points


def seq(study: dict, **top: object):
    return sequence_from_dict({
        "part": {"id": "KX-1", "expected_gain": "-7 dB"},
        "mixing": {"if_frequency": "70 MHz"},
        "study": [{"name": "s", "rf_frequency": "2.4 GHz", "rf_power": -20, "lo_power": 7,
                   "read": ["wanted"], **study}],
        **top,
    }, max_points=10**9)


def test_parts_add_up() -> None:
    s = seq({"rf_power": [-30, -20, -10], "analyzer": {"span": "100 kHz", "rbw": "1 kHz",
                                                       "averages": 4}},
            conditions={"temperature": [25, 85], "soak": "10 min", "settle": "50 ms"})
    est = estimate_duration(s, command_overhead_s=0.0, ramp_c_per_min=5.0,
                            start_temperature_c=25.0)
    n = 6
    # sweep time 2.5·span/RBW² = 2.5·1e5/1e6 = 0.25 s per sweep (common practice, k = 2.5)
    assert est.sweep_s == pytest.approx(n * 4 * 0.25)
    assert est.settle_s == pytest.approx(n * 0.05)
    # chamber: 25 → 25 (no ramp) + soak, then 25 → 85 at 5 degC/min = 12 min + soak
    assert est.chamber_s == pytest.approx(600 + 12 * 60 + 600)
    assert est.total_s == pytest.approx(est.sweep_s + est.settle_s + est.chamber_s)


def test_overhead_counts_commands() -> None:
    s = seq({"read": ["wanted", "supply_current"]}, conditions={"supply": "3.3 V"})
    est = estimate_duration(s, command_overhead_s=0.01)
    # 4 source commands + 10 for the analyzer reading + 2 for the supply reading
    assert est.overhead_s == pytest.approx(16 * 0.01)


def test_sampled_estimate_for_big_studies() -> None:
    s = seq({"rf_frequency": {"start": "2 GHz", "stop": "3 GHz", "points": 5000},
             "analyzer": {"span": "100 kHz", "rbw": "10 kHz"}})
    est = estimate_duration(s, sample_limit=100)
    assert est.sampled and est.studies[0].sampled
    exact = sum(r.analyzer.measure_time_s for p in iter_points(s) for r in p.readings)
    assert est.sweep_s == pytest.approx(exact, rel=1e-9)  # identical settings at every point


def test_format_duration() -> None:
    assert format_duration(12.34) == "12.3 s"
    assert format_duration(90) == "1.5 min"
    assert format_duration(5400) == "1 h 30 min"
    assert format_duration(3 * 86400 + 7200) == "3 d 2 h"
