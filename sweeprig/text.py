"""Text from files made safe to show: control characters escaped, tokens cut short.

Anything a file holds (a title, an operator's name, a part id, a key, a file name) may reach a
terminal. A terminal obeys escape sequences (ESC), rings (BEL), returns to the line start (CR)
and reorders text (the Unicode bidirectional overrides), so a file could clear the screen,
retitle the window or make a message read differently. :func:`escape_controls` writes every
such character as a visible escape (ESC becomes ``\\x1b``), keeping line breaks and tabs.
:func:`offending_token` is what an error about a file's content may quote of it: one token,
cut to a few dozen characters, escaped.
"""

from __future__ import annotations

import re

#: C0 controls except tab and line feed, DEL, C1 controls (ECMA-48 / ISO 6429).
_C0_C1 = "\x00-\x08\x0b-\x1f\x7f-\x9f"
#: Unicode bidirectional formatting characters (Unicode Standard Annex #9): the embeddings
#: and overrides U+202A..U+202E, the isolates U+2066..U+2069, the marks U+200E, U+200F, U+061C.
_BIDI = "\u202a-\u202e\u2066-\u2069\u200e\u200f\u061c"
#: Line and paragraph separators, which some terminals treat as line breaks.
_SEPARATORS = "\u2028\u2029"
_UNSAFE = re.compile(f"[{_C0_C1}{_BIDI}{_SEPARATORS}]")
_UNSAFE_WITH_BREAKS = re.compile(f"[\n\t{_C0_C1}{_BIDI}{_SEPARATORS}]")

#: The most of a file's content an error message quotes (one token, cut to this length).
TOKEN_CHARS = 32


def _escape(match: re.Match[str]) -> str:
    code = ord(match[0])
    if code <= 0xFF:
        return f"\\x{code:02x}"
    return f"\\u{code:04x}"


def escape_controls(text: str, *, keep_breaks: bool = True) -> str:
    """``text`` with control and bidi characters written as visible escapes (``\\x1b``).

    Line feeds and tabs are kept unless ``keep_breaks`` is False (for one-line fields such
    as a title).
    """
    pattern = _UNSAFE if keep_breaks else _UNSAFE_WITH_BREAKS
    return pattern.sub(_escape, text)


def one_line(value: object) -> str:
    """``str(value)`` for one line of a terminal: every control character escaped, line
    breaks and tabs included (a title, a part id, a file name, an instrument's reply)."""
    return escape_controls(str(value), keep_breaks=False)


def has_controls(text: str) -> bool:
    """True when :func:`escape_controls` would change ``text`` (line breaks count)."""
    return _UNSAFE_WITH_BREAKS.search(text) is not None


def offending_token(text: str, limit: int = TOKEN_CHARS) -> str:
    """The first whitespace-separated token of ``text``, cut to ``limit`` characters,
    escaped and quoted: all an error about a file's content may show of it."""
    stripped = text.strip()
    token = stripped.split(maxsplit=1)[0] if stripped else ""
    shown = escape_controls(token[:limit], keep_breaks=False)
    more = "…" if len(token) > limit else ""
    return f"'{shown}{more}'"
