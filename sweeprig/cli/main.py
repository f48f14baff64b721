"""``sweeprig`` entry point: one Typer app, command groups registered from their modules."""

from __future__ import annotations

import typer

app = typer.Typer(
    name="sweeprig",
    help="Characterise frequency mixers on a bench, unattended: run sequence files against "
    "real instruments or the simulated bench, and reduce the captures to datasheet figures.",
    no_args_is_help=True,
    add_completion=False,
)


@app.callback()
def _root() -> None:
    """sweeprig command line."""


def main() -> None:
    """Console entry point."""
    app()
