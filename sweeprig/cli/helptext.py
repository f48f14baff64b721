"""Help texts that say everything and nothing more: the command tree tidied once it is built.

The root app prints its help as plain text (``rich_markup_mode=None`` in :mod:`sweeprig.cli.main`):
rich markup would swallow words in square brackets, and our texts name keys such as
``[safe_state]`` and ``[[spec]]``. :class:`HelpGroup` then walks every command and sub-command
once and gives each parameter a name of our own for its value instead of a Python type name
(``FILE`` for a path, ``N`` for a whole number, no value at all after a flag), and each
command the whole first paragraph of its help as its line in the command list, wrapped rather
than cut.
"""

from __future__ import annotations

import inspect
from enum import Enum
from pathlib import Path
from typing import Any, get_args, get_origin

from typer.core import TyperGroup

#: Option names whose path is a folder, not a file.
_FOLDERS = frozenset({"to", "folder", "out_dir", "profiles_dir", "lock_dir"})
#: Value names of our own for some options that take text.
_TEXT_NAMES = {"resource": "RESOURCE", "visa_library": "LIBRARY", "notify": "COMMAND",
               "sim_bench": "NAME|FILE", "profile": "NAME", "host": "ADDRESS"}


def value_name(param: Any) -> str:
    """The name a parameter's value goes by in help (``FILE``, ``N``, ``SECONDS``...)."""
    annotation = _annotation(param)
    if get_origin(annotation) is list and get_args(annotation):
        annotation = get_args(annotation)[0]
    name = str(getattr(param, "name", "") or "")
    if isinstance(annotation, type) and issubclass(annotation, Enum):
        return "|".join(str(member.value) for member in annotation)
    if annotation is Path or (isinstance(annotation, type) and issubclass(annotation, Path)):
        return "FOLDER" if name in _FOLDERS else "FILE"
    if annotation is int:
        return "N"
    if annotation is float:
        return "SECONDS" if name.endswith("_s") else "NUMBER"
    return _TEXT_NAMES.get(name, "TEXT")


def _annotation(param: Any) -> Any:
    descriptor = getattr(param, "type_descriptor", None)
    if descriptor is not None:
        annotation = getattr(descriptor, "annotation", None)
        if get_origin(annotation) is not None and type(None) in get_args(annotation):
            annotation = next(a for a in get_args(annotation) if a is not type(None))
        return annotation
    kind = getattr(getattr(param, "type", None), "name", "")  # older typer: a click type
    return {"path": Path, "integer": int, "float": float}.get(kind, str)


def tidy_command(command: Any) -> None:
    """Give ``command`` (and every sub-command) value names and a whole short help."""
    for param in getattr(command, "params", ()):
        if getattr(param, "param_type_name", "") == "argument" or type(param).__name__ \
                == "TyperArgument":
            if param.metavar is None:
                param.metavar = str(param.name).upper()
            # the argument's name says what it is; no type after it
            param.display_type_rich = lambda ctx=None: None
        elif getattr(param, "is_flag", False) or getattr(param, "count", False):
            continue  # a flag takes no value: nothing is shown after it
        elif param.metavar is None:
            param.metavar = value_name(param)
    help_text = getattr(command, "help", None)
    if help_text and not getattr(command, "short_help", None):
        command.short_help = short_help_of(help_text)
    for sub in (getattr(command, "commands", None) or {}).values():
        tidy_command(sub)


def short_help_of(help_text: str, short_help: str | None = None) -> str:
    """A command's line in the command list: its own short help if it has one, else the whole
    first paragraph of its help on one line."""
    if short_help:
        return inspect.cleandoc(short_help).strip()
    first = inspect.cleandoc(help_text or "").split("\n\n")[0]
    return " ".join(first.split())


class HelpGroup(TyperGroup):
    """The root command group, tidied once when the command line is built."""

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        tidy_command(self)
