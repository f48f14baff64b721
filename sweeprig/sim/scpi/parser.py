"""Parsing of SCPI program messages (IEEE 488.2 / SCPI-99) into program units.

A program message is one line; it holds message units separated by ``;``. Each unit is a
header (``*IDN?``, ``:SOUR:FREQ``, ``pow``) optionally followed by whitespace and parameters
separated by ``,``. Parameters are kept as raw text in :class:`Param` and converted on demand
by the handler that knows their type (number with unit suffix, MIN/MAX/DEF, boolean,
character data, quoted string, channel list). Every malformed input raises
:class:`~sweeprig.sim.scpi.errors.ScpiError` with the SCPI-99 code.

Relative paths (SCPI-99): a unit that starts with neither ``:`` nor ``*`` continues from the
branch of the previous unit, i.e. that unit's node path without its last keyword. The caller
(:meth:`ScpiInstrument.handle`) keeps that branch; :func:`full_path` applies the rule.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from functools import lru_cache

from sweeprig.errors import UnitError
from sweeprig.sim.scpi.errors import ScpiError
from sweeprig.units import parse_quantity

_NUMBER_RE = re.compile(
    r"^(?P<num>[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)\s*(?P<suffix>[A-Za-z]+)?$"
)
_MNEMONIC_RE = re.compile(r"^[A-Za-z][A-Za-z0-9_]*$")
_KEYWORD_RE = re.compile(r"^[A-Za-z][A-Za-z0-9_]*$")
_COMMON_RE = re.compile(r"^\*[A-Za-z]+$")
_HEADER_SPLIT_RE = re.compile(r"^(?P<header>\S+)(?P<rest>.*)$", re.DOTALL)
_CHANNEL_LIST_RE = re.compile(r"^\(\s*@(?P<body>[^()]*)\)$")

#: SCPI unit suffix → (quantity kind of :func:`sweeprig.units.parse_quantity`, its spelling).
UNIT_SUFFIXES: dict[str, tuple[str, str]] = {
    "HZ": ("frequency", "Hz"),
    "KHZ": ("frequency", "kHz"),
    "MHZ": ("frequency", "MHz"),
    "GHZ": ("frequency", "GHz"),
    "DBM": ("power", "dBm"),
    "DB": ("level_db", "dB"),
    "V": ("voltage", "V"),
    "MV": ("voltage", "mV"),
    "A": ("current", "A"),
    "MA": ("current", "mA"),
    "S": ("time", "s"),
    "MS": ("time", "ms"),
    "US": ("time", "us"),
    "CEL": ("temperature", "degC"),
}

_SPECIALS = {
    "MIN": "MIN", "MINIMUM": "MIN",
    "MAX": "MAX", "MAXIMUM": "MAX",
    "DEF": "DEF", "DEFAULT": "DEF",
}
_TRUE = {"ON", "1"}
_FALSE = {"OFF", "0"}


def mnemonic_forms(keyword: str) -> tuple[str, str]:
    """(short form, long form) of a mnemonic: ``"FREQuency"`` → ``("FREQ", "FREQUENCY")``.

    The short form is the upper-case letters (and digits/``*``); an all-upper-case mnemonic
    (``"CW"``) is its own short form.
    """
    short = "".join(c for c in keyword if not c.islower())
    return short.upper(), keyword.upper()


def match_mnemonic(text: str, keyword: str) -> bool:
    """True when ``text`` is the short or long form of ``keyword`` (case-insensitive)."""
    upper = text.upper()
    return upper in mnemonic_forms(keyword)


class Param:
    """One parameter of a message unit, as raw text; typed views raise :class:`ScpiError`."""

    __slots__ = ("text",)

    def __init__(self, text: str) -> None:
        self.text = text

    def __repr__(self) -> str:
        return f"Param({self.text!r})"

    def __eq__(self, other: object) -> bool:
        return isinstance(other, Param) and other.text == self.text

    def __hash__(self) -> int:
        return hash(self.text)

    def special(self) -> str | None:
        """``"MIN"``, ``"MAX"`` or ``"DEF"`` for MINimum/MAXimum/DEFault, else None."""
        return _SPECIALS.get(self.text.upper())

    def is_number(self) -> bool:
        return _NUMBER_RE.match(self.text) is not None

    def is_mnemonic(self) -> bool:
        return _MNEMONIC_RE.match(self.text) is not None

    def to_float(self, kind: str | None = None, *, where: str = "") -> float:
        """The number in the internal unit of ``kind`` (``"frequency"`` → Hz, …).

        A unit suffix must belong to ``kind`` (−131 otherwise); a non-number is −104.
        ``kind=None`` accepts a plain number only.
        """
        match = _NUMBER_RE.match(self.text)
        if match is None:
            raise ScpiError(-104, f"{where} {self.text} is not a number".strip())
        suffix = match["suffix"]
        if suffix is None:
            return float(match["num"])
        known = UNIT_SUFFIXES.get(suffix.upper())
        if kind is None or known is None or known[0] != kind:
            raise ScpiError(-131, f"{where} {self.text}".strip())
        try:
            return parse_quantity(f"{match['num']} {known[1]}", kind)
        except UnitError as exc:
            raise ScpiError(-222, f"{where} {self.text}".strip()) from exc

    def to_bool(self, *, where: str = "") -> bool:
        """ON/OFF/1/0 (any other number: non-zero is true, as SCPI-99 allows)."""
        upper = self.text.upper()
        if upper in _TRUE:
            return True
        if upper in _FALSE:
            return False
        match = _NUMBER_RE.match(self.text)
        if match is not None and match["suffix"] is None:
            return round(float(match["num"])) != 0
        raise ScpiError(-104, f"{where} {self.text} is not ON|OFF|1|0".strip())

    def to_string(self, *, where: str = "") -> str:
        """The content of a quoted string (``'…'`` or ``"…"``, doubled quotes unescaped)."""
        text = self.text
        if len(text) >= 2 and text[0] in "'\"" and text[-1] == text[0]:
            quote = text[0]
            return text[1:-1].replace(quote * 2, quote)
        raise ScpiError(-104, f"{where} {text} is not a quoted string".strip())

    def to_channels(self, *, where: str = "") -> tuple[int, ...]:
        """A channel list ``(@1)``, ``(@1,3)``, ``(@1:3)`` → channel numbers in order."""
        match = _CHANNEL_LIST_RE.match(self.text)
        if match is None:
            raise ScpiError(-104, f"{where} {self.text} is not a channel list (@n)".strip())
        channels: list[int] = []
        for item in match["body"].split(","):
            bounds = [b.strip() for b in item.split(":")]
            if not all(b.isdigit() for b in bounds) or len(bounds) > 2:
                raise ScpiError(-102, f"{where} {self.text}".strip())
            lo, hi = int(bounds[0]), int(bounds[-1])
            step = 1 if hi >= lo else -1
            channels.extend(range(lo, hi + step, step))
        return tuple(channels)


@dataclass(frozen=True, slots=True)
class ProgramUnit:
    """One message unit: header keywords (upper-case, as typed), flags and raw parameters.

    ``keywords`` of a common command is ``("*IDN",)``. ``absolute`` is True for a header that
    starts with ``:``. Numeric keyword suffixes stay attached (``"MARK2"``).
    """

    keywords: tuple[str, ...]
    query: bool
    common: bool
    absolute: bool
    params: tuple[Param, ...]


def _split_outside(text: str, separator: str) -> tuple[list[str], str, int]:
    """Split ``text`` at ``separator`` where it stands outside quotes and parentheses.

    Returns the pieces, the quote still open at the end ("" if none) and the final
    parenthesis depth; raises −102 for a ``)`` with no ``(``.
    """
    pieces: list[str] = []
    start = 0
    quote = ""
    depth = 0
    for i, ch in enumerate(text):
        if quote:
            if ch == quote:
                quote = ""
        elif ch in "'\"":
            quote = ch
        elif ch == "(":
            depth += 1
        elif ch == ")":
            depth -= 1
            if depth < 0 and separator == ",":
                raise ScpiError(-102, f"unbalanced ')' in {text}")
        elif ch == separator and depth == 0:
            pieces.append(text[start:i])
            start = i + 1
    pieces.append(text[start:])
    return pieces, quote, depth


def split_units(message: str) -> list[str]:
    """Split a program message at ``;`` outside quotes and parentheses (−102 if unbalanced)."""
    if '"' not in message and "'" not in message:
        if ";" not in message:
            return [message]
        if "(" not in message and ")" not in message:
            return message.split(";")  # nothing to stand inside: every ';' separates
    units, quote, _depth = _split_outside(message, ";")
    if quote:
        raise ScpiError(-102, "unterminated string")
    return units


def split_params(text: str) -> tuple[Param, ...]:
    """Split a parameter section at ``,`` outside quotes and parentheses."""
    text = text.strip()
    if not text:
        return ()
    if "," not in text and "(" not in text and '"' not in text and "'" not in text:
        return (Param(text),)
    parts, quote, depth = _split_outside(text, ",")
    if quote or depth:
        raise ScpiError(-102, f"unbalanced quote or '(' in {text}")
    params = tuple(Param(p.strip()) for p in parts)
    if any(not p.text for p in params):
        raise ScpiError(-102, f"empty parameter in {text}")
    return params


@lru_cache(maxsize=1024)
def parse_unit(raw: str) -> ProgramUnit | None:
    """Parse one message unit; None for an empty unit (``"FREQ 1;"`` ends with one).

    Remembered for the last 1,024 texts (a controller repeats its marker and status units
    at every point; the unit is immutable, a text that does not parse raises every time)."""
    text = raw.strip()
    if not text:
        return None
    match = _HEADER_SPLIT_RE.match(text)
    assert match is not None  # text is non-empty and stripped
    header, rest = match["header"], match["rest"]
    cut = len(header)
    query = header.endswith("?")
    if query:
        header = header[:-1]
    if header.startswith("*"):
        if not _COMMON_RE.match(header):
            raise ScpiError(-102, f"bad header {text[:cut]}")
        return ProgramUnit((header.upper(),), query, True, False, split_params(rest))
    absolute = header.startswith(":")
    if absolute:
        header = header[1:]
    keywords = header.split(":")
    for keyword in keywords:
        if not _KEYWORD_RE.match(keyword):
            raise ScpiError(-102, f"bad header {text[:cut]}")
    return ProgramUnit(
        tuple(k.upper() for k in keywords), query, False, absolute, split_params(rest)
    )


def full_path(unit: ProgramUnit, branch: tuple[str, ...]) -> tuple[str, ...]:
    """The unit's full keyword path under the SCPI-99 relative-path rule."""
    if unit.common or unit.absolute:
        return unit.keywords
    return branch + unit.keywords
