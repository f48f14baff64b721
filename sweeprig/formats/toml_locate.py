"""Map a key path such as ``("study", 1, "rf_frequency", "start")`` to its line in TOML text.

Used only for error messages, on text that ``tomllib`` has already accepted. Handles table
headers (``[a.b]``), arrays of tables (``[[a]]``, counted per parent element), dotted keys,
quoted keys, inline tables, and arrays (one line per element, also across lines). A path that
is not in the text (a missing key) resolves to the line of its longest present prefix.

Every loaded file is located (its messages name lines), so the scanner moves by whole runs
(regular expressions: blanks and comments, a bare key, a string's body, a bare value) and
finds a position's line by bisection in the offsets of the line breaks, instead of walking
the text a character at a time.
"""

from __future__ import annotations

import contextlib
import re
import tomllib
from bisect import bisect_left

from sweeprig.units import shorten

KeyPath = tuple[str | int, ...]

_BARE = set("ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789_-")

# The scanner's runs, each matched at the position (it may match nothing):
_SPACE = re.compile(r"(?:[ \t\r]|#[^\n]*)*")  # blanks and a comment, not the line break
_SPACE_LINES = re.compile(r"(?:[ \t\r\n]|#[^\n]*)*")  # the same and line breaks
_BARE_KEY = re.compile(r"[A-Za-z0-9_-]*")
_SCALAR = re.compile(r"[^,\]}\n#]*")  # a bare value: number, date, boolean
# A string's opening quote(s) and its body up to (not including) the closing quote(s); in a
# basic string a backslash takes the next character, whatever it is, with it.
_BASIC = re.compile(r'"(?:[^"\\]|\\.)*', re.DOTALL)
_LITERAL = re.compile(r"'[^']*")
_LONG_BASIC = re.compile(r'"""(?:[^"\\]|\\.|"(?!""))*', re.DOTALL)
_LONG_LITERAL = re.compile(r"'''(?:[^']|'(?!''))*")
_QUOTE_RUN = {'"': re.compile(r'"+'), "'": re.compile(r"'+")}


class KeyLocator:
    """Line numbers (1-based) of every key, table and array element in one TOML text."""

    def __init__(self, text: str) -> None:
        self._text = text
        self._end = len(text)
        self._pos = 0
        self._breaks = [m.start() for m in re.finditer("\n", text)]  # offsets of "\n"
        self.lines: dict[KeyPath, int] = {}
        self._aot_count: dict[KeyPath, int] = {}
        self._aot_last: dict[tuple[str, ...], KeyPath] = {}
        # On text that is not valid TOML after all, keep what was found.
        with contextlib.suppress(IndexError, ValueError):
            self._document()

    def line(self, path: KeyPath) -> int | None:
        """Line of ``path``, or of its longest prefix present in the text; None if neither."""
        path = tuple(path)
        while path:
            if path in self.lines:
                return self.lines[path]
            path = path[:-1]
        return None

    # -- scanner ---------------------------------------------------------------------------

    @property
    def _line(self) -> int:
        """Line (1-based) of the scanner's position: one more than the breaks before it."""
        return bisect_left(self._breaks, self._pos) + 1

    def _peek(self, k: int = 0) -> str:
        i = self._pos + k
        return self._text[i] if i < self._end else ""

    def _advance(self, k: int = 1) -> None:
        self._pos = min(self._pos + k, self._end)

    def _skip(self, run: re.Pattern[str]) -> None:
        """Move past what ``run`` matches at the position."""
        self._pos = run.match(self._text, self._pos).end()  # type: ignore[union-attr]

    def _skip_ws(self, newlines: bool) -> None:
        self._skip(_SPACE_LINES if newlines else _SPACE)

    def _record(self, path: KeyPath) -> None:
        self.lines.setdefault(path, self._line)

    def _document(self) -> None:
        table: KeyPath = ()
        while True:
            self._skip_ws(newlines=True)
            if self._pos >= self._end:
                return
            if self._text.startswith("[[", self._pos):
                line = self._line
                self._advance(2)
                keys = self._key()
                self._skip_ws(newlines=False)
                self._advance(2)
                table = self._array_table(keys, line)
            elif self._peek() == "[":
                line = self._line
                self._advance()
                keys = self._key()
                self._skip_ws(newlines=False)
                self._advance()
                table = self._resolve(keys)
                self.lines.setdefault(table, line)
            else:
                self._keyval(table)

    def _resolve(self, keys: tuple[str, ...]) -> KeyPath:
        """Absolute path of a header key: array-of-tables prefixes gain their last index."""
        path: KeyPath = ()
        for j in range(len(keys)):
            plain = keys[: j + 1]
            path = self._aot_last.get(plain, (*path, keys[j]))
            if plain not in self._aot_last:
                self.lines.setdefault(path, self._line)
        return path

    def _array_table(self, keys: tuple[str, ...], line: int) -> KeyPath:
        parent = self._resolve(keys[:-1]) if len(keys) > 1 else ()
        base = (*parent, keys[-1])
        index = self._aot_count.get(base, 0)
        self._aot_count[base] = index + 1
        path = (*base, index)
        self._aot_last[keys] = path
        self.lines.setdefault(base, line)
        self.lines.setdefault(path, line)
        return path

    def _keyval(self, base: KeyPath) -> None:
        line = self._line
        keys = self._key()
        for j in range(1, len(keys) + 1):
            self.lines.setdefault((*base, *keys[:j]), line)
        self._skip_ws(newlines=False)
        if self._peek() == "=":
            self._advance()
        self._skip_ws(newlines=False)
        self._value((*base, *keys))

    def _key(self) -> tuple[str, ...]:
        keys: list[str] = []
        while True:
            self._skip_ws(newlines=False)
            c = self._peek()
            if c in ('"', "'"):
                keys.append(self._quoted_key())
            else:
                start = self._pos
                self._skip(_BARE_KEY)
                if self._pos == start:
                    raise ValueError("no key")
                keys.append(self._text[start : self._pos])
            self._skip_ws(newlines=False)
            if self._peek() == ".":
                self._advance()
                continue
            return tuple(keys)

    def _quoted_key(self) -> str:
        start = self._pos
        self._string()
        token = self._text[start : self._pos]
        return tomllib.loads(f"k = {token}")["k"]

    def _string(self) -> None:
        quote = self._peek()
        if self._text.startswith(quote * 3, self._pos):
            self._skip(_LONG_BASIC if quote == '"' else _LONG_LITERAL)
            if self._pos < self._end and self._text[self._pos] == "\\":
                self._pos = self._end  # a backslash that ends the text takes the end with it
            elif self._pos < self._end:
                self._skip(_QUOTE_RUN[quote])  # up to two quotes may close the string
            return
        self._skip(_BASIC if quote == '"' else _LITERAL)
        self._advance()

    def _value(self, path: KeyPath) -> None:
        c = self._peek()
        if c == "{":
            self._advance()
            while True:
                self._skip_ws(newlines=True)
                if self._peek() in ("}", ""):
                    self._advance()
                    return
                self._keyval(path)
                self._skip_ws(newlines=True)
                if self._peek() == ",":
                    self._advance()
        elif c == "[":
            self._advance()
            index = 0
            while True:
                self._skip_ws(newlines=True)
                if self._peek() in ("]", ""):
                    self._advance()
                    return
                self._record((*path, index))
                self._value((*path, index))
                self._skip_ws(newlines=True)
                if self._peek() == ",":
                    self._advance()
                index += 1
        elif c in ('"', "'"):
            self._string()
        else:
            self._skip(_SCALAR)


def format_key_path(path: KeyPath) -> str:
    """``("study", 1, "rf_power")`` → ``"study[1].rf_power"`` (indices count from 0)."""
    out = ""
    for part in path:
        if isinstance(part, int):
            out += f"[{part}]"
        else:
            text = shorten(part) if part and set(part) <= _BARE else f'"{shorten(part)}"'
            out += f".{text}" if out else text
    return out
