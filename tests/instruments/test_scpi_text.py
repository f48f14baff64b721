"""SCPI program messages as text: what a profile may put on the wire, and how a message
splits into commands (IEEE 488.2-1992 section 7; SCPI-99 vol. 1 section 6)."""

from __future__ import annotations

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from sweeprig.instruments.scpi_text import (
    _cut_outside_quotes,
    _split_units_walk,
    commands,
    short_form,
    split_args,
    split_units,
    wire_text_problem,
)


@pytest.mark.parametrize(("text", "problem"), [
    ("OUTP ON", None),
    ('DISP:TEXT "a;b"', None),  # a ';' inside a string is data (IEEE 488.2, 7.7.5)
    ("DISP:TEXT 'it''s'", None),  # a doubled quote inside a string
    ("OUTP\tON", None),  # a tab is white space
    ("ON;:SOUR:POW 19", "';'"),
    ("ON\n:SOUR:POW 19", "line break"),
    ("ON\r", "line break"),
    ("ON\x1b[2J", "control character"),
    ("ON\x00", "control character"),
    ("ON\x7f", "control character"),
    ("DISP:TEXT 'open", "unclosed"),
])
def test_wire_text_problem(text: str, problem: str | None) -> None:
    found = wire_text_problem(text, what="SCPI value")
    if problem is None:
        assert found is None
    else:
        assert found is not None and problem in found


@pytest.mark.parametrize(("mnemonic", "short"), [
    # SCPI-99 vol. 1, 6.2.1: four letters, three when the fourth is a vowel
    ("POWer", "POW"), ("FREQuency", "FREQ"), ("LEVel", "LEV"), ("IMMediate", "IMM"),
    ("AMPLitude", "AMPL"), ("SOURce", "SOUR"), ("VOLTage", "VOLT"), ("CURRent", "CURR"),
    ("TEMPerature", "TEMP"), ("SOUR2", "SOUR"), ("pow", "POW"), ("OUTP1", "OUTP"),
    ("MODE", "MODE"), ("AUTO", "AUTO"), ("STATe", "STAT"),
])
def test_short_form(mnemonic: str, short: str) -> None:
    assert short_form(mnemonic) == short


def test_compound_commands_keep_their_path() -> None:
    # SCPI-99 vol. 1, 6.2.4: after ';' a header without ':' starts at the previous branch
    found = [(c.path, c.args) for c in commands("SOUR:FREQ 1E9;POW 19;*OPC;:OUTP ON")]
    assert found == [(("SOUR", "FREQ"), ("1E9",)), (("SOUR", "POW"), ("19",)),
                     (("*OPC",), ()), (("OUTP",), ("ON",))]


def test_a_new_line_starts_at_the_root() -> None:
    found = [c.path for c in commands("SOUR:FREQ 1E9\nPOW 19")]
    assert found == [("SOUR", "FREQ"), ("POW",)]


def test_quotes_are_respected_or_not() -> None:
    message = "DISP:TEXT 'a;POW 19'"
    assert [c.path for c in commands(message)] == [("DISP", "TEXT")]
    assert ("DISP", "POW") in [c.path for c in commands(message, respect_quotes=False)]


def test_queries_and_arguments() -> None:
    (cmd,) = commands("APPL 5, 0.1")
    assert cmd.args == ("5", "0.1") and not cmd.query
    (query,) = commands("POW? MAX")
    assert query.query and query.path == ("POW",)


@settings(max_examples=150, deadline=None)
@given(message=st.text(alphabet=st.sampled_from(list("AB:*?;,'\" \n\r\x0019.e-")),
                       max_size=40),
       respect=st.booleans())
def test_the_quick_split_gives_the_walk_s_units(message: str, respect: bool) -> None:
    """``split_units`` cuts a message without quotes with ``str.split``: the same units as
    the character walk, for any text (the guard reads every message with it)."""
    assert split_units(message, respect_quotes=respect) == \
        _split_units_walk(message, respect_quotes=respect)
    assert split_args(message.replace(";", "")) == _split_args_walk(message.replace(";", ""))


def _split_args_walk(text: str) -> tuple[str, ...]:
    if not text.strip():
        return ()
    pieces, _quote = _cut_outside_quotes(text, ",")
    return tuple(piece.strip() for piece in pieces)
