"""``sweeprig night``: several parts, one after another, on one bench."""

from __future__ import annotations

import json
from pathlib import Path
from typing import TYPE_CHECKING, Annotated, Any

import typer
from rich.console import Console
from rich.table import Table
from rich.text import Text

from sweeprig.cli.common import QuietOption, RunStoreOption, SimBenchOption, SimOption, print_error
from sweeprig.cli.run_cmd import _drive
from sweeprig.engine.notify import NOTIFY_ENV
from sweeprig.errors import BENCH_UNSAFE_EXIT_CODE, SweeprigError
from sweeprig.signals import active
from sweeprig.store.base import DEFAULT_STORE_PATH
from sweeprig.store.paths import run_folder
from sweeprig.text import one_line

if TYPE_CHECKING:
    from sweeprig.engine.night import NightItem, PartEnd
    from sweeprig.engine.session import RunOutcome

_NIGHT_HELP = """Run several parts one after another on one bench, from a night plan file.

Every part's sequence is loaded and pre-flight checked against the bench before the first
part runs: one bad part (a missing sequence, a serial number given twice, a part that fails
its pre-flight) refuses the whole night, naming the plan's file and line, and nothing runs.
Each part is an ordinary run (its own run id, report and summary.json). Between parts the
bench is made safe (RF off, supply safe, chamber idle, read back) and, where the part is
changed by hand, you are asked to change it and press Enter. A part that aborts does not
stop the others unless the plan says stop_on_abort; a bench not proven safe, or Ctrl-C,
always ends the night. At the end: a summary of the night, night-summary.json beside the
store, and the notification command.

Caution: change parts only with every RF output off and the supply safe (the prompt comes
after the bench was made safe and read back); chambers may still be hot or cold.

Example:

  sweeprig night lot7-night.toml --sim
"""


def night_command(
    plan: Annotated[Path, typer.Argument(help="night plan (TOML)", show_default=False)],
    bench: Annotated[Path | None, typer.Option(
        "--bench", "-b", help="bench file (wins over the plan's night.bench)")] = None,
    sim: SimOption = False,
    sim_bench: SimBenchOption = None,
    store: RunStoreOption = DEFAULT_STORE_PATH,
    quiet: QuietOption = False,
    report: Annotated[bool, typer.Option(
        "--report/--no-report", help="write each part's HTML report when it ends")] = True,
    notify: Annotated[str | None, typer.Option(
        "--notify", help="command to run once the night ends, with the night's summary file "
        f"and status in its environment; default ${NOTIFY_ENV}. Run without a shell",
        show_default=False)] = None,
) -> None:
    from sweeprig.engine.night import (
        night_status,
        predicted_night_s,
        prepare_night,
        write_night_summary,
    )
    from sweeprig.engine.notify import notify_command, run_notification
    from sweeprig.plan.duration import format_duration

    console = Console(highlight=False)
    try:
        command = notify_command(notify)
        night, items = prepare_night(plan, bench=bench, sim=sim, sim_description=sim_bench)
    except SweeprigError as exc:
        print_error(exc)
        raise typer.Exit(exc.exit_code) from None
    predicted_s = predicted_night_s(items)
    console.print(Text(f"night of {len(items)} part(s) from {one_line(plan)}: "
                       + ", ".join(f"{i.part.serial} ({Path(i.part.sequence).name})"
                                   for i in items)
                       + f"; predicted bench time {format_duration(predicted_s)} without the "
                       "part changes"))
    ends: list[PartEnd] = []
    stop_note: str | None = None
    for item in items:
        if stop_note is not None:
            ends.append(_not_run(item, stop_note))
            continue
        if item.index > 0 and night.night.change == "by_hand" and not _changed(console, item):
            stop_note = "not run: the operator did not confirm the part change"
            ends.append(_not_run(item, stop_note))
            continue
        end, code = _run_part(console, item, store=store, sim_bench=sim_bench,
                              quiet=quiet, report=report)
        ends.append(end)
        stops = active()
        if stops is not None and stops.requested is not None:
            stop_note = f"not run: the night was stopped by {stops.requested}"
        elif end.status == "unsafe" or code == BENCH_UNSAFE_EXIT_CODE:
            stop_note = "not run: the bench was not proven safe after the previous part"
        elif end.status != "complete" and night.night.stop_on_abort:
            stop_note = "not run: a part aborted and the plan says stop_on_abort"
    _print_night(console, ends)
    folder = store.parent / f"{store.name}.night-{_first_run(ends)}"
    summary: Path | None = None
    try:
        summary = write_night_summary(folder, str(plan), ends, store, predicted_s)
        console.print(Text(f"  night summary: {summary}"))
    except OSError as exc:
        console.print(Text(f"  night summary not written: {exc.strerror or exc}", style="yellow"))
    status = night_status(ends)
    if command is not None:
        result = run_notification(command, {
            "SWEEPRIG_NIGHT_STATUS": status, "SWEEPRIG_SUMMARY": str(summary or ""),
            "SWEEPRIG_STORE": str(store),
            "SWEEPRIG_RUN_IDS": " ".join(str(e.run_id) for e in ends if e.run_id is not None),
        })
        console.print(Text(f"  {one_line(result.message)}", style="" if result.ok else "yellow"))
    if status == "unsafe":
        raise typer.Exit(BENCH_UNSAFE_EXIT_CODE)
    if status != "complete":
        raise typer.Exit(1)


def _changed(console: Console, item: NightItem) -> bool:
    """Ask the operator to change the part; True once confirmed (end of input: False)."""
    console.print(Text(f"The bench is safe (read back above). Change the part now: mount "
                       f"serial {item.part.serial} ({item.part.sequence}), then press Enter "
                       "(type stop to end the night).", style="bold"))
    try:
        answer = input()
    except EOFError:
        return False
    return answer.strip().lower() not in ("stop", "s", "q", "quit", "n", "no")


def run_loaded(*args: Any, **kwargs: Any) -> RunOutcome:
    """:func:`sweeprig.engine.session.run_loaded`, the engine loaded when a part runs."""
    from sweeprig.engine.session import run_loaded as run

    return run(*args, **kwargs)


def _run_part(console: Console, item: NightItem, *, store: Path, sim_bench: str | None,
              quiet: bool, report: bool) -> tuple[PartEnd, int]:
    from sweeprig.engine.night import PartEnd

    console.print(Text(f"part {item.index + 1}: serial {item.part.serial}", style="bold"))
    seen: dict[str, RunOutcome] = {}

    def start(started, point_done, waiting) -> RunOutcome:  # type: ignore[no-untyped-def]
        outcome = run_loaded(item.files, store_path=store, sim_description=sim_bench,
                             on_start=started, on_point=point_done, on_wait=waiting)
        seen["outcome"] = outcome
        return outcome

    code = 0
    try:
        _drive(start, quiet=quiet, report=report, notify_each=False)
    except typer.Exit as exit_:
        code = int(exit_.exit_code or 0)
    outcome = seen.get("outcome")
    if outcome is None:
        return PartEnd(item.part.serial, item.part.sequence, None, "not run",
                       reason="refused before the run was recorded (see above)"), code
    verdict = report_path = None
    summary = run_folder(outcome.store_path, outcome.run_id) / "summary.json"
    if summary.is_file():
        with_facts = json.loads(summary.read_text(encoding="utf-8"))
        verdict, report_path = with_facts.get("verdict"), with_facts.get("report")
    return PartEnd(item.part.serial, item.part.sequence, outcome.run_id, outcome.status,
                   verdict, outcome.reason, outcome.sim_elapsed_s, report_path), code


def _not_run(item: NightItem, why: str) -> PartEnd:
    from sweeprig.engine.night import PartEnd

    return PartEnd(item.part.serial, item.part.sequence, None, "not run", reason=why)


def _first_run(ends: list[PartEnd]) -> str:
    ids = [e.run_id for e in ends if e.run_id is not None]
    return f"{ids[0]}-{ids[-1]}" if ids else "none"


def _print_night(console: Console, ends: list[PartEnd]) -> None:
    from sweeprig.engine.night import night_status
    from sweeprig.plan.duration import format_duration

    table = Table(title=f"night: {night_status(ends)}", title_justify="left")
    for column in ("part", "serial", "run", "status", "verdict", "bench time", "note"):
        table.add_column(column)
    for n, end in enumerate(ends, start=1):
        table.add_row(str(n), one_line(end.serial), "-" if end.run_id is None else str(end.run_id),
                      end.status, end.verdict or "-",
                      format_duration(end.bench_s) if end.run_id is not None else "-",
                      one_line(end.reason or ""))
    console.print(table)
    for end in ends:
        if end.run_id is not None and end.status not in ("complete",):
            console.print(Text(f"  next for serial {one_line(end.serial)}: sweeprig resume "
                               f"{end.run_id} (see the part's own lines above)", style="bold"))


def register(app: typer.Typer) -> None:
    """Add ``night`` to the root app."""
    app.command("night", help=_NIGHT_HELP, no_args_is_help=True)(night_command)
