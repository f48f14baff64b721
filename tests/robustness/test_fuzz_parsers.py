"""Fuzzing the parsers that turn text into numbers: quantities with units, and instrument
replies (numbers, booleans, lists, error-queue entries, IEEE 488.2 blocks).

Each parser is total: on any input it returns a value of its promised type or raises the
project's own error (:class:`UnitError` for quantities, :class:`TransportError` for replies),
never anything else. Where a parser has an inverse the round trip is checked too.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import assume, example, given, settings
from hypothesis import strategies as st

from sweeprig.errors import TransportError, UnitError
from sweeprig.transport.blocks import (
    SCPI_NAN,
    ScpiError,
    block_length,
    encode_block,
    encode_real32_block,
    parse_block,
    parse_bool,
    parse_csv_floats,
    parse_float,
    parse_int,
    parse_real32_block,
    parse_scpi_error,
)
from sweeprig.units import KINDS, LARGEST_MAGNITUDE, SI_PREFIXES, parse_quantity, suffixes

FUZZ = settings(max_examples=150, deadline=None)

# -- quantities ---------------------------------------------------------------------------------

ALL_SUFFIXES = sorted({s for kind in KINDS for s in suffixes(kind)} | {
    "dBmW", "dBc", "GHZ", "ghz", "µW", "kΩ", "Ω", "°C", "°F", "celsius", "Hz Hz", "m", "",
    "dB m", "e", "E5", "nan", "inf"})
NUMBER_TEXT = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
    st.floats(-1e6, 1e6).map(lambda x: f"{x:.6g}"),
    st.integers().map(str),
    st.sampled_from(["nan", "inf", "-inf", "+", "-", ".", "1e", "1e400", "-1e400", "0x10",
                     "1_000", "١٢", "1.2.3", "--5", "+.5", "5.", "9" * 400]),
)
QUANTITY_TEXT = st.builds(
    lambda number, space, unit, pad: f"{pad}{number}{space}{unit}{pad}",
    NUMBER_TEXT, st.sampled_from(["", " ", "  ", "\t"]), st.sampled_from(ALL_SUFFIXES),
    st.sampled_from(["", " ", "\n"]),
)
#: What a TOML value can hold, and a few things it cannot.
ANY_VALUE = st.one_of(
    st.text(), QUANTITY_TEXT, st.floats(allow_nan=True, allow_infinity=True),
    st.integers(), st.sampled_from([10**400, -(10**400), 2**1024]), st.booleans(), st.none(),
    st.lists(st.integers(), max_size=3), st.dictionaries(st.text(max_size=3), st.integers(),
                                                         max_size=2),
    st.binary(max_size=8),
)


@FUZZ
@given(value=ANY_VALUE, kind=st.sampled_from(KINDS))
@example(value="2.4 GHz", kind="power")
@example(value="10 dBmW", kind="power")
@example(value="-0 mW", kind="power")
@example(value=float("nan"), kind="frequency")
@example(value="1e308 GHz", kind="frequency")
@example(value="-300 K", kind="temperature")
def test_parse_quantity_gives_a_finite_float_or_a_unit_error(value: object, kind: str) -> None:
    try:
        result = parse_quantity(value, kind, where="fuzz.toml:1: key")
    except UnitError as exc:
        assert exc.where == "fuzz.toml:1: key"
        assert exc.fix  # every refusal says how to write it
        return
    assert isinstance(result, float)
    assert math.isfinite(result)


def test_parse_quantity_refuses_an_integer_beyond_the_float_range() -> None:
    for kind in KINDS:
        with pytest.raises(UnitError):
            parse_quantity(10**400, kind)


SCALES = {
    "frequency": {"Hz": 1.0, "kHz": 1e3, "MHz": 1e6, "GHz": 1e9},
    "voltage": {"V": 1.0, "mV": 1e-3, "kV": 1e3},
    "current": {"A": 1.0, "mA": 1e-3, "uA": 1e-6},
    "time": {"s": 1.0, "ms": 1e-3, "us": 1e-6, "ns": 1e-9, "min": 60.0, "h": 3600.0},
    "level_db": {"dB": 1.0},
    "resistance": {"ohm": 1.0, "kohm": 1e3},
}


@FUZZ
@given(number=st.floats(-1e12, 1e12), data=st.data())
def test_a_written_quantity_reads_back_scaled_to_the_internal_unit(
    number: float, data: st.DataObject
) -> None:
    kind = data.draw(st.sampled_from(sorted(SCALES)))
    unit = data.draw(st.sampled_from(sorted(SCALES[kind])))
    # Another case only where it cannot flip a prefix (m milli / M mega: tests/test_units.py).
    clashes = [s for s in suffixes(kind) if s != unit and s.lower() == unit.lower()]
    variants = [unit] + [v for v in (unit.lower(), unit.upper())
                         if not clashes and (v[:1] == unit[:1] or v[:1] not in SI_PREFIXES)]
    spelled = data.draw(st.sampled_from(variants))
    space = data.draw(st.sampled_from(["", " "]))
    text = f"{number!r}{space}{spelled}"
    if abs(number * SCALES[kind][unit]) > LARGEST_MAGNITUDE.get(kind, math.inf):
        with pytest.raises(UnitError, match="beyond"):  # a slip of unit: refused at load
            parse_quantity(text, kind)
        return
    result = parse_quantity(text, kind)
    assert result == pytest.approx(number * SCALES[kind][unit], rel=1e-12, abs=1e-300)


@FUZZ
@given(power_dbm=st.floats(-200.0, 100.0))
def test_powers_in_dbm_dbw_and_watts_agree(power_dbm: float) -> None:
    # dBm = 10·log10(P / 1 mW); dBW = dBm − 30 (definitions of the units)
    assert parse_quantity(f"{power_dbm!r} dBm", "power") == power_dbm
    assert parse_quantity(f"{power_dbm - 30.0!r} dBW", "power") == pytest.approx(power_dbm)
    watts = 1e-3 * 10.0 ** (power_dbm / 10.0)
    assume(watts > 0.0)
    assert parse_quantity(f"{watts!r} W", "power") == pytest.approx(power_dbm, abs=1e-9)
    assert parse_quantity(f"{watts * 1e3!r} mW", "power") == pytest.approx(power_dbm, abs=1e-9)


# -- instrument replies ---------------------------------------------------------------------------

NRF = st.one_of(
    st.integers(-(10**12), 10**12).map(str),
    st.floats(allow_nan=False, allow_infinity=False).map(lambda x: f"{x:+.9E}"),
    st.floats(allow_nan=False, allow_infinity=False).map(repr),
)
ERROR_ENTRY = st.builds(
    lambda code, text, quote: f'{code},"{text}"' if quote else f"{code},{text}",
    st.integers(-(10**10), 10**10), st.text(max_size=40), st.booleans(),
)
REPLY_TEXT = st.one_of(
    st.text(max_size=60), NRF, ERROR_ENTRY,
    st.lists(NRF, max_size=6).map(",".join),
    st.lists(st.one_of(NRF, st.text(max_size=4)), max_size=6).map(",".join),
    st.sampled_from(["9.91E37", "+9.91E+37", "ON", "off", "1", "0", "2", "+1.0E+00", "nan",
                     "inf", "1e999", "-1e999", " ", "", "\n", "0,\"No error\"", '-222,"a""b"',
                     "1,2,,3", "٣", "1" * 500, "1e" + "9" * 20]),
)
REPLY = st.one_of(REPLY_TEXT, REPLY_TEXT.map(lambda s: s.encode("utf-8")), st.binary(max_size=40))


@FUZZ
@given(reply=REPLY)
def test_parse_float_gives_a_finite_float_or_a_transport_error(reply: str) -> None:
    try:
        value = parse_float(reply, where="fake, 'MEAS?'")
    except TransportError as exc:
        assert exc.where == "fake, 'MEAS?'" and exc.fix
        return
    assert isinstance(value, float) and math.isfinite(value) and value != SCPI_NAN


@FUZZ
@given(reply=REPLY)
def test_parse_int_gives_an_int_or_a_transport_error(reply: str) -> None:
    try:
        value = parse_int(reply)
    except TransportError:
        return
    assert isinstance(value, int) and not isinstance(value, bool)


def test_parse_int_refuses_a_reply_of_5000_digits() -> None:
    with pytest.raises(TransportError):
        parse_int("1" * 5000)


@FUZZ
@given(reply=REPLY)
def test_parse_bool_gives_a_bool_or_a_transport_error(reply: str) -> None:
    try:
        value = parse_bool(reply)
    except TransportError:
        return
    assert isinstance(value, bool)


@FUZZ
@given(reply=REPLY)
def test_parse_csv_floats_gives_a_float_array_or_a_transport_error(reply: str) -> None:
    try:
        values = parse_csv_floats(reply)
    except TransportError:
        return
    assert isinstance(values, np.ndarray) and values.dtype == np.float64 and values.ndim == 1
    assert not np.isinf(values).any()  # NaN only stands for SCPI's 9.91E37


@FUZZ
@given(reply=REPLY)
def test_parse_scpi_error_gives_an_entry_or_a_transport_error(reply: str) -> None:
    try:
        entry = parse_scpi_error(reply)
    except TransportError:
        return
    assert isinstance(entry, ScpiError)
    assert isinstance(entry.code, int) and isinstance(entry.text, str)


@FUZZ
@given(value=st.floats(-1e300, 1e300), style=st.sampled_from(  # no rounding past the float max
    ["{!r}", "{:+.15E}", "{:.17g}", " {!r}\n"]))
def test_a_number_reply_reads_back(value: float, style: str) -> None:
    assume(value != SCPI_NAN)
    assert parse_float(style.format(value)) == pytest.approx(value, rel=1e-15)


@FUZZ
@given(number=st.integers(-(2**63), 2**63))
def test_an_integer_reply_reads_back(number: int) -> None:
    assert parse_int(str(number)) == number
    assert parse_int(f"+{number}" if number >= 0 else str(number)) == number


@FUZZ
@given(values=st.lists(st.floats(allow_nan=False, allow_infinity=False), max_size=20))
def test_an_ascii_trace_reads_back(values: list[float]) -> None:
    assume(SCPI_NAN not in values)
    parsed = parse_csv_floats(",".join(f"{v:+.17E}" for v in values))
    np.testing.assert_array_equal(parsed, np.asarray(values, dtype=float))


@FUZZ
@given(code=st.integers(-(10**9) + 1, 10**9 - 1),
       text=st.text(alphabet=st.characters(min_codepoint=0x20, max_codepoint=0x7E), max_size=60))
def test_an_error_entry_reads_back(code: int, text: str) -> None:
    # IEEE 488.2 string data: a quote inside the text is doubled
    entry = parse_scpi_error(f'{code},"{text.replace(chr(34), chr(34) * 2)}"')
    assert entry == ScpiError(code, text)


# -- IEEE 488.2 blocks ----------------------------------------------------------------------------


@st.composite
def block_bytes(draw: st.DrawFn) -> bytes:
    """Definite-length blocks with right and wrong lengths, truncated, with huge declared
    lengths, odd digit counts, junk around them; indefinite blocks; plain garbage."""
    payload = draw(st.binary(max_size=48))
    declared = draw(st.one_of(st.just(len(payload)), st.integers(0, 10**9 - 1),
                              st.just(len(payload) + 1), st.just(max(0, len(payload) - 1))))
    length_text = str(declared).encode()
    digits = draw(st.one_of(st.just(str(len(length_text)).encode()),
                            st.sampled_from([b"0", b"9", b"1", b"A", b"", b"#"])))
    if draw(st.booleans()):
        length_text = length_text[: draw(st.integers(0, len(length_text)))]
    lead = draw(st.sampled_from([b"", b" ", b"\n", b"x", b"  \r\n"]))
    tail = draw(st.sampled_from([b"", b"\n", b"\r\n", b" ", b"junk", b"\n\n"]))
    data = lead + b"#" + digits + length_text + payload + tail
    if draw(st.booleans()):
        data = data[: draw(st.integers(0, len(data)))]  # cut short anywhere
    return draw(st.one_of(st.just(data), st.binary(max_size=64)))


@settings(max_examples=250, deadline=None)
@given(data=block_bytes(), big_endian=st.booleans())
@example(data=b"#9999999999abc\n", big_endian=True)
@example(data=b"#0", big_endian=True)
@example(data=b"#", big_endian=True)
@example(data=b"#15abc", big_endian=True)
def test_block_parsers_give_data_or_a_transport_error(data: bytes, big_endian: bool) -> None:
    try:
        total = block_length(data)
    except TransportError:
        total = -1
    assert total is None or isinstance(total, int)
    try:
        payload = parse_block(data, where="fake, 'TRAC?'")
    except TransportError as exc:
        assert exc.where == "fake, 'TRAC?'"
    else:
        assert isinstance(payload, bytes) and len(payload) <= len(data)
    try:
        values = parse_real32_block(data, big_endian=big_endian)
    except TransportError:
        return
    assert isinstance(values, np.ndarray) and values.dtype == np.float64


@settings(max_examples=100, deadline=None)
@given(values=st.lists(st.floats(width=32, allow_nan=True, allow_infinity=True), max_size=300),
       big_endian=st.booleans(), terminator=st.sampled_from([b"", b"\n", b"\r\n"]))
def test_a_real32_block_reads_back(values: list[float], big_endian: bool,
                                   terminator: bytes) -> None:
    data = encode_real32_block(np.asarray(values), big_endian=big_endian) + terminator
    parsed = parse_real32_block(data, big_endian=big_endian)
    np.testing.assert_array_equal(parsed, np.asarray(values, dtype=np.float32).astype(float))
    assert block_length(data) == len(data) - len(terminator)


@settings(max_examples=100, deadline=None)
@given(payload=st.binary(max_size=2000))
def test_a_block_reads_back_its_payload(payload: bytes) -> None:
    assert parse_block(encode_block(payload) + b"\n") == payload
