"""The pure reply parsers: values, garbage, and totality (a value or TransportError)."""

from __future__ import annotations

import contextlib

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from sweeprig.errors import TransportError
from sweeprig.transport import blocks


@pytest.mark.parametrize(
    ("raw", "value"),
    [("1", 1.0), ("+2.40000000E+09", 2.4e9), ("-23.5\n", -23.5), (" .5 ", 0.5), ("1e-3", 1e-3)],
)
def test_parse_float(raw, value):
    assert blocks.parse_float(raw) == value


@pytest.mark.parametrize("raw", ["", "abc", "1,2", "nan", "inf", "1_000", "1e999", "9.91E37",
                                 "٣", "0x10"])
def test_parse_float_garbage(raw):
    with pytest.raises(TransportError) as err:
        blocks.parse_float(raw, where="here")
    assert "here" in str(err.value)


def test_parse_int_and_bool():
    assert blocks.parse_int("+8") == 8
    assert blocks.parse_int("8.0E+00") == 8
    with pytest.raises(TransportError):
        blocks.parse_int("8.5")
    assert blocks.parse_bool("1") is True
    assert blocks.parse_bool("OFF") is False
    assert blocks.parse_bool("+0") is False
    with pytest.raises(TransportError):
        blocks.parse_bool("2")


def test_csv_floats():
    np.testing.assert_array_equal(blocks.parse_csv_floats("1,-2.5, 3e1"), [1.0, -2.5, 30.0])
    assert blocks.parse_csv_floats("").size == 0
    assert np.isnan(blocks.parse_csv_floats("1,9.91E37")[1])
    with pytest.raises(TransportError):
        blocks.parse_csv_floats("1,,2")


@pytest.mark.parametrize(
    ("raw", "code", "text"),
    [
        ('0,"No error"', 0, "No error"),
        ('-222,"Data out of range"', -222, "Data out of range"),
        ('-113,"Undefined header;FOO:BAR"', -113, "Undefined header;FOO:BAR"),
        ('-100,"say ""hi"""', -100, 'say "hi"'),
        ("-113,Undefined header", -113, "Undefined header"),
        ("+0", 0, ""),
    ],
)
def test_scpi_error(raw, code, text):
    entry = blocks.parse_scpi_error(raw)
    assert (entry.code, entry.text) == (code, text)
    assert entry.is_error == (code != 0)


def test_scpi_error_garbage():
    with pytest.raises(TransportError):
        blocks.parse_scpi_error("No error")


def test_blocks_round_trip():
    values = np.array([1.5, -100.25, 0.0], dtype=np.float64)
    data = blocks.encode_real32_block(values)
    assert data.startswith(b"#212")
    np.testing.assert_array_equal(blocks.parse_real32_block(data + b"\n"), values)
    assert blocks.block_length(data) == len(data)
    assert blocks.block_length(data[:3]) is None
    assert blocks.parse_block(b"#0abc\n") == b"abc"


@pytest.mark.parametrize(
    "data",
    [b"", b"abc", b"#", b"#A12", b"#2x1abcdefghijk", b"#15abc", b"#13abcdef", b"#13abc\xff"],
)
def test_block_garbage(data):
    with pytest.raises(TransportError):
        blocks.parse_real32_block(data)


def test_real32_length_not_multiple_of_four():
    with pytest.raises(TransportError):
        blocks.parse_real32_block(b"#13abc")


@given(st.text())
def test_text_parsers_are_total(text):
    for parse in (blocks.parse_float, blocks.parse_int, blocks.parse_bool,
                  blocks.parse_csv_floats, blocks.parse_scpi_error):
        with contextlib.suppress(TransportError):
            parse(text)


@given(st.binary())
def test_block_parser_is_total(data):
    with contextlib.suppress(TransportError):
        blocks.parse_real32_block(data)
    with contextlib.suppress(TransportError):
        blocks.block_length(data)
