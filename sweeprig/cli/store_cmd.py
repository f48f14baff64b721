"""``sweeprig runs``, ``sweeprig status`` and ``sweeprig export``: look at stored runs.

These only read the run store, so they work from another terminal while a run is writing.
"""

from __future__ import annotations

import json
from collections.abc import Mapping
from datetime import datetime, timedelta
from enum import StrEnum
from pathlib import Path
from typing import TYPE_CHECKING, Annotated, Any

import typer

from sweeprig.cli import term
from sweeprig.cli.common import DbOption, chosen_store, fail
from sweeprig.errors import StoreError, SweeprigError
from sweeprig.store.paths import DEFAULT_STORE_PATH
from sweeprig.text import escape_controls, one_line

if TYPE_CHECKING:
    import pandas as pd

    from sweeprig.store.base import RunInfo
    from sweeprig.store.sqlite import SqliteRunStore

StoreOption = Annotated[
    Path,
    typer.Option(
        "--store",
        help="Run store file (SQLite).",
        show_default=True,
        dir_okay=False,
    ),
]


class ExportFormat(StrEnum):
    """File formats of ``sweeprig export``."""

    csv = "csv"
    parquet = "parquet"
    both = "both"


_fail = fail


def _open(path: Path | str) -> SqliteRunStore:
    """The run store: an SQLite file, or the lab database for a ``postgresql://`` URL."""
    from sweeprig.store.open import open_run_store

    return open_run_store(path, create=False)  # type: ignore[return-value]


def _when(moment: datetime | None) -> str:
    return "" if moment is None else moment.astimezone().strftime("%Y-%m-%d %H:%M:%S")


def _duration(seconds: float | None) -> str:
    if seconds is None or seconds < 0:
        return ""
    whole = round(seconds)
    hours, rest = divmod(whole, 3600)
    minutes, secs = divmod(rest, 60)
    return f"{hours}:{minutes:02d}:{secs:02d}"


def _progress(done: int, total: int | None, *, percent: bool = True) -> str:
    if total:
        return f"{done}/{total}" + (f" ({100.0 * done / total:.0f}%)" if percent else "")
    return str(done)


_STATUS_STYLE = {
    "complete": "green",
    "running": "cyan",
    "planned": "white",
    "aborted": "red",
    "interrupted": "yellow",
    "unsafe": "bold red",
}


def runs_command(store: StoreOption = DEFAULT_STORE_PATH, db: DbOption = None) -> None:
    """List the stored runs, newest first.

    Example: sweeprig runs --store results/sweeprig.sqlite
    """
    from sweeprig.store.open import store_label

    try:
        target = chosen_store(store, db)
        with _open(target) as opened:
            summaries = opened.runs()
    except SweeprigError as exc:
        raise _fail(exc) from None
    console = term.Console(highlight=False)
    if not summaries:
        console.print(f"no runs in {store_label(target)}")
        return
    console.print(runs_table(summaries, store_label(target), console.width, console))


def runs_table(summaries: list[Any], store: str, width: int, console: term.Console) -> term.Table:
    """The runs as a table that fits ``width`` columns (report/fit_table.py): the start time
    and the progress shorten first, then the duration, the serial, the start time and the
    sequence are left out, in that order; id, status, part and points always show."""
    from rich import box

    from sweeprig.report.fit_table import Column, fitted_table

    def status(run: Any) -> term.Text:
        return term.Text(run.status, style=_STATUS_STYLE.get(run.status, "white"))

    sequence = [term.Text(one_line(Path(r.sequence_path).stem) + (" (sim)" if r.simulated else ""))
                for r in summaries]
    columns = [
        Column("id", [str(r.id) for r in summaries], 100, justify="right"),
        Column("status", [status(r) for r in summaries], 100),
        Column("part", [term.Text(one_line(r.part)) for r in summaries], 100, wrap=True),
        Column("serial", [term.Text(one_line(r.serial)) for r in summaries], 50, wrap=True),
        Column("points", [_progress(r.points_done, r.points_total) for r in summaries], 100,
               short_cells=[_progress(r.points_done, r.points_total, percent=False)
                            for r in summaries], justify="right"),
        Column("started", [_when(r.created)[:16] for r in summaries], 60,
               short_cells=[_when(r.created)[5:16] for r in summaries]),
        Column("duration", [_duration(r.duration_s) for r in summaries], 40,
               short_header="time"),
        Column("sequence", sequence, 70, wrap=True),
    ]
    return fitted_table(columns, width, console, title=f"runs in {one_line(store)}",
                        title_justify="left", box=box.SIMPLE_HEAD, pad_edge=False)


def status_command(
    run_id: Annotated[int, typer.Argument(help="Run id, as listed by `sweeprig runs`.")],
    store: StoreOption = DEFAULT_STORE_PATH,
    events: Annotated[
        int, typer.Option("--events", min=0, help="How many of the latest events to show.")
    ] = 15,
    db: DbOption = None,
) -> None:
    """Show one run: status, progress, last point, instruments and latest events.

    Works while the run is writing (from another terminal).

    Example: sweeprig status 3 --store results/sweeprig.sqlite
    """
    from sweeprig.engine.next_steps import next_steps

    try:
        target = chosen_store(store, db)
        with _open(target) as opened:
            info = opened.run(run_id)
            points = opened.points_frame(run_id)
            run_events = opened.events(run_id)
    except SweeprigError as exc:
        raise _fail(exc) from None
    _print_status(info, points, run_events[-events:] if events else [], len(run_events))
    steps = next_steps(info.status, info.id, target, bench_path=info.bench_path,
                       simulated=info.simulated)
    for step in steps:
        term.Console(highlight=False).print(term.Text(f"  next: {one_line(step)}", style="bold"))
    if isinstance(target, Path) and steps and any(step.startswith("sweeprig resume")
                                                  for step in steps):
        _print_night_resume(Path(store), info)


def _print_night_resume(store: Path, info: RunInfo) -> None:
    """For a run that was a part of a night: the command that resumes the whole night."""
    import shlex

    from sweeprig.engine.night_journal import night_of_run

    night = night_of_run(store, info.id)
    if night is None:
        return
    number, plan = night
    command = (f"sweeprig night {shlex.quote(plan)} --resume --store {shlex.quote(str(store))}"
               + (" --sim" if info.simulated else ""))
    term.Console(highlight=False).print(term.Text(
        f"  or, as this run is a part of night {number}, resume the whole night: "
        f"{one_line(command)}", style="bold"))


def _print_status(info: RunInfo, points: pd.DataFrame, events: list, n_events: int) -> None:
    import pandas as pd

    console = term.Console(highlight=False)
    style = _STATUS_STYLE.get(info.status, "white")
    status = f"[{style}]{info.status}[/]"
    if info.status != info.stored_status:
        status += f" (stored as {info.stored_status}; its process is gone or silent)"
    if info.reason:
        status += f" — {term.escape(escape_controls(info.reason))}"
    console.print(term.Text(f"run {info.id}", style="bold")
                  + term.Text(f"  {one_line(info.title)}" if info.title else ""))
    lines = [
        ("status", status),
        ("progress", _progress(info.points_done, info.points_total)),
        ("part", _shown(" ".join(x for x in (info.part, info.serial) if x) or "-")),
        ("operator", _shown(info.operator or "-")),
        ("tags", _shown(", ".join(info.tags) or "-")),
        ("sequence", f"{_shown(info.sequence_path)}  sha256 {info.sequence_sha256[:12]}"),
        (
            "bench",
            f"{_shown(info.bench_path)}  sha256 {(info.bench_sha256 or '')[:12]}"
            if info.bench_path
            else "-",
        ),
        ("simulated", "yes" if info.simulated else "no"),
        ("started", _when(info.created)),
        ("finished", _when(info.finished) or "-"),
        ("duration", _duration(info.duration_s) or "-"),
    ]
    if info.heartbeat is not None and info.finished is None:
        from sweeprig.store.base import utc_now

        age = (utc_now() - info.heartbeat).total_seconds()
        lines.append(("heartbeat", f"{_when(info.heartbeat)} ({age:.0f} s ago, pid {info.pid} "
                                   f"on {info.host})"))
    if info.activity is not None and info.status == "running":
        if info.activity.get("what") != "measuring":
            lines.append(("waiting", _shown(str(info.activity.get("label")
                                                or info.activity.get("what") or "-"))))
        eta = _eta_line(info.activity, info.heartbeat)
        if eta is not None:
            lines.append(("eta", eta))
    for label, text in lines:
        console.print(f"  {label:<10} {text}")
    if info.instruments:
        console.print("  instruments")
        for inst in info.instruments:
            console.print(term.Text(f"    {inst.role:<8} {inst.profile:<18} "
                                    f"{one_line(inst.resource)}  {one_line(inst.idn)}"))
    if len(points):
        last = points.iloc[-1]
        settings = ", ".join(
            f"{column}={last[column]:g}"
            for column in points.columns[3:15]
            if pd.notna(last[column])
        )
        console.print(
            f"  last point {int(last['point_index'])} ({last['study']}) "
            f"{_when(last['wall_end'].to_pydatetime()) if pd.notna(last['wall_end']) else ''}"
        )
        if settings:
            console.print(f"    {settings}")
    if events:
        console.print(f"  events (latest {len(events)} of {n_events})")
        for event in events:
            where = f" point {event.point_index}" if event.point_index is not None else ""
            console.print(
                term.Text(f"    {_when(event.time)} {event.severity:<7} {event.kind}{where}: "
                          f"{one_line(event.message)}")
            )


def _eta_line(activity: Mapping[str, Any], heartbeat: datetime | None) -> str | None:
    """The whole run's time left as of now (from the ETA its last heartbeat carried)."""
    from sweeprig.engine.eta import eta_text
    from sweeprig.store.base import utc_now

    value = activity.get("eta_wall_s")
    if not isinstance(value, int | float) or heartbeat is None:
        return None
    left = float(value) - max((utc_now() - heartbeat).total_seconds(), 0.0)
    ends = utc_now() + timedelta(seconds=max(left, 0.0))
    return (f"{eta_text(left)} left for the whole run (ends about "
            f"{ends.strftime('%Y-%m-%d %H:%M')} UTC; from the plan's prediction corrected by "
            "the pace so far)")


def _shown(text: object) -> str:
    """A file's or the store's text for a line printed with markup: controls and markup
    escaped."""
    return term.escape(one_line(text))


def export_command(
    run_id: Annotated[int, typer.Argument(help="Run id, as listed by `sweeprig runs`.")],
    to: Annotated[
        Path,
        typer.Option("--to", help="Folder to write into (created if missing).", file_okay=False),
    ],
    store: StoreOption = DEFAULT_STORE_PATH,
    fmt: Annotated[
        ExportFormat,
        typer.Option("--format", help="csv, parquet, or both.", case_sensitive=False),
    ] = ExportFormat.csv,
) -> None:
    """Write a run's points, readings and events as tidy tables, plus run details.

    Files: run-<id>-points, run-<id>-readings and run-<id>-events (.csv and/or .parquet).

    run-<id>.json holds the run's details and the SHA-256 of its input files.

    Join readings to points on point_index.

    Example: sweeprig export 3 --to exports/ --format both
    """
    try:
        with _open(store) as db:
            info = db.run(run_id)
            tables = {
                "points": db.points_frame(run_id),
                "readings": db.readings_frame(run_id),
                "events": _events_frame(db, run_id),
            }
        written = _write_tables(info, tables, to, fmt)
    except SweeprigError as exc:
        raise _fail(exc) from None
    console = term.Console(highlight=False)
    for path in written:
        console.print(f"wrote {path}")


def _events_frame(db: SqliteRunStore, run_id: int) -> pd.DataFrame:
    import pandas as pd

    rows = [
        {
            "time": e.time,
            "severity": e.severity,
            "kind": e.kind,
            "message": e.message,
            "point_index": e.point_index,
            "details_json": json.dumps(dict(e.details), sort_keys=True),
        }
        for e in db.events(run_id)
    ]
    frame = pd.DataFrame(
        rows, columns=["time", "severity", "kind", "message", "point_index", "details_json"]
    )
    frame["time"] = pd.to_datetime(frame["time"], utc=True)
    frame["point_index"] = frame["point_index"].astype("Int64")
    return frame


def _write_tables(
    info: RunInfo, tables: dict[str, pd.DataFrame], folder: Path, fmt: ExportFormat
) -> list[Path]:
    from sweeprig.report.tables import make_folder

    if fmt in (ExportFormat.parquet, ExportFormat.both):
        from sweeprig.parquet import require_parquet

        require_parquet("sweeprig store export --format")
    make_folder(folder, what="export folder", option="--to")
    written: list[Path] = []
    try:
        for name, frame in tables.items():
            if fmt in (ExportFormat.csv, ExportFormat.both):
                path = folder / f"run-{info.id}-{name}.csv"
                frame.to_csv(path, index=False)
                written.append(path)
            if fmt in (ExportFormat.parquet, ExportFormat.both):
                path = folder / f"run-{info.id}-{name}.parquet"
                frame.to_parquet(path, index=False, engine="pyarrow")
                written.append(path)
        meta = folder / f"run-{info.id}.json"
        meta.write_text(json.dumps(_run_json(info), indent=2) + "\n", encoding="utf-8")
        written.append(meta)
    except OSError as exc:
        raise StoreError(
            f"cannot write the export: {exc.strerror or exc}",
            where=str(folder),
            fix="check the folder's permissions and free space",
        ) from None
    return written


def _run_json(info: RunInfo) -> dict[str, object]:
    def iso(moment: datetime | None) -> str | None:
        return None if moment is None else moment.isoformat()

    return {
        "id": info.id,
        "title": info.title,
        "status": info.status,
        "reason": info.reason,
        "created_utc": iso(info.created),
        "finished_utc": iso(info.finished),
        "sequence_path": info.sequence_path,
        "sequence_sha256": info.sequence_sha256,
        "bench_path": info.bench_path,
        "bench_sha256": info.bench_sha256,
        "simulated": info.simulated,
        "operator": info.operator,
        "part": info.part,
        "serial": info.serial,
        "tags": list(info.tags),
        "points_done": info.points_done,
        "points_total": info.points_total,
        "instruments": [
            {"role": i.role, "resource": i.resource, "profile": i.profile, "idn": i.idn}
            for i in info.instruments
        ],
    }


def register(app: typer.Typer) -> None:
    """Add ``runs``, ``status`` and ``export`` to the root app."""
    app.command("runs")(runs_command)
    app.command("status")(status_command)
    app.command("export")(export_command)
