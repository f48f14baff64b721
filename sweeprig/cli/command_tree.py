"""The root of the command line, with each command built from its registration when it is
first asked for.

Typer turns every registered function into a command at start-up, reading the type hints of
every parameter of every command (most of ``sweeprig --help``'s time). The command modules are
still all imported at start-up, so a module that fails to import fails the whole command line
loudly instead of its command vanishing from the list; only the building is deferred:
``sweeprig check FILE`` builds ``check`` alone, and the root help lists every command from its
registration (name and first paragraph of its help, exactly what the built command would
show; ``tests/cli/test_command_tree.py`` compares the two).
"""

from __future__ import annotations

import inspect
from difflib import get_close_matches
from typing import Any, ClassVar

import typer
import typer.main
from typer import _click
from typer.models import CommandInfo, TyperInfo

from sweeprig.cli.helptext import HelpGroup, short_help_of, tidy_command


class LazyRootGroup(HelpGroup):
    """The root group: its commands come from :attr:`registry` (a Typer instance the command
    modules register on), each built and tidied once, when first asked for."""

    registry: ClassVar[typer.Typer | None] = None

    def _registrations(self) -> dict[str, CommandInfo | TyperInfo]:
        registry = type(self).registry
        found: dict[str, CommandInfo | TyperInfo] = {}
        if registry is None:
            return found
        for info in registry.registered_commands:
            name = info.name or typer.main.get_command_name(info.callback.__name__)  # type: ignore[union-attr]
            found[name] = info
        for group in registry.registered_groups:
            name = typer.main.solve_typer_info_defaults(group).name
            if name:
                found[name] = group
        return found

    def list_commands(self, ctx: _click.Context) -> list[str]:
        built = list(self.commands)
        return built + [name for name in self._registrations() if name not in self.commands]

    def get_command(self, ctx: _click.Context, cmd_name: str) -> _click.Command | None:
        command = self.commands.get(cmd_name)
        if command is not None:
            return command
        info = self._registrations().get(cmd_name)
        if info is None:
            return None
        command = build_command(info, self.rich_markup_mode)
        tidy_command(command)
        self.commands[cmd_name] = command
        return command

    def resolve_command(self, ctx: _click.Context, args: list[str]
                        ) -> tuple[str | None, _click.Command | None, list[str]]:
        """As typer's, with "Did you mean" drawn from every registered name (typer draws it
        from the commands built so far)."""
        try:
            return super().resolve_command(ctx, args)
        except _click.exceptions.UsageError as exc:
            if args and "Did you mean" not in exc.message:
                matches = get_close_matches(args[0], self.list_commands(ctx))
                if matches:
                    exc.message = (exc.message.rstrip(".") + ". Did you mean "
                                   + ", ".join(f"{m!r}" for m in matches) + "?")
            raise

    def format_commands(self, ctx: _click.Context, formatter: _click.HelpFormatter) -> None:
        """The command list from the registrations, without building any command."""
        rows = []
        for name, info in self._registrations().items():
            if name in self.commands:
                command = self.commands[name]
                if not command.hidden:
                    rows.append((name, command.get_short_help_str()))
                continue
            help_text, short, hidden = registered_help(info)
            if not hidden:
                rows.append((name, short_help_of(help_text, short)))
        if rows:
            with formatter.section("Commands"):
                formatter.write_dl(rows)


def build_command(info: CommandInfo | TyperInfo, markup: Any) -> _click.Command:
    """The click command (or group) typer builds from one registration."""
    if isinstance(info, CommandInfo):
        return typer.main.get_command_from_info(
            info, pretty_exceptions_short=True, rich_markup_mode=markup)
    return typer.main.get_group_from_info(
        info, pretty_exceptions_short=True, rich_markup_mode=markup, suggest_commands=True)


def registered_help(info: CommandInfo | TyperInfo) -> tuple[str, str | None, bool]:
    """(help text, short help or None, hidden) of a registration, as typer would resolve them
    when building it."""
    if isinstance(info, CommandInfo):
        text = (inspect.cleandoc(info.help) if info.help is not None
                else inspect.getdoc(info.callback) or "")
        return text, info.short_help, bool(info.hidden)
    solved = typer.main.solve_typer_info_defaults(info)
    return solved.help or "", solved.short_help, bool(solved.hidden)


def root_group(registry: typer.Typer) -> type[LazyRootGroup]:
    """The root group class whose commands come from ``registry``."""
    return type("SweeprigRoot", (LazyRootGroup,), {"registry": registry})
