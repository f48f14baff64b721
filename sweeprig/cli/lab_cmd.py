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

from sweeprig.cli.common import DbOption, database_url, fail
from sweeprig.errors import InputError, SweeprigError

app = typer.Typer(
    help="A lab of benches: one PostgreSQL database, a queue of runs, lot statistics.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
)

@app.command("init")
def init_command(db: DbOption = None) -> None:
    """Create the run store in the lab database (or upgrade an older one)."""
    try:
        from sweeprig.store.postgres import PostgresRunStore

        url = database_url(db)
        with PostgresRunStore(url) as store:
            version = store.schema_version
        from sweeprig.lab.queue import LabQueue

        LabQueue(url).close()  # creates the queue's tables
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


def _queue(db: str | None):  # type: ignore[no-untyped-def]
    from sweeprig.lab.queue import LabQueue

    return LabQueue(database_url(db))


def _show(entries: list) -> None:  # type: ignore[type-arg]
    if not entries:
        typer.echo("(no queued runs)")
        return
    typer.echo(f"{'id':>5} {'prio':>4} {'state':<9} {'bench':<14} {'run':>5} "
               f"{'part / serial / lot':<34} sequence")
    for e in entries:
        who = f"{e.part} / {e.serial}" + (f" / {e.lot}" if e.lot else "")
        bench = e.bench or (f"[{e.bench_constraint}]" if e.bench_constraint else "-")
        typer.echo(f"{e.id:>5} {e.priority:>4} {e.state:<9} {bench:<14} "
                   f"{'' if e.run_id is None else e.run_id:>5} {who:<34} {e.sequence_path}")
        if e.message and e.state in ("failed", "running", "queued"):
            typer.echo(f"      {e.message.splitlines()[0]}")


@app.command("submit")
def submit_command(
    sequence: Annotated[Path, typer.Argument(help="sequence file (must pass `sweeprig check`)",
                                             dir_okay=False)],
    serial: Annotated[str, typer.Option("--serial", help="the unit's serial number")],
    part: Annotated[str | None, typer.Option(
        "--part", help="part number (default: the sequence's [part] id)")] = None,
    lot: Annotated[str, typer.Option("--lot", help="lot (wafer, corner) the unit is from")] = "",
    priority: Annotated[int, typer.Option("--priority", help="higher runs first")] = 0,
    bench: Annotated[str | None, typer.Option(
        "--on-bench", help="only this bench may take it (a bench name)")] = None,
    check_bench: Annotated[Path | None, typer.Option(
        "--check-bench", help="bench file to check the sequence against first, as `sweeprig "
        "check --bench` (default: the built-in simulated bench, as `sweeprig check`)",
        dir_okay=False)] = None,
    db: DbOption = None,
) -> None:
    """Queue a run of SEQUENCE for one unit; a free bench that can serve it takes it.

    The sequence must pass `sweeprig check` first; its files are hashed now, and a bench
    refuses the run if they have changed when it takes it."""
    try:
        from sweeprig.cli.check_cmd import _load_bench_or_sim, check_file

        url = database_url(db)
        loaded, _label = _load_bench_or_sim(check_bench)
        checked, _report = check_file(sequence, loaded)
        part_id = part or checked.part.id
        with _queue(url) as queue:
            entry = queue.submit(sequence, part=part_id, serial=serial, lot=lot,
                                 priority=priority, bench=bench)
    except SweeprigError as exc:
        raise fail(exc) from None
    typer.echo(f"queued run {entry.id}: {entry.part} {entry.serial} ({entry.queue_name}, "
               f"priority {entry.priority})")


@app.command("queue")
def queue_command(
    show_all: Annotated[bool, typer.Option("--all", help="also finished, failed and cancelled")]
    = False,
    db: DbOption = None,
) -> None:
    """List the queued and running runs (in the order benches take them)."""
    from sweeprig.lab.queue import LAB_STATES

    try:
        with _queue(db) as queue:
            entries = queue.list(states=LAB_STATES if show_all else ("queued", "running"))
    except SweeprigError as exc:
        raise fail(exc) from None
    _show(entries)


@app.command("cancel")
def cancel_command(
    queued_id: Annotated[int, typer.Argument(help="queued run id (see `sweeprig lab queue`)")],
    db: DbOption = None,
) -> None:
    """Cancel a run still waiting in the queue."""
    try:
        with _queue(db) as queue:
            entry = queue.cancel(queued_id)
    except SweeprigError as exc:
        raise fail(exc) from None
    typer.echo(f"queued run {entry.id} cancelled")


@app.command("priority")
def priority_command(
    queued_id: Annotated[int, typer.Argument(help="queued run id")],
    priority: Annotated[int, typer.Argument(help="new priority (higher runs first)")],
    db: DbOption = None,
) -> None:
    """Change the priority of a run still waiting in the queue."""
    try:
        with _queue(db) as queue:
            entry = queue.reprioritise(queued_id, priority)
    except SweeprigError as exc:
        raise fail(exc) from None
    typer.echo(f"queued run {entry.id}: priority {entry.priority}")


@app.command("worker")
def worker_command(
    bench: Annotated[Path, typer.Option("--bench", help="this bench's bench file",
                                        dir_okay=False)],
    name: Annotated[str | None, typer.Option(
        "--name", help="this bench's name in the lab (default: the bench file's name)")] = None,
    once: Annotated[bool, typer.Option(
        "--once", help="take what this bench can serve now, then stop")] = False,
    log_dir: Annotated[Path, typer.Option("--log-dir", help="folder for the runs' logs")]
    = Path("."),
    poll: Annotated[float, typer.Option("--poll", help="seconds between looks at an empty "
                                        "queue", min=0.1)] = 2.0,
    db: DbOption = None,
) -> None:
    """Serve the queue on this bench: take the runs it can serve, one at a time."""
    from sweeprig.signals import RunStopped

    try:
        from sweeprig.lab.worker import BenchWorker

        worker = BenchWorker(database_url(db), bench, name=name, log_dir=log_dir, once=once,
                             say=typer.echo, poll_s=poll)
        typer.echo(f"worker for bench {worker.name!r} on {worker.queue.where}")
        summary = worker.run()
    except (KeyboardInterrupt, RunStopped):
        typer.echo("worker stopped")
        raise typer.Exit(code=130) from None
    except SweeprigError as exc:
        raise fail(exc) from None
    typer.echo(f"done: {len(summary.done)}, refused: {len(summary.failed)}, "
               f"interrupted: {len(summary.interrupted)}")
    if once:  # a script asked for one pass: what was refused, or could not be served, fails it
        problem = _once_problem(worker, summary)
        if problem is not None:
            raise fail(problem)
    elif summary.idle_reason:
        typer.echo(summary.idle_reason)


def _once_problem(worker, summary) -> InputError | None:  # type: ignore[no-untyped-def]
    """Why one pass of a worker (``--once``) did not serve what was queued, or None: runs it
    refused (files changed since submission, a sequence its bench cannot run), else queued
    runs none of which its bench can serve."""
    from sweeprig.lab.queue import LabQueue

    if summary.failed:
        with LabQueue(worker.url) as queue:  # the worker's own is closed
            why = "; ".join(f"queued run {lab_id}: {queue.get(lab_id).message}"
                            for lab_id in summary.failed)
        return InputError(f"{len(summary.failed)} queued run(s) refused: {why}",
                          where=f"bench {worker.name}",
                          fix="submit them again (`sweeprig lab submit`) once the files are "
                          "as they should be; see `sweeprig lab queue --all`")
    if summary.idle_reason and not summary.done and summary.idle_reason != "the queue is empty":
        return InputError(summary.idle_reason, where=f"bench {worker.name}",
                          fix="those runs wait for a bench that can serve them (see `sweeprig "
                          "check SEQUENCE --bench BENCH` for why this one cannot); nothing "
                          "was taken from the queue")
    return None


def _filter(part: str | None, lot: str | None, serial: str | None, bench: str | None,
            state: str | None, since: str | None, until: str | None):  # type: ignore[no-untyped-def]
    from datetime import UTC, datetime

    from sweeprig.lab.lot import RunFilter

    def day(text: str | None, option: str, end: bool) -> datetime | None:
        if text is None:
            return None
        try:
            moment = datetime.fromisoformat(text)
        except ValueError:
            raise InputError(f"{text!r} is not a date", where=option,
                             fix="give a date as YYYY-MM-DD (or YYYY-MM-DDTHH:MM)") from None
        if len(text) <= 10 and end:
            moment = moment.replace(hour=23, minute=59, second=59, microsecond=999999)
        return moment if moment.tzinfo else moment.replace(tzinfo=UTC)

    return RunFilter(part, lot, serial, bench, state, day(since, "--since", False),
                     day(until, "--until", True))


PartOpt = Annotated[str | None, typer.Option("--part", help="part number")]
LotOpt = Annotated[str | None, typer.Option("--lot", help="lot")]
SerialOpt = Annotated[str | None, typer.Option("--serial", help="unit serial")]
BenchOpt = Annotated[str | None, typer.Option("--bench", help="bench name")]
StateOpt = Annotated[str | None, typer.Option("--state", help="run status (complete, ...)")]
SinceOpt = Annotated[str | None, typer.Option("--since", help="started on or after (UTC date)")]
UntilOpt = Annotated[str | None, typer.Option("--until", help="started on or before (UTC date)")]


@app.command("runs")
def runs_command(part: PartOpt = None, lot: LotOpt = None, serial: SerialOpt = None,
                 bench: BenchOpt = None, state: StateOpt = None, since: SinceOpt = None,
                 until: UntilOpt = None, db: DbOption = None) -> None:
    """The runs of every bench in the lab database, newest first, filtered."""
    try:
        from sweeprig.lab.lot import lab_runs, tag_value
        from sweeprig.store.postgres import PostgresRunStore

        where = _filter(part, lot, serial, bench, state, since, until)
        with PostgresRunStore(database_url(db), create=False) as store:
            runs = lab_runs(store, where)
    except SweeprigError as exc:
        raise fail(exc) from None
    if not runs:
        typer.echo("(no run matches)")
        return
    typer.echo(f"{'run':>5} {'status':<11} {'bench':<10} {'lot':<8} {'points':>9} "
               f"{'started (UTC)':<19} part / serial")
    for r in runs:
        typer.echo(f"{r.id:>5} {r.status:<11} {tag_value(r.tags, 'bench') or '-':<10} "
                   f"{tag_value(r.tags, 'lot') or '-':<8} "
                   f"{f'{r.points_done}/{r.points_total or 0}':>9} "
                   f"{r.created:%Y-%m-%d %H:%M:%S} {r.part} / {r.serial}")


@app.command("lot")
def lot_command(
    part: PartOpt = None, lot: LotOpt = None, bench: BenchOpt = None, since: SinceOpt = None,
    until: UntilOpt = None,
    out: Annotated[Path, typer.Option("--out", help="folder for lot.html and lot.json",
                                      file_okay=False)] = Path("lot-report"),
    db: DbOption = None,
) -> None:
    """Lot statistics: per figure and conditions, typ, mean, std, min/max, Cpk, outliers."""
    try:
        from sweeprig.lab.lot import lot_report, write_lot_report
        from sweeprig.store.postgres import PostgresRunStore

        where = _filter(part, lot, None, bench, None, since, until)
        with PostgresRunStore(database_url(db), create=False) as store:
            report = lot_report(store, where, on_reduce=lambda run_id: typer.echo(
                f"run {run_id} has no figures kept with it: reducing it (once)"))
        path = write_lot_report(report, out)
    except SweeprigError as exc:
        raise fail(exc) from None
    typer.echo(f"{report.part} lot {report.lot or '(all)'}: {len(report.units)} units, "
               f"{len(report.rows)} figure rows -> {path}")


def register(root: typer.Typer) -> None:
    """Add ``lab`` to the root app."""
    root.add_typer(app, name="lab")
