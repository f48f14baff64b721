"""``sweeprig lab ...``: the lab database shared by several benches.

``lab init`` (create or upgrade the store in a PostgreSQL database), ``lab import`` (copy a
bench's SQLite runs into it), and the queue of runs (``lab submit``, ``lab worker``,
``lab queue``, ``lab cancel``, ``lab priority``) and the lab views (``lab runs``,
``lab lot``). The database is named by ``--db URL`` or the ``SWEEPRIG_DB`` environment
variable; its password is never printed (give it in ``PGPASSWORD`` or ``~/.pgpass``).
"""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from sweeprig.cli.common import fail
from sweeprig.errors import InputError, SweeprigError

app = typer.Typer(
    help="A lab of benches: one PostgreSQL database, a queue of runs, lot statistics.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
)

DbOption = Annotated[str | None, typer.Option(
    "--db", envvar="SWEEPRIG_DB", show_envvar=True, show_default=False,
    help="lab database URL, postgresql://USER@HOST:PORT/DBNAME (password in PGPASSWORD or "
    "~/.pgpass, never in a file)")]


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


@app.command("init")
def init_command(db: DbOption = None) -> None:
    """Create the run store in the lab database (or upgrade an older one)."""
    try:
        from sweeprig.store.postgres import PostgresRunStore

        url = database_url(db)
        with PostgresRunStore(url) as store:
            version = store.schema_version
    except SweeprigError as exc:
        raise fail(exc) from None
    typer.echo(f"lab database ready: {store.where} (run store schema {version})")


@app.command("import")
def import_command(
    store: Annotated[Path, typer.Option("--store", help="the bench's run store (SQLite file)",
                                        dir_okay=False)],
    run: Annotated[list[int] | None, typer.Option(
        "--run", help="run id to copy (repeat for several); all runs when not given")] = None,
    db: DbOption = None,
) -> None:
    """Copy runs of a bench's SQLite store into the lab database (whole runs, once each)."""
    try:
        from sweeprig.store.copy import copy_run
        from sweeprig.store.postgres import PostgresRunStore
        from sweeprig.store.sqlite import SqliteRunStore

        url = database_url(db)
        with SqliteRunStore(store, create=False) as source, PostgresRunStore(url) as target:
            ids = list(run) if run else sorted(r.id for r in source.runs())
            if not ids:
                raise InputError("this store holds no runs", where=str(store),
                                 fix="give the store the bench's runs were written to")
            for run_id in ids:
                copied = copy_run(source, target, run_id)
                if copied.skipped:
                    typer.echo(f"run {run_id}: {copied.skipped}")
                else:
                    typer.echo(f"run {run_id} -> lab run {copied.target_id} "
                               f"({copied.points} points)")
    except SweeprigError as exc:
        raise fail(exc) from None


def register(root: typer.Typer) -> None:
    """Add ``lab`` to the root app."""
    root.add_typer(app, name="lab")
