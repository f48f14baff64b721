"""How deep a TOML text nests, measured on the text before it is parsed.

A parser follows nested arrays and inline tables by recursion, and a key of thousands of dotted
parts (``a.a.a. … = 1``) builds thousands of nested tables: both cost time and memory out of
all proportion to the file (and Python's recursion limit ends the first in a traceback).
:func:`check_toml_depth` walks the text once, in linear time and constant memory per level,
and refuses a file whose tables, arrays and dotted keys nest deeper than :data:`MAX_DEPTH`.

The depth counted at a value is the depth of its container plus one per key part
(``a.b.c = 1`` at the top puts the value 3 levels deep); a table header counts its key parts
(``[[a.b]]`` one more, for the array); each array or inline table opened inside a value adds
one. Strings and comments are skipped, so brackets and dots inside them do not count.
"""

from __future__ import annotations

from sweeprig.errors import InputError

#: Deepest nesting accepted. Sweeprig's own files nest at most about 6 levels.
MAX_DEPTH = 64


class _Scan:
    """One pass over the text (see the module docstring)."""

    def __init__(self, text: str, limit: int) -> None:
        self.text = text
        self.limit = limit
        self.i = 0
        self.line = 1
        self.stack: list[int] = []  # depth of each open array / inline table
        self.base = 0  # depth of the current [table]
        self.dots = 0  # key parts so far in the current key segment, minus one
        self.value_depth: int | None = None  # depth of the value right after '='
        self.line_start = True

    def level(self) -> int:
        return self.stack[-1] if self.stack else self.base

    def too_deep(self) -> tuple[int, int] | None:
        """``(line, depth)`` of the first place nesting deeper than the limit, else None."""
        text, n = self.text, len(self.text)
        while self.i < n:
            c = text[self.i]
            if c == "\n":
                self.line += 1
                self.line_start = True
                if not self.stack:
                    self.dots = 0
                self.i += 1
                continue
            if c in " \t\r":
                self.i += 1
                continue
            at_line_start = self.line_start
            self.line_start = False
            if c == "#":
                end = text.find("\n", self.i)
                self.i = n if end < 0 else end
                continue
            if c in "\"'":
                self.value_depth = None
                self._skip_string(c)
                continue
            if c == "[" and at_line_start and not self.stack:
                found = self._header()
                if found is not None:
                    return found
                continue
            if c in "[{":
                depth = self.value_depth if self.value_depth is not None else self.level() + 1
                self.value_depth = None
                self.dots = 0
                if depth > self.limit:
                    return self.line, depth
                self.stack.append(depth)
            elif c in "]}":
                if self.stack:
                    self.stack.pop()
                self.value_depth = None
            elif c == "=":
                depth = self.level() + self.dots + 1
                if depth > self.limit:
                    return self.line, depth
                self.value_depth = depth
                self.dots = 0
            elif c == ".":
                self.dots += 1
                if self.level() + self.dots > self.limit:
                    return self.line, self.level() + self.dots
            elif c == ",":
                self.dots = 0
                self.value_depth = None
            else:
                self.value_depth = None
            self.i += 1
        return None

    def _header(self) -> tuple[int, int] | None:
        """A ``[table]`` or ``[[array.of.tables]]`` line: its depth becomes the base."""
        text, n = self.text, len(self.text)
        double = text.startswith("[[", self.i)
        self.i += 2 if double else 1
        dots = 0
        while self.i < n and text[self.i] not in "]\n":
            c = text[self.i]
            if c in "\"'":
                self._skip_string(c)
                continue
            if c == ".":
                dots += 1
                if dots + 1 > self.limit:
                    return self.line, dots + 1
            self.i += 1
        self.base = dots + 1 + (1 if double else 0)
        self.dots = 0
        self.value_depth = None
        if self.base > self.limit:
            return self.line, self.base
        return None

    def _skip_string(self, quote: str) -> None:
        """Move past a string starting at ``self.i`` (single- or multi-line, either quote)."""
        text, n = self.text, len(self.text)
        if text.startswith(quote * 3, self.i):
            end_mark = quote * 3
            j = self.i + 3
            while j < n:
                if quote == '"' and text[j] == "\\":
                    j += 2
                    continue
                if text.startswith(end_mark, j):
                    break
                j += 1
            self.line += text.count("\n", self.i, min(j, n))
            self.i = min(j + 3, n)
            while self.i < n and text[self.i] == quote:  # up to two quotes end the content
                self.i += 1
            return
        j = self.i + 1
        while j < n and text[j] != quote and text[j] != "\n":
            j += 2 if quote == '"' and text[j] == "\\" and j + 1 < n and text[j + 1] != "\n" \
                else 1
        self.i = j + 1 if j < n and text[j] == quote else j


def toml_depth_problem(text: str, limit: int = MAX_DEPTH) -> tuple[int, int] | None:
    """``(line, depth)`` where ``text`` first nests deeper than ``limit``, else None."""
    return _Scan(text, limit).too_deep()


def check_toml_depth(text: str, display: str, limit: int = MAX_DEPTH) -> None:
    """Refuse TOML text nesting deeper than ``limit`` (an InputError naming the line)."""
    found = toml_depth_problem(text, limit)
    if found is None:
        return
    line, depth = found
    raise InputError(
        f"tables, arrays or dotted keys nest more than {limit} levels deep here "
        f"(at least {depth})",
        where=f"{display}:{line}",
        fix="sweeprig files nest a few levels at most; check that this is the right file and "
        "remove the extra brackets or key parts",
    )
