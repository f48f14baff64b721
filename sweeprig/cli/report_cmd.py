"""``sweeprig report``: reduce a stored run to figures, judge them, write the report files."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from sweeprig.cli import term
from sweeprig.cli.common import DbOption, chosen_store, fail
from sweeprig.errors import (
    VERDICT_FAILED_EXIT_CODE,
    VERDICT_INCONCLUSIVE_EXIT_CODE,
    SweeprigError,
    verdict_exit_code,
)
from sweeprig.store.paths import DEFAULT_STORE_PATH, run_folder

_REPORT_HELP = """Reduce a stored run to datasheet figures, judge them against the sequence's
[[spec]] limits, and write the report.

Files written into the output folder (default: beside the store, <store file>.run-<id>/,
e.g. results/sweeprig.sqlite.run-3/): report.html (one
self-contained file with the plots), figures.json (every figure, its conditions, flags and
the point indices behind it), figures.csv/.parquet and captures.csv/.parquet. Works on
finished, aborted and still-running runs (a run that is not complete cannot pass).

Exit codes: 0 report written; with --fail-on-verdict, 6 when the verdict is FAIL and 9 when
it is INCONCLUSIVE (only PASS exits 0); 5 no such run or store, or a file could not be
written.

Examples:

  sweeprig report 3

  sweeprig report 3 --store results/lot7.sqlite --out reports/lot7-unit12 --fail-on-verdict
"""


def report_command(
    run_id: Annotated[int, typer.Argument(help="run id, as listed by `sweeprig runs`",
                                          show_default=False)],
    store: Annotated[Path, typer.Option(
        "--store", help="run store (SQLite file)", dir_okay=False)] = DEFAULT_STORE_PATH,
    out: Annotated[Path | None, typer.Option(
        "--out", help="folder for the report files [default: <store file>.run-<id>/ beside "
        "the store]",
        file_okay=False, show_default=False)] = None,
    fail_on_verdict: Annotated[bool, typer.Option(
        "--fail-on-verdict",
        help=f"exit with code {VERDICT_FAILED_EXIT_CODE} when the verdict is FAIL and "
        f"{VERDICT_INCONCLUSIVE_EXIT_CODE} when it is INCONCLUSIVE (0 only for PASS; for "
        "scripts and CI)")] = False,
    db: DbOption = None,
) -> None:
    from sweeprig.store.open import open_run_store

    console = term.Console(highlight=False)
    try:
        target = chosen_store(store, db)
        folder = out if out is not None else run_folder(target, run_id)
        with open_run_store(target, create=False) as opened:
            # a large run's readings begun in a child process first: it starts while the
            # analysis is imported here (about half a second each)
            tables = opened.begin_run_tables(run_id)
            try:
                from sweeprig.report import report_stored_run
            except BaseException:
                tables.stop()
                raise
            run, files = report_stored_run(opened, run_id, folder, tables=tables)
    except SweeprigError as exc:
        raise fail(exc) from None
    from sweeprig.report.terminal import print_summary

    print_summary(run, console)
    console.print(term.Text(f"report: {files.html}"))
    console.print(term.Text(f"figures: {files.figures_json}; tables: "
                            + ", ".join(p.name for p in files.tables)))
    if fail_on_verdict and verdict_exit_code(run.verdict):
        raise typer.Exit(verdict_exit_code(run.verdict))


def register(app: typer.Typer) -> None:
    """Add ``report`` to the root app."""
    app.command("report", help=_REPORT_HELP, no_args_is_help=True)(report_command)
