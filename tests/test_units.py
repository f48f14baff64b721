"""The unit parser: the only place strings become numbers."""

import math

import pytest

from sweeprig.errors import UnitError
from sweeprig.units import parse_quantity


@pytest.mark.parametrize(
    ("text", "kind", "expected"),
    [
        ("2.4 GHz", "frequency", 2.4e9),
        ("70MHz", "frequency", 70e6),
        ("10 kHz", "frequency", 1e4),
        (2.4e9, "frequency", 2.4e9),
        ("-10 dBm", "power", -10.0),
        ("0 dBW", "power", 30.0),
        ("1 mW", "power", 0.0),  # P[dBm] = 10·log10(P / 1 mW), definition
        ("1 W", "power", 30.0),
        ("3.3 V", "voltage", 3.3),
        ("120 mA", "current", 0.12),
        ("50 ms", "time", 0.05),
        ("10 min", "time", 600.0),
        ("85 degC", "temperature", 85.0),
        ("-40 °C", "temperature", -40.0),
        ("300 K", "temperature", 300.0 - 273.15),
        ("3 dB", "level_db", 3.0),
        ("16", "count", 16.0),
    ],
)
def test_parses_values_as_people_write_them(text, kind, expected):
    assert math.isclose(parse_quantity(text, kind), expected, rel_tol=1e-12, abs_tol=1e-12)


@pytest.mark.parametrize(
    ("value", "kind", "fragment"),
    [
        ("2.4 GHz", "power", "not a power unit"),
        ("fast", "time", "not a number"),
        ("nan GHz", "frequency", "not a number"),
        (float("inf"), "frequency", "finite"),
        (True, "power", "not a quantity"),
        ("-1 mW", "power", "positive"),
        ("1.5", "count", "whole"),
        ([1], "power", "list"),
    ],
)
def test_rejects_bad_values_with_a_fix(value, kind, fragment):
    with pytest.raises(UnitError) as err:
        parse_quantity(value, kind, where="seq.toml:3: sweep.rf_power")
    text = str(err.value)
    assert fragment in text
    assert "seq.toml:3: sweep.rf_power" in text
    assert "fix:" in text
