"""Text from files shown safely: control and bidi characters escaped, tokens cut short."""

from __future__ import annotations

import pytest

from sweeprig.errors import InputError
from sweeprig.text import TOKEN_CHARS, escape_controls, has_controls, offending_token, one_line


@pytest.mark.parametrize(("raw", "shown"), [
    ("\x1b]0;title\x07", "\\x1b]0;title\\x07"),  # OSC: retitles the window (ECMA-48)
    ("\x1b[2J", "\\x1b[2J"),  # CSI: clears the screen
    ("a\rb", "a\\x0db"),  # CR: overwrites the line
    ("\x9b2J", "\\x9b2J"),  # C1 CSI
    ("\x7f", "\\x7f"),
    ("abc\u202edcba", "abc\\u202edcba"),  # right-to-left override (Unicode UAX #9)
    ("\u2066x\u2069", "\\u2066x\\u2069"),  # isolates
    ("line\u2028break", "line\\u2028break"),
    ("plain text, °C and µ", "plain text, °C and µ"),
])
def test_escape_controls(raw: str, shown: str) -> None:
    assert escape_controls(raw) == shown
    assert has_controls(raw) == (raw != shown)


def test_line_breaks_stay_unless_one_line() -> None:
    assert escape_controls("a\n\tb") == "a\n\tb"
    assert one_line("a\n\tb") == "a\\x0a\\x09b"
    assert has_controls("a\nb")


def test_offending_token_is_one_token_cut_short() -> None:
    assert offending_token("  user=admin password=secret") == "'user=admin'"
    long = offending_token("S" * 500)
    assert long == "'" + "S" * TOKEN_CHARS + "…'"
    assert offending_token("\x1b[2J rest") == "'\\x1b[2J'"
    assert offending_token("") == "''"


def test_error_messages_are_escaped_in_every_part() -> None:
    error = InputError("bad \x1b[31mred", where="f\x07.toml:1", fix="do \u202eit")
    message = error.message()
    assert "\x1b" not in message and "\x07" not in message and "\u202e" not in message
    assert "\n  fix: " in message  # the structure stays
