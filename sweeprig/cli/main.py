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
from sweeprig.cli.helptext import HelpGroup

app = typer.Typer(
    name="sweeprig",
    help="Characterise frequency mixers on a bench, unattended: run sequence files against "
    "real instruments or the simulated bench, and reduce the captures to datasheet figures.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
    rich_markup_mode=None,  # plain help: rich markup would swallow "[safe_state]" (helptext.py)
    cls=HelpGroup,
)

run_cmd.register(app)
check_cmd.register(app)
store_cmd.register(app)
scan_cmd.register(app)
bus_cmd.register(app)
report_cmd.register(app)
calibrate_cmd.register(app)
night_cmd.register(app)
probe_cmd.register(app)
app.add_typer(twin_cmd.app, name="twin")
app.add_typer(golden_cmd.app, name="golden")
lab_cmd.register(app)
app.add_typer(sim_cmd.app, name="sim")  # a module that fails to import fails the command


def main() -> None:
    """Console entry point."""
    app()
