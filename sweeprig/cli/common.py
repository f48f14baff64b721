"""What every command shares: how a :class:`SweeprigError` reaches the user.

One message on standard error — ``error: <where>: <what>`` and the fix on the next line —
printed as plain text (messages name keys such as ``[roles.sa]``, which rich would read as
markup), then a non-zero exit with the error's own code. Never a traceback.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING, Annotated

import typer

from sweeprig.cli import term
from sweeprig.errors import InputError, SweeprigError

if TYPE_CHECKING:
    from sweeprig.store.open import StoreTarget


def error_console() -> term.Console:
    """A console on standard error that wraps long paths and never reads markup."""
    return term.Console(stderr=True, soft_wrap=True, highlight=False)


def print_error(exc: SweeprigError, *, prefix: str = "error: ") -> None:
    """Print ``exc`` as one plain-text message on standard error."""
    error_console().print(term.Text(prefix, style="bold red") + term.Text(exc.message()))


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
DbOption = Annotated[str | None, typer.Option(
    "--db", envvar="SWEEPRIG_DB", show_envvar=True, show_default=False,
    help="lab database URL, postgresql://USER@HOST:PORT/DBNAME, instead of --store (password "
    "in PGPASSWORD or ~/.pgpass, never in a file)")]


def database_url(db: str | None) -> str:
    """The lab database URL, or an :class:`InputError` saying how to give one."""
    from sweeprig.store.postgres import is_database_url, redact_url

    if not db:
        raise InputError("no lab database given", where="--db",
                         fix="give --db postgresql://USER@HOST:PORT/DBNAME or set SWEEPRIG_DB")
    if not is_database_url(db):
        raise InputError(f"{redact_url(db)!r} is not a PostgreSQL URL", where="--db",
                         fix="give a URL such as postgresql://USER@HOST:5432/DBNAME")
    return db


def chosen_store(store: Path, db: str | None) -> StoreTarget:
    """The run store a one-bench command uses: the lab database ``--db`` (or
    ``SWEEPRIG_DB``) names, else the SQLite file ``--store``. A ``--store`` other than the
    default together with a database is an :class:`InputError` (never a guess between them)."""
    from sweeprig.store.paths import DEFAULT_STORE_PATH

    if not db:
        return store
    if Path(store) != Path(DEFAULT_STORE_PATH):
        raise InputError("both --store and a lab database (--db or SWEEPRIG_DB) name a run "
                         "store", where="--store / --db",
                         fix="give one: --store FILE for a bench's SQLite store (unset "
                         "SWEEPRIG_DB), or --db URL for the lab database")
    return database_url(db)
