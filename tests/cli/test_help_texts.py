"""Every command's help, as an 80-column terminal shows it: complete, without type names.

Walks the real command tree (``sweeprig.cli.main.app``) and asks each command and sub-command
for ``--help``; the words of its help text and of every parameter's help must all be there
(rich markup once swallowed ``[safe_state]`` and ``[[spec]]``), no Python type name may
follow a parameter (``<bool>``, ``<list[Path]>``), no line may run past 80 columns, and every
shipped file an example names must exist and pass ``sweeprig check``.
"""

from __future__ import annotations

import functools
import re
from pathlib import Path

import pytest
import typer.main
from typer.testing import CliRunner

from sweeprig.cli.main import app

ROOT = Path(__file__).resolve().parents[2]
WIDTH = 80
TYPE_NAME = re.compile(r"<(?:bool|str|int|float|path|file|text|list\[[^\]]*\]|tuple[^>]*|"
                       r"dict[^>]*|datetime)>", re.IGNORECASE)


def _commands(command, path=()):
    yield path, command
    if not hasattr(command, "list_commands"):
        return
    ctx = command.make_context(" ".join(path) or "sweeprig", [], resilient_parsing=True)
    for name in sorted(command.list_commands(ctx)):  # the root builds a command when asked
        yield from _commands(command.get_command(ctx, name), (*path, name))


COMMANDS = list(_commands(typer.main.get_command(app)))
IDS = [" ".join(path) or "sweeprig" for path, _c in COMMANDS]


@functools.cache
def _help(path: tuple[str, ...]) -> str:
    result = CliRunner().invoke(app, [*path, "--help"], env={"COLUMNS": str(WIDTH)},
                                terminal_width=WIDTH)
    assert result.exit_code == 0, result.output
    return result.output


def _words(text: str) -> str:
    """Text with its line breaks and wrapping undone (a word broken after a hyphen joined)."""
    return re.sub(r"-\s+", "-", " ".join(text.split()))


def test_the_walk_reaches_every_command():
    names = {" ".join(path) for path, _c in COMMANDS}
    assert {"run", "check", "runs", "report", "scan", "sim", "sim serve"} <= names
    assert len(COMMANDS) >= 18


@pytest.mark.parametrize(("path", "command"), COMMANDS, ids=IDS)
def test_help_is_complete_and_has_no_type_names(path, command):
    shown = _help(path)
    assert not TYPE_NAME.findall(shown), f"type names in {' '.join(path)} --help:\n{shown}"
    assert all(len(line) <= WIDTH for line in shown.splitlines()), shown
    flat = _words(shown)
    sources = [command.help or ""] + [p.help or "" for p in command.params
                                      if not getattr(p, "hidden", False)]
    for source in sources:
        assert _words(source) in flat, f"lost words: {source!r} not in\n{shown}"
    for sub_name, sub in (getattr(command, "commands", None) or {}).items():
        first = (sub.help or "").split("\n\n")[0]
        assert _words(f"{sub_name} {first}") in flat, f"{sub_name}'s line is cut:\n{shown}"


@pytest.mark.parametrize(("path", "command"), COMMANDS, ids=IDS)
def test_a_flag_shows_no_value_and_an_option_names_its_value(path, command):
    shown = _help(path)
    options = shown.split("\nOptions:\n", 1)[1].splitlines()
    for param in command.params:
        if getattr(param, "param_type_name", "") != "option" or param.hidden:
            continue
        for opt in [max(param.opts, key=len)]:  # the value follows the long form
            line = next((ln for ln in options
                         if re.search(rf"(^|[ ,]){re.escape(opt)}(\s|,|$)", ln)), None)
            assert line is not None, f"{opt} not shown:\n{shown}"
            after = line.split(opt, 1)[1]
            if param.is_flag:
                assert not re.match(r" [A-Z<]", after), line
            else:
                assert re.match(r" [A-Z0-9|_a-z]+(\s|$)", after), line


def _example_files() -> set[str]:
    found: set[str] = set()
    for _path, command in COMMANDS:
        for line in (command.help or "").splitlines():
            if "sweeprig " in line:
                found.update(re.findall(r"(?<![\w/])sequences/\S+\.toml", line))
    return found


def test_examples_name_shipped_files_that_pass_check():
    files = _example_files()
    assert "sequences/demo/kx2417-characterisation.toml" in files  # the run example
    for name in sorted(files):
        assert (ROOT / name).is_file(), f"an example names {name}, which is not shipped"
        result = CliRunner().invoke(app, ["check", str(ROOT / name)])
        assert result.exit_code == 0, result.output
