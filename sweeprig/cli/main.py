"""``sweeprig`` entry point: one Typer app, command groups registered from their modules."""

from __future__ import annotations

import typer

from sweeprig.cli import (
    bus_cmd,
    calibrate_cmd,
    check_cmd,
    golden_cmd,
    lab_cmd,
    night_cmd,
    probe_cmd,
    report_cmd,
    run_cmd,
    scan_cmd,
    sim_cmd,
    store_cmd,
    twin_cmd,
)
from sweeprig.cli.command_tree import root_group

#: Where every command registers; the root group builds each one when it is first asked for.
commands = typer.Typer()
run_cmd.register(commands)
check_cmd.register(commands)
store_cmd.register(commands)
scan_cmd.register(commands)
bus_cmd.register(commands)
report_cmd.register(commands)
calibrate_cmd.register(commands)
night_cmd.register(commands)
probe_cmd.register(commands)
commands.add_typer(twin_cmd.app, name="twin")
commands.add_typer(golden_cmd.app, name="golden")
lab_cmd.register(commands)
commands.add_typer(sim_cmd.app, name="sim")  # a module that fails to import fails the command


def _root() -> None:
    """The root's own callback: nothing to do before a command."""


app = typer.Typer(
    name="sweeprig",
    help="Characterise frequency mixers on a bench, unattended: run sequence files against "
    "real instruments or the simulated bench, and reduce the captures to datasheet figures.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
    rich_markup_mode=None,  # plain help: rich markup would swallow "[safe_state]" (helptext.py)
    cls=root_group(commands),
    callback=_root,
)


def main() -> None:
    """Console entry point."""
    app()
