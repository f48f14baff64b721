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
        (6e307, "frequency", "beyond 10000 GHz"),  # finite, but overflows harmonic products
        ("20000 GHz", "frequency", "beyond 10000 GHz"),
        (5.99e307, "power", "beyond ±300 dBm"),  # finite, but overflows 3rd-order products
        ("301 dBm", "power", "beyond ±300 dBm"),
        ("1e30 W", "power", "beyond ±300 dBm"),  # 330 dBm
        ("-1e300 dBm", "power", "beyond ±300 dBm"),
        ("2e6 dB", "level_db", "beyond ±1e+06 dB"),
    ],
)
def test_rejects_bad_values_with_a_fix(value, kind, fragment):
    with pytest.raises(UnitError) as err:
        parse_quantity(value, kind, where="seq.toml:3: sweep.rf_power")
    text = str(err.value)
    assert fragment in text
    assert "seq.toml:3: sweep.rf_power" in text
    assert "fix:" in text


def test_the_largest_levels_a_bench_can_meet_are_accepted():
    assert parse_quantity("300 dBm", "power") == 300.0
    assert parse_quantity("-300 dBm", "power") == -300.0
    assert parse_quantity("-174 dBm", "power") == -174.0  # kTB in 1 Hz at 290 K
    assert parse_quantity("3025 dB", "level_db") == 3025.0  # bounded by its field instead


# -- SI prefixes by case, the minus sign -----------------------------------------------------

#: The SI prefixes, transcribed from the BIPM's machine-readable SI Reference Point
#: (prefixes ontology, version 1.0.0: symbol and exponent of each prefix), which carries
#: Table 7 of the SI Brochure (BIPM, "The International System of Units", 9th edition, 2019)
#: and the four prefixes of the 27th CGPM (2022, Resolution 3). Micro's symbol there is the
#: Greek mu (U+03BC).
BIPM_PREFIXES = {
    "quetta": ("Q", 30), "ronna": ("R", 27), "yotta": ("Y", 24), "zetta": ("Z", 21),
    "exa": ("E", 18), "peta": ("P", 15), "tera": ("T", 12), "giga": ("G", 9),
    "mega": ("M", 6), "kilo": ("k", 3), "hecto": ("h", 2), "deca": ("da", 1),
    "deci": ("d", -1), "centi": ("c", -2), "milli": ("m", -3), "micro": ("\u03bc", -6),
    "nano": ("n", -9), "pico": ("p", -12), "femto": ("f", -15), "atto": ("a", -18),
    "zepto": ("z", -21), "yocto": ("y", -24), "ronto": ("r", -27), "quecto": ("q", -30),
}


def test_the_prefix_table_is_the_bipm_table():
    import scipy.constants

    from sweeprig.units import SI_PREFIXES

    table = {symbol.replace("\u00b5", "\u03bc"): entry for symbol, entry in SI_PREFIXES.items()
             if symbol != "u"}  # "u" stands in for micro where µ cannot be typed
    assert {s for s, _e in BIPM_PREFIXES.values()} == set(table)
    for name, (symbol, exponent) in BIPM_PREFIXES.items():
        assert table[symbol][0] == name
        assert table[symbol][1] == pytest.approx(10.0 ** exponent, rel=1e-15)
        # and against a general-purpose library (scipy spells deca "deka")
        assert table[symbol][1] == pytest.approx(
            getattr(scipy.constants, "deka" if name == "deca" else name), rel=1e-15)
    assert SI_PREFIXES["u"] == SI_PREFIXES["\u00b5"]


@pytest.mark.parametrize(
    ("text", "kind", "expected"),
    [
        ("100 mHz", "frequency", 0.1),       # m: milli (SI Brochure Table 7)
        ("100 MHz", "frequency", 100e6),     # M: mega
        ("10 mV", "voltage", 10e-3),
        ("2.4 ghz", "frequency", 2.4e9),     # no prefix "g": only giga is meant
        ("2.4 GHZ", "frequency", 2.4e9),     # the symbol in any case
        ("10 Khz", "frequency", 10e3),       # no prefix "K" (that is the kelvin)
        ("-10 DBM", "power", -10.0),
        ("5 mv", "voltage", 5e-3),           # megavolts are no reading of a bench
        ("5 \u03bcs", "time", 5e-6),         # Greek mu, the BIPM's micro
        ("5 \u00b5s", "time", 5e-6),         # the micro sign
        ("1 k\u2126", "resistance", 1e3),    # the ohm sign
        ("\u221210 dBm", "power", -10.0),    # the typographic minus, as the README writes it
        ("\u221240 °C", "temperature", -40.0),
        ("1e\u22123 s", "time", 1e-3),
    ],
)
def test_prefixes_are_read_by_case(text, kind, expected):
    assert parse_quantity(text, kind) == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize(
    ("text", "kind", "fragments"),
    [
        ("70 mhz", "frequency", ("case does not say", "write mHz (milli) or MHz (mega)")),
        ("70 MHZ", "frequency", ("case does not say", "mHz (milli) or MHz (mega)")),
        ("10 MV", "voltage", ("megavolts", "write mV for millivolts")),
        ("1 MW", "power", ("megawatts", "write mW")),
        ("5 MS", "time", ("megaseconds", "write ms")),
        ("\u201310 dBm", "power", ("en dash", "'-'", "U+2212")),
        ("\u201410 dBm", "power", ("em dash",)),
    ],
)
def test_an_ambiguous_spelling_is_refused_with_the_readings(text, kind, fragments):
    with pytest.raises(UnitError) as err:
        parse_quantity(text, kind, where="seq.toml:7: study.rf_frequency")
    message = str(err.value)
    assert "seq.toml:7: study.rf_frequency" in message
    for fragment in fragments:
        assert fragment in message
