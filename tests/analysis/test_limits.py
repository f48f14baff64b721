"""Spec limits: pass, fail, inconclusive."""

import math

import pytest

from sweeprig.analysis.figures import FEW_POINTS, IN_NOISE, OVERLOAD, Figure
from sweeprig.analysis.limits import (
    FAIL,
    INCONCLUSIVE,
    PASS,
    Limit,
    assess,
    judge,
    limits_from_mapping,
)
from sweeprig.errors import InputError, UnitError

HOT = {"temperature_c": 85.0, "study": "two_tone"}
COLD = {"temperature_c": -40.0, "study": "two_tone"}


def _verdict(figure, limit):
    return judge(figure, limit).verdict


def test_numbers_pass_and_fail():
    limit = Limit("iip3", min=10.0, max=20.0)
    assert _verdict(Figure("iip3", 12.0, "dBm"), limit) == PASS
    assert _verdict(Figure("iip3", 10.0, "dBm"), limit) == PASS  # limits are inclusive
    assert _verdict(Figure("iip3", 9.9, "dBm"), limit) == FAIL
    assert _verdict(Figure("iip3", 20.1, "dBm"), limit) == FAIL


def test_upper_bounds():
    spur_max = Limit("spur_dbc", max=-60.0)
    assert _verdict(Figure("spur_dbc", -80.0, "dBc", "<"), spur_max) == PASS
    assert _verdict(Figure("spur_dbc", -50.0, "dBc", "<"), spur_max) == INCONCLUSIVE
    gain_min = Limit("conversion_gain", min=5.0)
    assert _verdict(Figure("conversion_gain", 4.0, "dB", "<"), gain_min) == FAIL
    assert _verdict(Figure("conversion_gain", 7.0, "dB", "<"), gain_min) == INCONCLUSIVE


def test_lower_bounds():
    p1db_min = Limit("input_p1db", min=0.0)
    assert _verdict(Figure("input_p1db", 12.0, "dBm", ">"), p1db_min) == PASS
    assert _verdict(Figure("input_p1db", -3.0, "dBm", ">"), p1db_min) == INCONCLUSIVE
    drive_max = Limit("lo_power_for_gain", max=3.0)
    assert _verdict(Figure("lo_power_for_gain", 6.0, "dBm", ">"), drive_max) == FAIL


def test_nan_and_suspect_flags_are_inconclusive():
    limit = Limit("iip3", min=10.0)
    assert _verdict(Figure("iip3", math.nan, "dBm"), limit) == INCONCLUSIVE
    flagged = judge(Figure("iip3", 15.0, "dBm", flags=(OVERLOAD, FEW_POINTS)), limit)
    assert flagged.verdict == INCONCLUSIVE and "overload" in flagged.reason
    # in_noise is carried by the bound, not a reason to doubt it
    assert _verdict(Figure("iip3", 15.0, "dBm", ">", flags=(IN_NOISE,)), limit) == PASS


def test_conditions_restrict_a_limit_and_overall_verdict():
    figures = [
        Figure("iip3", 12.0, "dBm", conditions=HOT),
        Figure("iip3", 8.0, "dBm", conditions=COLD),
    ]
    hot_only = Limit("iip3", min=10.0, conditions={"temperature_c": 85})
    result = assess(figures, [hot_only])
    assert result.verdict == PASS and len(result.judgements) == 1
    everywhere = assess(figures, [Limit("iip3", min=10.0)])
    assert everywhere.verdict == FAIL and everywhere.counts == {PASS: 1, FAIL: 1, INCONCLUSIVE: 0}
    ranged = Limit("iip3", min=10.0, conditions={"temperature_c": (-50.0, 0.0)})
    assert assess(figures, [ranged]).verdict == FAIL
    by_study = Limit("iip3", min=0.0, conditions={"study": "other"})
    untested = assess(figures, [hot_only, by_study])
    assert untested.verdict == INCONCLUSIVE and untested.untested == (by_study,)
    doubtful = assess([Figure("iip3", 12.0, "dBm", ">", conditions=HOT),
                       Figure("iip3", 9.0, "dBm", ">", conditions=HOT)], [hot_only])
    assert doubtful.verdict == INCONCLUSIVE
    assert assess([], []).verdict == INCONCLUSIVE


def test_limits_from_plain_data():
    limits = limits_from_mapping({
        "iip3": {"min": "10 dBm", "conditions": {"temperature_c": "85 degC"}},
        "spur_dbc": {"max": "-60 dBc"},
        "supply_current": {"max": "60 mA"},
        "dc_power": {"max": 0.25},
        "gain_tempco": {"min": -0.05, "max": 0},
        "conversion_gain": [
            {"min": 5},
            {"min": 4, "conditions": {"rf_freq_hz": ["2 GHz", "3 GHz"]}},
        ],
    })
    by_name = {(lim.name, i): lim for i, lim in enumerate(limits)}
    assert by_name[("iip3", 0)].min == 10.0
    assert by_name[("iip3", 0)].conditions["temperature_c"] == 85.0
    assert by_name[("spur_dbc", 1)].max == -60.0
    assert by_name[("supply_current", 2)].max == pytest.approx(0.060)
    assert by_name[("dc_power", 3)].max == 0.25
    assert by_name[("conversion_gain", 6)].conditions["rf_freq_hz"] == (2e9, 3e9)
    assert "≥ 10 dBm" in by_name[("iip3", 0)].text()


@pytest.mark.parametrize(
    ("data", "message"),
    [
        ({"iip4": {"min": 1}}, "not a figure"),
        ({"iip3": {"min": 20, "max": 10}}, "above max"),
        ({"iip3": {}}, "neither min nor max"),
        ({"iip3": {"minimum": 1}}, "unknown key"),
        ({"iip3": 10}, "must be a table"),
        ({"gain_tempco": {"min": "fast"}}, "not a number"),
        ({"iip3": {"min": 1, "conditions": {"temperature_c": [1, 2, 3]}}}, "two values"),
        (["iip3"], "table of figure names"),
    ],
)
def test_bad_limits_name_the_entry(data, message):
    with pytest.raises(InputError, match=message):
        limits_from_mapping(data, where="part.toml:limits")


def test_bad_limit_unit_is_a_unit_error():
    with pytest.raises(UnitError):
        limits_from_mapping({"iip3": {"min": "10 MHz"}})
    with pytest.raises(InputError, match="did you mean iip3"):
        limits_from_mapping({"iip33": {"min": 1}})
