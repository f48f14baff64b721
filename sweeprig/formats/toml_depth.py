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

import re

from sweeprig.errors import InputError
from sweeprig.formats.toml_locate import format_key_path

#: Deepest nesting accepted. Sweeprig's own files nest at most about 6 levels.
MAX_DEPTH = 64
#: Most table headers (``[t]``, ``[[t]]``) accepted: Python's TOML parser takes time growing
#: with the square of their number (100,000 ``[[study]]`` lines take 10 s); a sequence of
#: 2,000 studies has a few thousand.
MAX_TABLE_HEADERS = 20_000
#: Most values (keys and array items, counted through every level) a parsed file may hold:
#: validating more, each wrong, would build one error per value (500,000 take 300 MB).
MAX_VALUES = 200_000


#: The characters the scan stops at; everything else is skipped in one regex search.
_STOPS = re.compile(r"[\n#\"'\[\]{}=.,]")
#: Where a basic (double-quoted) string may end or escape: a quote, a backslash, a line break.
_BASIC_STOPS = re.compile(r'["\\\n]')


class _Scan:
    """One pass over the text (see the module docstring)."""

    def __init__(self, text: str, limit: int) -> None:
        self.text = text
        self.limit = limit
        self.i = 0
        self.stack: list[int] = []  # depth of each open array / inline table
        self.base = 0  # depth of the current [table]
        self.dots = 0  # key parts so far in the current key segment, minus one
        self.value_depth: int | None = None  # depth of the value right after '='
        self.headers = 0
        self.too_many_headers: int | None = None  # line of the header past the limit

    def level(self) -> int:
        return self.stack[-1] if self.stack else self.base

    def found(self, depth: int) -> tuple[int, int]:
        return self.text.count("\n", 0, self.i) + 1, depth

    def too_deep(self) -> tuple[int, int] | None:
        """``(line, depth)`` of the first place nesting deeper than the limit, else None."""
        text = self.text
        while True:
            match = _STOPS.search(text, self.i)
            if match is None:
                return None
            self.i = match.start()
            c = match[0]
            if c == "\n":
                if not self.stack:
                    self.dots = 0
                    self.value_depth = None
            elif c == "#":
                end = text.find("\n", self.i)
                self.i = len(text) if end < 0 else end
                continue
            elif c in "\"'":
                self.value_depth = None
                self._skip_string(c)
                continue
            elif c == "[" and not self.stack and self._at_line_start():
                problem = self._header()
                if problem is not None:
                    return problem
                continue
            elif c in "[{":
                depth = self.value_depth if self.value_depth is not None else self.level() + 1
                self.value_depth = None
                self.dots = 0
                if depth > self.limit:
                    return self.found(depth)
                self.stack.append(depth)
            elif c in "]}":
                if self.stack:
                    self.stack.pop()
                self.value_depth = None
            elif c == "=":
                depth = self.level() + self.dots + 1
                if depth > self.limit:
                    return self.found(depth)
                self.value_depth = depth
                self.dots = 0
            elif c == ".":
                self.dots += 1
                if self.level() + self.dots > self.limit:
                    return self.found(self.level() + self.dots)
            else:  # ","
                self.dots = 0
                self.value_depth = None
            self.i += 1

    def _at_line_start(self) -> bool:
        start = self.text.rfind("\n", 0, self.i) + 1
        return not self.text[start: self.i].strip()

    def _header(self) -> tuple[int, int] | None:
        """A ``[table]`` or ``[[array.of.tables]]`` line: its depth becomes the base."""
        text, n = self.text, len(self.text)
        self.headers += 1
        if self.headers > MAX_TABLE_HEADERS and self.too_many_headers is None:
            self.too_many_headers = self.text.count("\n", 0, self.i) + 1
            self.i = n  # stop here: the file is refused for its size
            return None
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
                    return self.found(dots + 1)
            self.i += 1
        self.base = dots + 1 + (1 if double else 0)
        self.dots = 0
        self.value_depth = None
        if self.base > self.limit:
            return self.found(self.base)
        return None

    def _skip_string(self, quote: str) -> None:
        """Move past a string starting at ``self.i`` (single- or multi-line, either quote).

        An unterminated one-line string ends at its line break (the parser reports it).
        """
        text, n = self.text, len(self.text)
        multi = text.startswith(quote * 3, self.i)
        j = self.i + (3 if multi else 1)
        while j < n:
            if quote == "'":
                end = text.find("\'\'\'" if multi else "'", j)
                line_end = -1 if multi else text.find("\n", j, end if end >= 0 else n)
                if line_end >= 0:
                    self.i = line_end
                    return
                j = n if end < 0 else end
                break
            stop = _BASIC_STOPS.search(text, j)
            if stop is None:
                j = n
                break
            j = stop.start()
            if stop[0] == "\\":
                j += 2
            elif stop[0] == "\n":
                if not multi:
                    self.i = j
                    return
                j += 1
            elif not multi or text.startswith('"""', j):
                break
            else:
                j += 1
        if j >= n:
            self.i = n
            return
        j += 3 if multi else 1
        if multi:  # up to two more quotes belong to the content
            extra = 0
            while extra < 2 and j < n and text[j] == quote:
                j += 1
                extra += 1
        self.i = j


def check_value_count(data: dict[str, object], display: str, limit: int = MAX_VALUES) -> None:
    """Refuse a parsed file holding more than ``limit`` values (keys and array items at every
    level), naming the key path where the count passed the limit. Linear, no recursion."""
    count = 0
    stack: list[tuple[tuple[object, ...], object]] = [((), data)]
    while stack:
        path, node = stack.pop()
        children: list[tuple[object, object]] = []
        if isinstance(node, dict):
            children = list(node.items())
        elif isinstance(node, list):
            children = list(enumerate(node))
        count += len(children)
        if count > limit:
            shown = format_key_path(tuple(path)) or "the top level"  # type: ignore[arg-type]
            raise InputError(
                f"the file holds more than {limit:,} values (counted through {shown})",
                where=display,
                fix="a sequence or bench file holds at most some thousands of values; check "
                "that this is the right file, use ranges instead of long lists, or split it")
        stack.extend(((*path, key), child) for key, child in children
                     if isinstance(child, dict | list))


def toml_depth_problem(text: str, limit: int = MAX_DEPTH) -> tuple[int, int] | None:
    """``(line, depth)`` where ``text`` first nests deeper than ``limit``, else None."""
    return _Scan(text, limit).too_deep()


def check_toml_depth(text: str, display: str, limit: int = MAX_DEPTH) -> None:
    """Refuse TOML text nesting deeper than ``limit``, or holding more than
    :data:`MAX_TABLE_HEADERS` table headers (an InputError naming the line)."""
    scan = _Scan(text, limit)
    found = scan.too_deep()
    if scan.too_many_headers is not None:
        raise InputError(
            f"the file holds more than {MAX_TABLE_HEADERS:,} table headers ([...] or [[...]])",
            where=f"{display}:{scan.too_many_headers}",
            fix="a sequence or bench file holds at most a few thousand tables; check that "
            "this is the right file, or split it")
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
