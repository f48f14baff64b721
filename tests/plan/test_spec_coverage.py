"""check_specs: a [[spec]] condition is matched against the planned axes by the analysis's own
rule, without listing axes that may hold millions of values."""

import pytest

from sweeprig.errors import InputError
from sweeprig.formats.sequence import sequence_from_dict
from sweeprig.plan.spec_coverage import check_specs

STUDY = {"name": "gain", "rf_frequency": "2.4 GHz", "rf_power": "-20 dBm",
         "lo_power": "7 dBm", "read": ["wanted"]}


def sequence(conditions: dict, spec: dict):
    return sequence_from_dict({
        "part": {"id": "KX-1 (fictional)", "expected_gain": "-7 dB"},
        "mixing": {"if_frequency": "70 MHz"},
        "conditions": conditions,
        "study": [STUDY],
        "spec": [{"figure": "conversion_gain_db", "min": "5 dB", **spec}],
    }, max_points=10**9)


@pytest.mark.parametrize(("supply", "visited"), [
    ("2.5 V", True), ("2.50001 V", False), ("4.0 V", True), ("4.00001 V", False),
    ("3.1 V", True), ("1 V", False),
])
def test_a_supply_on_a_15001_value_range(supply: str, visited: bool) -> None:
    seq = sequence({"supply": {"start": "2.5 V", "stop": "4.0 V", "step": "0.1 mV"}},
                   {"supply": supply})
    if visited:
        check_specs(seq)
        return
    with pytest.raises(InputError) as caught:
        check_specs(seq)
    assert caught.value.where == "spec[0].supply"
    assert "15,001 values from 2.5 to 4 V in steps of 0.0001 V" in caught.value.what


def test_a_temperature_on_a_linear_range() -> None:
    seq = sequence({"temperature": {"start": "-40 degC", "stop": "80 degC", "points": 7}},
                   {"temperature": "20 degC"})
    check_specs(seq)
    with pytest.raises(InputError, match="temperatures visited: -40, -20, 0, 20, 40, 60, 80"):
        check_specs(sequence({"temperature": {"start": "-40 degC", "stop": "80 degC",
                                              "points": 7}}, {"temperature": "25 degC"}))


def test_no_spec_no_check() -> None:
    seq = sequence({}, {})
    check_specs(seq.model_copy(update={"spec": ()}))
    check_specs(seq)
