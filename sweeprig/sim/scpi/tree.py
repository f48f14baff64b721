"""The SCPI command tree: header patterns → handlers, resolved once and cached.

Pattern syntax (as in docs/instruments.md):

* ``FREQuency`` — a keyword; upper-case letters are the short form, the whole word the long
  form; matching is case-insensitive.
* ``[SOURce]`` / ``[:CW|:FIXed]`` — an optional node (with alternatives).
* ``BANDwidth|BWIDth`` — alternatives of a required node.
* ``MARKer[1-4]`` — a keyword with an optional numeric suffix in 1..4 (omitted = the lower
  bound); the suffixes of a matched header are passed to the handler in pattern order.
* ``*IDN`` — a common command.

A trailing ``?`` in a pattern is ignored (whether a header is a query is decided by the
handlers registered: ``write`` for the command form, ``query`` for the ``?`` form).
"""

from __future__ import annotations

import re
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

from sweeprig.sim.scpi.errors import ScpiError
from sweeprig.sim.scpi.parser import mnemonic_forms

_SPEC_RE = re.compile(r"^(?P<word>\*?[A-Za-z][A-Za-z0-9]*?)(?:\[(?P<lo>\d+)-(?P<hi>\d+)\])?$")
_TYPED_RE = re.compile(r"^(?P<word>\*?[A-Z][A-Z_]*?)(?P<suffix>\d+)?$")

_CACHE_LIMIT = 4096


@dataclass(frozen=True, slots=True)
class KeywordSpec:
    short: str
    long: str
    suffix_range: tuple[int, int] | None

    def matches(self, word: str, suffix: int | None) -> bool:
        if word != self.short and word != self.long:
            return False
        if suffix is None:
            return True
        return self.suffix_range is not None and (
            self.suffix_range[0] <= suffix <= self.suffix_range[1]
        )


@dataclass(frozen=True, slots=True)
class Node:
    alternatives: tuple[KeywordSpec, ...]
    optional: bool

    @property
    def has_suffix(self) -> bool:
        return any(a.suffix_range is not None for a in self.alternatives)

    def default_suffix(self) -> int:
        for alt in self.alternatives:
            if alt.suffix_range is not None:
                return alt.suffix_range[0]
        return 1


def parse_pattern(pattern: str) -> tuple[Node, ...]:
    """Parse a header pattern into nodes (``ValueError`` for a malformed pattern)."""
    text = pattern.strip().removesuffix("?")
    nodes: list[Node] = []
    i = 0
    while i < len(text):
        ch = text[i]
        if ch == ":":
            i += 1
            continue
        if ch == "[" and not text[i + 1 : i + 2].isdigit():
            depth, j = 0, i
            while j < len(text):
                if text[j] == "[":
                    depth += 1
                elif text[j] == "]":
                    depth -= 1
                    if depth == 0:
                        break
                j += 1
            if j >= len(text):
                raise ValueError(f"unbalanced '[' in pattern {pattern!r}")
            body, optional, i = text[i + 1 : j], True, j + 1
        else:
            j = i
            while j < len(text) and not (
                text[j] == ":" or (text[j] == "[" and not text[j + 1 : j + 2].isdigit())
            ):
                if text[j] == "[":  # a suffix range: skip to its end
                    j = text.index("]", j)
                j += 1
            body, optional, i = text[i:j], False, j
        alternatives = []
        for alt in body.split("|"):
            match = _SPEC_RE.match(alt.strip().lstrip(":"))
            if match is None:
                raise ValueError(f"bad keyword {alt!r} in pattern {pattern!r}")
            short, long = mnemonic_forms(match["word"])
            rng = (int(match["lo"]), int(match["hi"])) if match["lo"] else None
            alternatives.append(KeywordSpec(short, long, rng))
        nodes.append(Node(tuple(alternatives), optional))
    if not nodes:
        raise ValueError(f"empty pattern {pattern!r}")
    return tuple(nodes)


Handler = Callable[[Any], Any]


@dataclass
class Entry:
    """A registered header: its nodes and the handlers of the command and query forms."""

    pattern: str
    nodes: tuple[Node, ...]
    write: Handler | None
    query: Handler | None


@dataclass(frozen=True, slots=True)
class Resolved:
    """A header resolved to its handler, with the numeric suffixes (pattern order)."""

    handler: Handler
    suffixes: tuple[int, ...]
    entry: Entry


def _split_typed(keyword: str) -> tuple[str, int | None]:
    match = _TYPED_RE.match(keyword)
    if match is None:
        return keyword, None
    suffix = match["suffix"]
    return match["word"], (int(suffix) if suffix is not None else None)


def _match(
    nodes: tuple[Node, ...], ni: int, typed: list[tuple[str, int | None]], ti: int,
    suffixes: list[int],
) -> list[int] | None:
    if ni == len(nodes):
        return list(suffixes) if ti == len(typed) else None
    node = nodes[ni]
    if ti < len(typed):
        word, suffix = typed[ti]
        for alt in node.alternatives:
            if alt.matches(word, suffix):
                extra = [suffix if suffix is not None else node.default_suffix()]
                found = _match(
                    nodes, ni + 1, typed, ti + 1, suffixes + extra if node.has_suffix else suffixes
                )
                if found is not None:
                    return found
    if node.optional:
        extra = [node.default_suffix()] if node.has_suffix else []
        return _match(nodes, ni + 1, typed, ti, suffixes + extra)
    return None


class CommandTree:
    """Headers → handlers. :meth:`resolve` caches every header it has resolved.

    Registering a pattern that is already registered merges the handlers (so a command form
    and a query form may be added separately).
    """

    def __init__(self) -> None:
        self._entries: list[Entry] = []
        self._by_pattern: dict[str, Entry] = {}
        self._cache: dict[tuple[tuple[str, ...], bool], Resolved] = {}

    def add(self, pattern: str, *, write: Handler | None = None,
            query: Handler | None = None) -> None:
        """Register ``pattern`` with a command handler and/or a query handler."""
        if write is None and query is None:
            raise ValueError(f"pattern {pattern!r} needs a write or a query handler")
        key = pattern.strip().removesuffix("?")
        entry = self._by_pattern.get(key)
        if entry is None:
            entry = Entry(key, parse_pattern(key), write, query)
            self._entries.append(entry)
            self._by_pattern[key] = entry
        else:
            entry.write = write or entry.write
            entry.query = query or entry.query
        self._cache.clear()

    def patterns(self) -> list[str]:
        return [e.pattern for e in self._entries]

    def resolve(self, keywords: tuple[str, ...], query: bool) -> Resolved:
        """The handler of a full header (upper-case keywords as typed); −113 if none."""
        key = (keywords, query)
        hit = self._cache.get(key)
        if hit is not None:
            return hit
        typed = [_split_typed(k) for k in keywords]
        for entry in self._entries:
            handler = entry.query if query else entry.write
            if handler is None:
                continue
            suffixes = _match(entry.nodes, 0, typed, 0, [])
            if suffixes is not None:
                resolved = Resolved(handler, tuple(suffixes), entry)
                if len(self._cache) >= _CACHE_LIMIT:
                    self._cache.clear()
                self._cache[key] = resolved
                return resolved
        header = ":".join(keywords) + ("?" if query else "")
        raise ScpiError(-113, header)
