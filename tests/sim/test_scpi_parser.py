"""Narrow unit tests of the SCPI parser, command tree and error queue (in-process)."""

from __future__ import annotations

import pytest
from hypothesis import given
from hypothesis import strategies as st

from sweeprig.sim.scpi import ErrorEntry, ErrorQueue, ScpiError, format_number
from sweeprig.sim.scpi.parser import Param, full_path, parse_unit, split_params, split_units
from sweeprig.sim.scpi.tree import CommandTree, parse_pattern


def _code(exc_info: pytest.ExceptionInfo[ScpiError]) -> int:
    return exc_info.value.code


# ---------------------------------------------------------------- message units
def test_units_split_at_semicolons_outside_quotes_and_parentheses() -> None:
    assert split_units('FREQ 1;:OUTP ON;DISP:TEXT "a;b";ROUT:CLOS (@1)') == [
        "FREQ 1", ":OUTP ON", 'DISP:TEXT "a;b"', "ROUT:CLOS (@1)",
    ]


@given(st.text(alphabet="AB:;,() '\"1?*", max_size=40))
def test_the_quick_split_is_the_character_scan(message: str) -> None:
    """A message with nothing to stand inside (no quote, no parenthesis) is split at every
    ';' without scanning it: the same units as the scan gives."""
    from sweeprig.sim.scpi.parser import _split_outside

    try:
        units = split_units(message)
    except ScpiError:
        assert _split_outside(message, ";")[1]  # only an unterminated string is refused
        return
    assert units == _split_outside(message, ";")[0]


def test_unterminated_string_is_a_syntax_error() -> None:
    with pytest.raises(ScpiError) as exc:
        split_units('DISP:TEXT "abc')
    assert _code(exc) == -102


def test_header_flags_and_keywords() -> None:
    unit = parse_unit(":sour:freq:cw? max")
    assert unit is not None
    assert unit.keywords == ("SOUR", "FREQ", "CW")
    assert unit.absolute and unit.query and not unit.common
    assert unit.params == (Param("max"),)
    common = parse_unit("*idn?")
    assert common is not None and common.common and common.keywords == ("*IDN",)
    assert parse_unit("   ") is None


@pytest.mark.parametrize("bad", ["FREQ::CW 1", "*I-DN?", "FR$EQ 1", ":"])
def test_malformed_headers_are_syntax_errors(bad: str) -> None:
    with pytest.raises(ScpiError) as exc:
        parse_unit(bad)
    assert _code(exc) == -102


def test_a_repeated_unit_is_parsed_once_and_a_bad_one_fails_every_time() -> None:
    """A controller repeats its marker and status units at every point: the parse of a text
    is remembered (the same immutable unit), an error is never remembered as a unit."""
    assert parse_unit(":CALC:MARK1:X 70000000") is parse_unit(":CALC:MARK1:X 70000000")
    for _ in range(2):
        with pytest.raises(ScpiError) as exc:
            parse_unit("FREQ::CW 1")
        assert _code(exc) == -102


def test_relative_path_continues_from_the_previous_branch() -> None:
    first = parse_unit("SOUR:FREQ:CW 1")
    second = parse_unit("POW -10")
    absolute = parse_unit(":OUTP ON")
    assert first is not None and second is not None and absolute is not None
    path = full_path(first, ())
    assert full_path(second, path[:-1]) == ("SOUR", "FREQ", "POW")
    assert full_path(absolute, path[:-1]) == ("OUTP",)


def test_parameters_split_at_commas_with_strings_and_channel_lists() -> None:
    params = split_params(' REAL, 32 ,"x,y", (@1,2:3)')
    assert [p.text for p in params] == ["REAL", "32", '"x,y"', "(@1,2:3)"]
    assert params[2].to_string() == "x,y"
    assert params[3].to_channels() == (1, 2, 3)
    with pytest.raises(ScpiError):
        split_params("1,,2")


# ---------------------------------------------------------------- numbers and units
@pytest.mark.parametrize(
    ("text", "kind", "expected"),
    [
        ("2.4GHZ", "frequency", 2.4e9),
        ("2.4 ghz", "frequency", 2.4e9),
        ("70 MHz", "frequency", 70e6),
        ("10kHz", "frequency", 10e3),
        ("1e9", "frequency", 1e9),
        ("-10 DBM", "power", -10.0),
        ("3 DB", "level_db", 3.0),
        ("500 MV", "voltage", 0.5),
        ("120 MA", "current", 0.12),
        ("5 MS", "time", 5e-3),
        ("20 US", "time", 20e-6),
        ("85 CEL", "temperature", 85.0),
        ("+.5E-3", None, 0.5e-3),
    ],
)
def test_numbers_with_unit_suffixes(text: str, kind: str | None, expected: float) -> None:
    assert Param(text).to_float(kind) == pytest.approx(expected, rel=1e-15)


@pytest.mark.parametrize(("text", "kind"), [("1 V", "frequency"), ("1 W", "power"),
                                            ("1 HZ", None), ("1 FOO", "frequency")])
def test_wrong_suffix_is_invalid_suffix(text: str, kind: str | None) -> None:
    with pytest.raises(ScpiError) as exc:
        Param(text).to_float(kind)
    assert _code(exc) == -131


def test_non_number_is_a_data_type_error() -> None:
    with pytest.raises(ScpiError) as exc:
        Param("ON").to_float("frequency")
    assert _code(exc) == -104


def test_booleans_and_specials() -> None:
    assert Param("on").to_bool() and Param("1").to_bool()
    assert not Param("OFF").to_bool() and not Param("0").to_bool()
    with pytest.raises(ScpiError):
        Param("maybe").to_bool()
    assert Param("maximum").special() == "MAX"
    assert Param("min").special() == "MIN"
    assert Param("DEF").special() == "DEF"
    assert Param("10").special() is None


# ---------------------------------------------------------------- command tree
def test_pattern_nodes() -> None:
    nodes = parse_pattern("[SOURce]:FREQuency[:CW|:FIXed]")
    assert [n.optional for n in nodes] == [True, False, True]
    assert [a.long for a in nodes[2].alternatives] == ["CW", "FIXED"]
    marker = parse_pattern("CALCulate:MARKer[1-4]:X")
    assert marker[1].alternatives[0].suffix_range == (1, 4)


def _tree() -> CommandTree:
    tree = CommandTree()
    tree.add("[SOURce]:FREQuency[:CW|:FIXed]", write=lambda c: "freq")
    tree.add("[SENSe]:BANDwidth|BWIDth[:RESolution]", query=lambda c: "rbw")
    tree.add("CALCulate:MARKer[1-4]:X", query=lambda c: "mx")
    return tree


@pytest.mark.parametrize(
    "header",
    [("FREQ",), ("FREQUENCY",), ("SOUR", "FREQ"), ("SOURCE", "FREQUENCY", "CW"),
     ("FREQ", "FIX"), ("SOUR", "FREQ", "FIXED")],
)
def test_short_long_and_optional_forms_resolve(header: tuple[str, ...]) -> None:
    assert _tree().resolve(header, query=False).handler(None) == "freq"


@pytest.mark.parametrize("header", [("FREQU",), ("FRE",), ("SOUR", "CW"), ("FREQ", "CW", "CW")])
def test_partial_or_misplaced_keywords_are_undefined(header: tuple[str, ...]) -> None:
    with pytest.raises(ScpiError) as exc:
        _tree().resolve(header, query=False)
    assert _code(exc) == -113


def test_alternatives_and_suffixes() -> None:
    tree = _tree()
    assert tree.resolve(("BWID",), query=True).handler(None) == "rbw"
    assert tree.resolve(("SENS", "BAND", "RES"), query=True).handler(None) == "rbw"
    assert tree.resolve(("CALC", "MARK3", "X"), query=True).suffixes == (3,)
    assert tree.resolve(("CALC", "MARK", "X"), query=True).suffixes == (1,)
    with pytest.raises(ScpiError):
        tree.resolve(("CALC", "MARK5", "X"), query=True)
    with pytest.raises(ScpiError):  # a query-only header used as a command
        tree.resolve(("CALC", "MARK", "X"), query=False)


def test_resolution_is_cached() -> None:
    tree = _tree()
    first = tree.resolve(("SOUR", "FREQ"), query=False)
    assert tree.resolve(("SOUR", "FREQ"), query=False) is first


# ---------------------------------------------------------------- error queue
def test_error_queue_is_fifo_and_overflow_replaces_the_newest() -> None:
    queue = ErrorQueue()
    for i in range(20):
        queue.push(ErrorEntry(-200 - i, "x"))
    entries = [queue.pop() for _ in range(17)]
    assert [e.code for e in entries[:15]] == [-200 - i for i in range(15)]
    assert entries[15].as_reply() == '-350,"Queue overflow"'
    assert entries[16].as_reply() == '0,"No error"'


def test_error_detail_and_quotes() -> None:
    error = ScpiError(-222, 'FREQ 7e9 above 6e9 "max"')
    assert error.entry().as_reply() == '-222,"Data out of range;FREQ 7e9 above 6e9 ""max"""'


# ---------------------------------------------------------------- number formatting
@given(st.floats(allow_nan=False, allow_infinity=False))
def test_number_replies_round_trip_exactly(value: float) -> None:
    assert float(format_number(value)) == value


def test_number_reply_forms() -> None:
    assert format_number(1e9) == "1000000000"
    assert format_number(-10.5) == "-10.5"
    assert format_number(True) == "1"
    assert format_number(7) == "7"
    assert format_number(float("nan")) == "9.91E+37"
