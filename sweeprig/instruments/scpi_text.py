"""SCPI program messages as text: what may go on the wire, and how a message splits.

Two users: the profile loader (:mod:`sweeprig.instruments.profile`), which refuses a template
or a value token that could end a command early or start another, and the last-step guard
(:mod:`sweeprig.instruments.guard`), which reads every outgoing message back into commands.

The grammar followed is IEEE 488.2-1992 section 7 (program messages: units separated by
``;``, ended by a newline; strings in single or double quotes, a doubled quote inside) and
SCPI-99 volume 1 section 6 (headers of colon-separated mnemonics, each with a long and a short
form; a command after ``;`` without a leading colon continues the previous command's path).
"""

from __future__ import annotations

import functools
import re
from collections.abc import Iterator
from dataclasses import dataclass

from sweeprig.units import short_repr

CONTROL_CHARACTERS = re.compile(r"[\x00-\x08\x0a-\x1f\x7f]")
"""Every C0 control character but the tab, and DEL: none may be part of a command."""

_VOWELS = frozenset("AEIOU")


def wire_text_problem(text: str, *, what: str) -> str | None:
    """Why ``text`` (a template or a value token from a profile) cannot go on the wire as
    part of one command, or None. ``what`` names it in the message (e.g. ``"SCPI command"``).

    Refused: a line break or another control character (a newline ends the program message,
    so what follows is a new one), a ``;`` outside quotes (it starts another command), and an
    unclosed quote (which would change how the rest of the command is read).
    """
    if "\n" in text or "\r" in text:
        return f"{what} {short_repr(text)} contains a line break"
    found = CONTROL_CHARACTERS.search(text)
    if found:
        return f"{what} {short_repr(text)} contains the control character {found.group()!r}"
    pieces, quote = _cut_outside_quotes(text, ";")
    if len(pieces) > 1:
        return f"{what} {short_repr(text)} contains ';', which starts another command"
    if quote is not None:
        return f"{what} {short_repr(text)} has an unclosed {quote} quote"
    return None


def _cut_outside_quotes(text: str, separator: str) -> tuple[list[str], str | None]:
    """``text`` cut at ``separator`` where it stands outside quoted strings, and the quote
    still open at the end (None when every string is closed). A doubled quote inside a string
    closes and reopens it: the same effect (IEEE 488.2, 7.7.5)."""
    pieces: list[str] = []
    current: list[str] = []
    quote: str | None = None
    for char in text:
        if quote is not None:
            if char == quote:
                quote = None
        elif char in "'\"":
            quote = char
        elif char == separator:
            pieces.append("".join(current))
            current = []
            continue
        current.append(char)
    pieces.append("".join(current))
    return pieces, quote


_LINE_BREAK = re.compile(r"[\n\r]")
_HEADER = re.compile(r"\s*(\S+)")


def split_units(message: str, *, respect_quotes: bool = True) -> list[str]:
    """The program message units of ``message``: split at ``;`` and line breaks (outside
    quotes when ``respect_quotes``); a unit followed by ``;`` ends in ``"\x00"`` (same
    message). A line break ends a quoted string too (it ends the whole program message).

    A message without quotes (or read without respecting them) is cut with ``str.split``,
    which gives the same units as the character walk (:func:`_split_units_walk`, pinned
    against it by tests/instruments/test_scpi_text.py): the guard reads every message sent.
    """
    if not respect_quotes or ("'" not in message and '"' not in message):
        units: list[str] = []
        for line in _LINE_BREAK.split(message):
            pieces = line.split(";")
            units.extend(piece + "\x00" for piece in pieces[:-1])
            units.append(pieces[-1])
        return units
    return _split_units_walk(message, respect_quotes=respect_quotes)


def _split_units_walk(message: str, *, respect_quotes: bool = True) -> list[str]:
    """:func:`split_units`, one character at a time (quotes read as IEEE 488.2 7.7.5)."""
    units: list[str] = []
    current: list[str] = []
    quote: str | None = None
    for char in message:
        if char in "\n\r":
            quote = None
            units.append("".join(current))
            current = []
            continue
        if respect_quotes:
            if quote is not None:
                if char == quote:
                    quote = None
                current.append(char)
                continue
            if char in "'\"":
                quote = char
                current.append(char)
                continue
        if char == ";":
            units.append("".join(current) + "\x00")  # marks "followed by ';'" (same message)
            current = []
            continue
        current.append(char)
    units.append("".join(current))
    return units


@functools.lru_cache(maxsize=4096)
def short_form(mnemonic: str) -> str:
    """The SCPI short form of a mnemonic (SCPI-99 vol. 1, 6.2.1): upper case, numeric suffix
    removed, longer than four characters → the first four, or three when the fourth is a
    vowel (``POWer`` → ``POW``, ``FREQuency`` → ``FREQ``; ``MODE`` stays ``MODE``)."""
    word = mnemonic.strip().upper().rstrip("0123456789")
    if len(word) > 4:
        word = word[:3] if word[3] in _VOWELS else word[:4]
    return word


@dataclass(frozen=True)
class Command:
    """One program message unit, read back.

    ``path``: the header's mnemonics in short form, numeric suffixes removed, the implied
    path of a compound command included. ``common``: an IEEE 488.2 common command
    (``*RST``). ``query``: the header ends in ``?``. ``args``: the parameters, split at commas
    outside quotes and stripped. ``text``: the unit as sent.
    """

    text: str
    path: tuple[str, ...]
    common: bool
    query: bool
    args: tuple[str, ...]


def split_args(text: str) -> tuple[str, ...]:
    """Parameters separated by commas (outside quotes), stripped; () for none."""
    if not text.strip():
        return ()
    if "'" not in text and '"' not in text:
        return tuple(piece.strip() for piece in text.split(","))
    pieces, _quote = _cut_outside_quotes(text, ",")
    return tuple(piece.strip() for piece in pieces)


def commands(message: str, *, respect_quotes: bool = True) -> Iterator[Command]:
    """Every command in ``message``, with each header's full path resolved as an instrument
    would (SCPI-99 vol. 1, 6.2.4: after ``;`` a header without a leading ``:`` starts at the
    previous command's last branch; a common command leaves the path alone; a new line
    starts at the root)."""
    branch: tuple[str, ...] = ()
    for raw in split_units(message, respect_quotes=respect_quotes):
        continued = raw.endswith("\x00")
        unit = raw.rstrip("\x00").strip()
        if not unit:
            if not continued:
                branch = ()
            continue
        head, _, rest = _split_header(unit)
        if head.startswith("*"):
            yield Command(unit, (head.upper(),), True, head.endswith("?"), split_args(rest))
        else:
            query = head.endswith("?")
            rooted = head.startswith(":")
            names = tuple(short_form(m) for m in head.strip(":?").split(":") if m.strip())
            path = names if rooted else branch + names
            yield Command(unit, path, False, query, split_args(rest))
            branch = path[:-1]
        if not continued:
            branch = ()


def _split_header(unit: str) -> tuple[str, str, str]:
    match = _HEADER.match(unit)
    if match is None:
        return "", "", ""
    head = match.group(1)
    return head, " ", unit[match.end():]
