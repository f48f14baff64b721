"""What every command shares: how a :class:`SweeprigError` reaches the user.

One message on standard error — ``error: <where>: <what>`` and the fix on the next line —
printed as plain text (messages name keys such as ``[roles.sa]``, which rich would read as
markup), then a non-zero exit with the error's own code. Never a traceback.
"""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer
from rich.console import Console
from rich.text import Text

from sweeprig.errors import SweeprigError


def error_console() -> Console:
    """A console on standard error that wraps long paths and never reads markup."""
    return Console(stderr=True, soft_wrap=True, highlight=False)


def print_error(exc: SweeprigError, *, prefix: str = "error: ") -> None:
    """Print ``exc`` as one plain-text message on standard error."""
    error_console().print(Text(prefix, style="bold red") + Text(exc.message()))


def fail(exc: SweeprigError) -> typer.Exit:
    """Print ``exc`` and return the ``typer.Exit`` to raise (``raise fail(exc) from None``)."""
    print_error(exc)
    return typer.Exit(code=exc.exit_code)


# Options several commands share (one wording, one default).
RunStoreOption = Annotated[Path, typer.Option("--store", help="run store (SQLite file)")]
SimOption = Annotated[bool, typer.Option(
    "--sim", help="run on the built-in simulated bench (no hardware)")]
SimBenchOption = Annotated[str | None, typer.Option(
    "--sim-bench", help="simulated-bench description (file or shipped name)")]
QuietOption = Annotated[bool, typer.Option("--quiet", "-q", help="no progress display")]
