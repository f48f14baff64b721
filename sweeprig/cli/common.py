"""What every command shares: how a :class:`SweeprigError` reaches the user.

One message on standard error — ``error: <where>: <what>`` and the fix on the next line —
printed as plain text (messages name keys such as ``[roles.sa]``, which rich would read as
markup), then a non-zero exit with the error's own code. Never a traceback.
"""

from __future__ import annotations

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
