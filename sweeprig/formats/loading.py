"""Read TOML files for sweeprig: UTF-8 check, parse, includes, and located errors.

Every problem becomes an :class:`~sweeprig.errors.InputError` whose ``where`` reads
``file:line: key.path`` so a user can jump straight to it.

Includes: a file may list fragments in ``include = ["shared/x.toml", ...]`` (paths relative to
the including file). Fragments are merged in order (a later fragment wins over an earlier one)
and the including file wins over all of them. Tables merge key by key, recursively; any other
value (numbers, strings, arrays, arrays of tables) is replaced as a whole. Fragments may
include further fragments; a cycle is an error that shows the chain.
"""

from __future__ import annotations

import difflib
import os
import re
import tomllib
import types
import typing
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, TypeVar

from pydantic import BaseModel, ValidationError

from sweeprig.errors import InputError
from sweeprig.files import read_file_bytes
from sweeprig.formats.fields import TAG_PREFIX
from sweeprig.formats.toml_depth import check_toml_depth, check_value_count
from sweeprig.formats.toml_locate import KeyLocator, KeyPath, format_key_path
from sweeprig.units import short_repr, shorten

M = TypeVar("M", bound=BaseModel)

_TOML_POS = re.compile(r"\s*\(at line (\d+), column (\d+)\)\s*$")
_TOML_END = re.compile(r"\s*\(at end of document\)\s*$")


def display_path(path: Path) -> str:
    """``path`` relative to the working directory when it lies below it, else as given."""
    try:
        return str(path.resolve().relative_to(Path.cwd().resolve()))
    except (ValueError, OSError, RuntimeError):  # not below it, a name the system refuses, a loop
        return str(path)


@dataclass
class SourceFile:
    """One TOML file as read: its text, parsed table, locator and included fragments."""

    path: Path
    display: str
    text: str
    data: dict[str, Any]
    includes: list[SourceFile] = field(default_factory=list)
    _locator: KeyLocator | None = None

    @property
    def locator(self) -> KeyLocator:
        if self._locator is None:
            self._locator = KeyLocator(self.text)
        return self._locator

    def where(self, key_path: KeyPath) -> str:
        """``file:line: key.path`` for a key of this very file."""
        line = self.locator.line(key_path)
        head = f"{self.display}:{line}" if line else self.display
        return f"{head}: {format_key_path(key_path)}" if key_path else head

    def origin(self, key_path: KeyPath) -> SourceFile:
        """The file (this one or an included fragment) that provides ``key_path``."""
        for k in range(len(key_path), 0, -1):
            prefix = key_path[:k]
            if _holds(self.data, prefix):
                return self
            for fragment in reversed(self.includes):
                if _holds(fragment.merged(), prefix):
                    return fragment.origin(prefix)
        return self

    def merged(self) -> dict[str, Any]:
        """This file's table with its fragments merged in (the file itself wins)."""
        out: dict[str, Any] = {}
        for fragment in self.includes:
            out = deep_merge(out, fragment.merged())
        return deep_merge(out, self.data)


@dataclass
class Document:
    """A loaded file with its includes: the merged table and where each key came from."""

    root: SourceFile
    data: dict[str, Any]

    @property
    def display(self) -> str:
        return self.root.display

    @property
    def path(self) -> Path:
        return self.root.path

    def where(self, key_path: KeyPath) -> str:
        """``file:line: key.path`` in whichever file provides the key."""
        return self.root.origin(tuple(key_path)).where(tuple(key_path))

    def included(self) -> tuple[tuple[Path, str], ...]:
        """Every included fragment, depth first in reading order: its path and exact text."""
        out: list[tuple[Path, str]] = []

        def walk(source: SourceFile) -> None:
            for fragment in source.includes:
                out.append((fragment.path, fragment.text))
                walk(fragment)

        walk(self.root)
        return tuple(out)


def _holds(data: Any, key_path: KeyPath) -> bool:
    """True when ``data`` itself holds the first non-table step of ``key_path``.

    A key defined as a table here but also in a fragment belongs here only if the rest of the
    path is here too; a leaf (or an array) present here belongs here as a whole.
    """
    node = data
    for part in key_path:
        if isinstance(node, dict):
            if part not in node:
                return False
            node = node[part]
            if not isinstance(node, dict):
                return True
        else:
            return True
    return True


def deep_merge(base: dict[str, Any], top: dict[str, Any]) -> dict[str, Any]:
    """Merge ``top`` over ``base``: tables recursively, everything else replaced by ``top``."""
    out = dict(base)
    for key, value in top.items():
        if isinstance(value, dict) and isinstance(out.get(key), dict):
            out[key] = deep_merge(out[key], value)
        else:
            out[key] = value
    return out


def read_text(path: Path, display: str | None = None, *, what: str = "file",
              where: str | None = None) -> str:
    """The file's text; refuses what is not a regular file of sensible size (see
    :mod:`sweeprig.files`) and bytes that are not UTF-8 (naming the offset).

    ``what`` names the file in messages; ``where`` places a problem opening it (default: the
    file's name), e.g. at the include line that named it.
    """
    shown = display or display_path(path)
    raw = read_file_bytes(path, what=what, display=shown, where=where, expected="a .toml file",
                          toml=True)
    if raw.startswith(b"\xef\xbb\xbf"):
        raw = raw[3:]
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = raw.count(b"\n", 0, exc.start) + 1
        byte = raw[exc.start]
        raise InputError(
            f"byte 0x{byte:02X} at offset {exc.start} is not valid UTF-8",
            where=f"{shown}:{line}",
            fix="save the file as UTF-8 (write units as plain text, e.g. 'degC' for °C)",
        ) from None


def parse_toml(text: str, display: str) -> dict[str, Any]:
    """Parse TOML text; a syntax error names the file, line and column."""
    check_toml_depth(text, display)
    try:
        data = tomllib.loads(text)
        check_value_count(data, display)
        return data
    except tomllib.TOMLDecodeError as exc:
        message = str(exc)
        match = _TOML_POS.search(message)
        if match:
            where = f"{display}:{match[1]}"
            what = f"TOML syntax error at column {match[2]}: {message[: match.start()]}"
        else:
            end = _TOML_END.search(message)
            where = f"{display}:{_last_line(text)}"
            detail = message[: end.start()] if end else message
            what = f"TOML syntax error at the end of the file: {detail}"
        raise InputError(
            what,
            where=where,
            fix="check quotes around text and units (\"2.4 GHz\"), brackets and '=' signs",
        ) from None
    except ValueError as exc:  # e.g. an integer of more than 4300 digits (Python's limit)
        raise long_number_error(text, display, exc) from None


_LONG_DIGITS = re.compile(r"[0-9_]{1000,}")


def long_number_error(text: str, display: str, exc: ValueError) -> InputError:
    """The error for TOML that ``tomllib`` refuses with a plain ValueError (a huge integer)."""
    match = _LONG_DIGITS.search(text)
    if match is None:
        return InputError(f"TOML value refused: {exc}", where=display,
                          fix="check the numbers in the file")
    line = text.count("\n", 0, match.start()) + 1
    digits = sum(c.isdigit() for c in match[0])
    return InputError(
        f"a number of {digits:,} digits is too long to read",
        where=f"{display}:{line}",
        fix="write the number with a unit or an exponent, e.g. \"2.4 GHz\" or 2.4e9",
    )


def _last_line(text: str) -> int:
    """Number of the last line of ``text`` (a final newline ends that line, it starts none)."""
    return max(1, text.count("\n") + (0 if text.endswith("\n") else 1))


def read_source(path: Path, *, _chain: tuple[Path, ...] = (), _where: str | None = None
                ) -> SourceFile:
    """Read, parse and resolve includes of one TOML file (recursively).

    ``_where`` names the include line that asked for this file (for problems opening it).
    """
    display = display_path(path)
    text = read_text(path, display, what="included file" if _where else "file", where=_where)
    data = parse_toml(text, display)
    source = SourceFile(path=path, display=display, text=text, data=data)
    includes = data.get("include", [])
    if isinstance(includes, str):
        includes = [includes]
    if not isinstance(includes, list) or not all(isinstance(i, str) for i in includes):
        raise InputError("include must be a list of file paths", where=source.where(("include",)),
                         fix='write include = ["shared/part.toml"]')
    chain = (*_chain, _resolved(path))
    for n, name in enumerate(includes):
        target = (path.parent / name)
        here = source.where(("include", n))
        try:
            resolved = target.resolve()
            exists = os.path.lexists(target)
        except (OSError, ValueError):  # a NUL character, a name too long for the file system
            resolved, exists = target, False
        except RuntimeError:  # a symlink loop (Python before 3.13)
            resolved, exists = target, True
        if resolved in chain:
            names = [display_path(p) for p in chain] + [display_path(resolved)]
            raise InputError(
                "include cycle: " + " → ".join(names),
                where=here,
                fix="remove one of these includes so that no file includes itself",
            )
        if not exists:
            raise InputError(
                f"included file {short_repr(name)} does not exist "
                f"(looked for {_shown_path(target)})",
                where=here,
                fix="include paths are relative to the including file; check the name",
            )
        source.includes.append(read_source(target, _chain=chain, _where=here))
    return source


def _resolved(path: Path) -> Path:
    """``path.resolve()``, or ``path`` itself when it cannot be resolved (a symlink loop)."""
    try:
        return path.resolve()
    except (OSError, RuntimeError, ValueError):
        return path


def _shown_path(path: Path) -> str:
    """``display_path``, shortened when long."""
    return shorten(display_path(path))


def load_document(path: str | os.PathLike[str]) -> Document:
    """Read a TOML file with its includes merged (see the module docstring)."""
    root = read_source(Path(path))
    return Document(root=root, data=root.merged())


# -- pydantic errors → InputError ---------------------------------------------------------


#: The page documenting sequence and bench files (named in fixes that have nothing better).
SEQUENCE_DOCS = "docs/sequence-format.md"


def validate(model: type[M], doc: Document, *, docs: str = SEQUENCE_DOCS) -> M:
    """Validate the merged table of ``doc`` as ``model``; the first problem → InputError.

    ``docs`` is the page a fix points to when it has nothing more precise to say.
    """
    try:
        return model.model_validate(doc.data)
    except ValidationError as exc:
        raise validation_error(model, exc, doc.where, docs=docs) from None


#: Most validation problems of one file described (each is located in the file's text).
MAX_DESCRIBED = 50


def validation_error(
    model: type[BaseModel], exc: ValidationError, where: Callable[[KeyPath], str],
    *, docs: str = SEQUENCE_DOCS,
) -> InputError:
    """Turn pydantic's errors into located InputErrors with a fix: the first, carrying the
    others in ``also`` (``sweeprig check`` lists them all)."""
    found: list[InputError] = []
    seen: set[tuple[str, str]] = set()
    errors = _relevant(exc.errors(include_url=False))
    for err in errors[:MAX_DESCRIBED]:  # each is located in the file: a bounded number
        loc = _clean(err["loc"])
        what, fix = _describe(model, err, loc, docs)
        place = where(loc)
        if (place, what) not in seen:
            seen.add((place, what))
            found.append(InputError(what, where=place, fix=fix))
    first = found[0]
    rest = len(errors) - MAX_DESCRIBED
    more = (InputError(f"{rest} more problem{'s' if rest > 1 else ''}, not described",
                       fix="fix the ones above and check again"),) if rest > 0 else ()
    first.also = (*found[1:], *more)
    return first


def _clean(loc: Any) -> KeyPath:
    return tuple(p for p in loc if not (isinstance(p, str) and p.startswith(TAG_PREFIX)))


def _relevant(errors: list[Any]) -> list[Any]:
    """Drop follow-on errors and put typos first.

    An error at a table that also has an error inside it is a consequence (pydantic reports
    "too short" for a list whose only item failed); an unknown key usually explains a
    missing one, so unknown keys come first.
    """
    locs = [_clean(e["loc"]) for e in errors]
    kept = [e for e, loc in zip(errors, locs, strict=True)
            if not any(len(other) > len(loc) and other[: len(loc)] == loc for other in locs)]
    kept = kept or errors
    return sorted(kept, key=lambda e: e["type"] != "extra_forbidden")


def _describe(model: type[BaseModel], err: Any, loc: KeyPath,
              docs: str = SEQUENCE_DOCS) -> tuple[str, str]:
    kind = err["type"]
    ctx = err.get("ctx") or {}
    key = loc[-1] if loc else ""
    if kind in ("quantity", "semantic"):
        return ctx.get("what", err["msg"]), ctx.get("fix") or f"see {docs}"
    if kind == "extra_forbidden":
        allowed = allowed_keys(model, loc[:-1])
        close = difflib.get_close_matches(str(key), allowed, n=1, cutoff=0.6)
        if close:
            return f"unknown key {short_repr(key)}", f"did you mean {close[0]!r}?"
        listing = ", ".join(sorted(allowed)) if allowed else "none"
        return f"unknown key {short_repr(key)}", f"keys allowed here: {listing}"
    if kind == "missing":
        if key in ("study", "spec"):
            return (f"missing required key {short_repr(key)}",
                    f"add at least one [[{key}]] table")
        return f"missing required key {short_repr(key)}", f"add {key} = ... (see {docs})"
    if kind == "literal_error":
        expected = ctx.get("expected", "")
        options = re.findall(r"'([^']*)'", str(expected))
        value = err.get("input")
        close = difflib.get_close_matches(str(value), options, n=1, cutoff=0.5)
        hint = f"did you mean {close[0]!r}? " if close else ""
        return (f"{short_repr(value)} is not allowed here", f"{hint}use one of {expected}")
    if kind in ("too_short",):
        return "an empty list is not allowed here", "give at least one value"
    if kind in ("int_type", "int_parsing", "int_from_float"):
        return (f"{short_repr(err.get('input'))} is not a whole number",
                "write a whole number such as 5")
    if kind in ("bool_type", "bool_parsing"):
        return (f"{short_repr(err.get('input'))} is not true or false",
                "write true or false (no quotes)")
    if kind in ("string_type",):
        return f"{short_repr(err.get('input'))} is not text", 'put the value in quotes, e.g. "text"'
    if kind in ("model_type", "dict_type", "model_attributes_type"):
        return (f"{short_repr(key)} must be a table", f"write it as [{format_key_path(loc)}] "
                "or as an inline table { ... }")
    if kind in ("tuple_type", "list_type"):
        if isinstance(err.get("input"), dict):
            return (f"{short_repr(key)} must be a list of tables",
                    f"start each entry with [[{format_key_path(loc)}]] (double brackets)")
        return f"{short_repr(key)} must be a list", 'write a list such as ["a", "b"]'

    if kind == "string_pattern_mismatch":
        return (f"{short_repr(err.get('input'))} has characters that are not allowed",
                f"use only the pattern {ctx.get('pattern')}")
    msg = err["msg"]
    if msg.startswith("Value error, "):
        msg = msg[len("Value error, "):]
    return shorten(msg, 300), f"see {docs}"


def allowed_keys(model: type[BaseModel], loc: KeyPath) -> list[str]:
    """Keys a table at ``loc`` (below ``model``) may hold, for "did you mean" suggestions."""
    candidates: list[type[BaseModel]] = [model]
    free_key = False  # the step after a table of free keys (a dict field) names an entry
    for part in loc:
        if isinstance(part, int):
            continue
        if free_key:
            free_key = False
            continue
        following: list[type[BaseModel]] = []
        for cand in candidates:
            for name, info in cand.model_fields.items():
                if part in (name, info.alias):
                    following.extend(_models_in(info.annotation))
                    free_key = free_key or _is_mapping(info.annotation)
        candidates = following
    keys: list[str] = []
    for cand in candidates:
        keys.extend(info.alias or name for name, info in cand.model_fields.items())
    return sorted(set(keys))


def _is_mapping(tp: Any) -> bool:
    """Whether ``tp`` is (a union holding) a ``dict[...]`` of models."""
    if typing.get_origin(tp) is dict:
        return True
    return any(_is_mapping(arg) for arg in typing.get_args(tp)) if isinstance(
        tp, types.UnionType) or typing.get_origin(tp) is typing.Union else False


def _models_in(tp: Any) -> list[type[BaseModel]]:
    if isinstance(tp, type) and issubclass(tp, BaseModel):
        return [tp]
    origin = typing.get_origin(tp)
    if origin is None and not isinstance(tp, types.UnionType):
        return []
    out: list[type[BaseModel]] = []
    for arg in typing.get_args(tp):
        out.extend(_models_in(arg))
    return out
