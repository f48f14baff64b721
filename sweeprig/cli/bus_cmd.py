"""``sweeprig bus``: print a run's SCPI bus log (recorded with ``run --bus-log``)."""

from __future__ import annotations

from datetime import UTC, datetime
from typing import TYPE_CHECKING, Annotated

import typer

from sweeprig.cli import term
from sweeprig.cli.common import RunStoreOption, fail
from sweeprig.errors import InputError, SweeprigError
from sweeprig.store.paths import DEFAULT_STORE_PATH
from sweeprig.text import one_line

if TYPE_CHECKING:
    from sweeprig.store.sqlite import SqliteRunStore

_BUS_HELP = """Print the SCPI exchanges of a run, for post-mortems: time, role, what was sent,
what came back and how long it took. Needs a run recorded with `sweeprig run --bus-log`.

Examples:

  sweeprig bus 7 --point 120

  sweeprig bus 7 --since 2026-03-04T02:10:00 --until 2026-03-04T02:15:00 --role sa
"""


def bus_command(
    run_id: Annotated[int, typer.Argument(help="the run", show_default=False)],
    point: Annotated[int | None, typer.Option(
        "--point", help="only the exchanges of this point index")] = None,
    since: Annotated[str | None, typer.Option(
        "--since", help="only exchanges at or after this time (ISO 8601, UTC if no zone)",
    )] = None,
    until: Annotated[str | None, typer.Option(
        "--until", help="only exchanges at or before this time (ISO 8601)")] = None,
    role: Annotated[str | None, typer.Option("--role", help="only this bench role")] = None,
    last: Annotated[int | None, typer.Option("--last", help="only the last N exchanges")] = None,
    store: RunStoreOption = DEFAULT_STORE_PATH,
) -> None:
    from sweeprig.store.sqlite import SqliteRunStore

    try:
        start = _time(since, "--since")
        end = _time(until, "--until")
        with SqliteRunStore(store, create=False) as db:
            db.run(run_id)
            if point is not None:
                start, end = _point_window(db, run_id, point)
            entries = db.bus_log(run_id, limit=last, since=start, until=end, role=role)
    except SweeprigError as exc:
        raise fail(exc) from None
    console = term.Console(highlight=False, soft_wrap=True)
    if not entries:
        console.print(f"run {run_id}: no bus log entries match (was it run with --bus-log?)")
        return
    for e in entries:
        reply = "" if e.received is None else f" -> {one_line(e.received)}"
        console.print(f"{e.time.isoformat(timespec='milliseconds')} {e.role:<8} "
                      f"{one_line(e.sent)}{reply}  ({e.duration_s * 1e3:.2f} ms)", markup=False)


def _time(text: str | None, option: str) -> datetime | None:
    if text is None:
        return None
    try:
        value = datetime.fromisoformat(text)
    except ValueError:
        raise InputError(f"{text!r} is not a time", where=option,
                         fix="write it as ISO 8601, e.g. 2026-03-04T02:10:00") from None
    return value if value.tzinfo is not None else value.replace(tzinfo=UTC)


def _point_window(db: SqliteRunStore, run_id: int, point: int) -> tuple[datetime, datetime]:
    import pandas as pd

    frame = db.points_frame(run_id)
    row = frame[frame["point_index"] == point]
    if row.empty:
        raise InputError(f"run {run_id} has no stored point {point}", where="--point",
                         fix="`sweeprig status RUN_ID` shows which points are stored")
    return (pd.Timestamp(row["wall_start"].iloc[0]).to_pydatetime(),
            pd.Timestamp(row["wall_end"].iloc[0]).to_pydatetime())


def register(app: typer.Typer) -> None:
    """Add ``bus`` to the root app."""
    app.command("bus", help=_BUS_HELP, no_args_is_help=True)(bus_command)
