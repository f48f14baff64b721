"""The root command group builds each command only when it is asked for, and its command list
(made from the registrations, nothing built) is exactly what the built commands would show."""

from __future__ import annotations

import typer.main
from typer.testing import CliRunner

from sweeprig.cli.main import app

WIDTH = 80


def _root_help(group) -> str:
    ctx = group.make_context("sweeprig", ["--help"], resilient_parsing=True)
    formatter = ctx.make_formatter()
    formatter.width = WIDTH
    group.format_help(ctx, formatter)
    return formatter.getvalue()


def test_the_root_help_builds_no_command_and_lists_what_the_built_commands_show() -> None:
    group = typer.main.get_command(app)
    lazy = _root_help(group)
    assert dict(group.commands) == {}, "the root help built commands"
    ctx = group.make_context("sweeprig", [], resilient_parsing=True)
    names = group.list_commands(ctx)
    assert {"run", "check", "report", "twin", "sim", "lab"} <= set(names)
    for name in names:
        assert group.get_command(ctx, name) is not None, name
    assert list(group.commands) == names
    assert _root_help(group) == lazy  # now made from the built commands


def test_a_command_is_built_alone_and_once() -> None:
    group = typer.main.get_command(app)
    ctx = group.make_context("sweeprig", [], resilient_parsing=True)
    check = group.get_command(ctx, "check")
    assert list(group.commands) == ["check"]
    assert group.get_command(ctx, "check") is check
    assert group.get_command(ctx, "no-such-command") is None


def test_an_unknown_command_is_refused_with_a_suggestion() -> None:
    result = CliRunner().invoke(app, ["chek"])
    assert result.exit_code == 2
    assert "No such command 'chek'" in result.output
    assert "check" in result.output
