"""Map a key path such as ``("study", 1, "rf_frequency", "start")`` to its line in TOML text.

Used only for error messages, on text that ``tomllib`` has already accepted. Handles table
headers (``[a.b]``), arrays of tables (``[[a]]``, counted per parent element), dotted keys,
quoted keys, inline tables, and arrays (one line per element, also across lines). A path that
is not in the text (a missing key) resolves to the line of its longest present prefix.
"""

from __future__ import annotations

import contextlib
import tomllib

from sweeprig.units import shorten

KeyPath = tuple[str | int, ...]

_BARE = set("ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789_-")


class KeyLocator:
    """Line numbers (1-based) of every key, table and array element in one TOML text."""

    def __init__(self, text: str) -> None:
        self._text = text
        self._pos = 0
        self._line = 1
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

    def _peek(self, k: int = 0) -> str:
        i = self._pos + k
        return self._text[i] if i < len(self._text) else ""

    def _advance(self, k: int = 1) -> None:
        for _ in range(k):
            if self._pos < len(self._text):
                if self._text[self._pos] == "\n":
                    self._line += 1
                self._pos += 1

    def _skip_ws(self, newlines: bool) -> None:
        while self._pos < len(self._text):
            c = self._text[self._pos]
            if c in " \t\r" or (newlines and c == "\n"):
                self._advance()
            elif c == "#":
                while self._pos < len(self._text) and self._text[self._pos] != "\n":
                    self._advance()
            else:
                return

    def _record(self, path: KeyPath) -> None:
        self.lines.setdefault(path, self._line)

    def _document(self) -> None:
        table: KeyPath = ()
        while True:
            self._skip_ws(newlines=True)
            if self._pos >= len(self._text):
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
                while self._peek() and self._peek() in _BARE:
                    self._advance()
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
            self._advance(3)
            while self._pos < len(self._text):
                if quote == '"' and self._peek() == "\\":
                    self._advance(2)
                elif self._text.startswith(quote * 3, self._pos):
                    self._advance(3)
                    while self._peek() == quote:  # up to two quotes may close the string
                        self._advance()
                    return
                else:
                    self._advance()
            return
        self._advance()
        while self._pos < len(self._text) and self._peek() != quote:
            if quote == '"' and self._peek() == "\\":
                self._advance()
            self._advance()
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
            while self._peek() and self._peek() not in ",]}\n#":
                self._advance()


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
