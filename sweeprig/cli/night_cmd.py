"""``sweeprig night``: several parts, one after another, on one bench."""

from __future__ import annotations

import json
import shlex
from pathlib import Path
from typing import TYPE_CHECKING, Annotated, Any

import typer

from sweeprig.cli import term
from sweeprig.cli.common import QuietOption, RunStoreOption, SimBenchOption, SimOption, print_error
from sweeprig.cli.run_cmd import _drive
from sweeprig.engine.notify import NOTIFY_ENV
from sweeprig.errors import BENCH_UNSAFE_EXIT_CODE, SweeprigError
from sweeprig.signals import active
from sweeprig.store.paths import DEFAULT_STORE_PATH, run_folder
from sweeprig.text import one_line

if TYPE_CHECKING:
    from sweeprig.engine.night import NightItem, PartEnd
    from sweeprig.engine.night_journal import NightJournal
    from sweeprig.engine.session import LoadedFiles, RunOutcome
    from sweeprig.formats.night import NightPlan

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
    resume: Annotated[bool, typer.Option(
        "--resume", help="continue the latest night of this plan in this store that did not "
        "complete: completed parts are kept, a part whose run was cut short is resumed (only "
        "its missing points), parts not yet run run now")] = False,
    notify: Annotated[str | None, typer.Option(
        "--notify", help="command to run once the night ends, with the night's summary file "
        f"and status in its environment; default ${NOTIFY_ENV}. Run without a shell",
        show_default=False)] = None,
) -> None:
    from sweeprig.engine.night import prepare_night
    from sweeprig.engine.notify import notify_command

    console = term.Console(highlight=False)
    try:
        command = notify_command(notify)
        night, items = prepare_night(plan, bench=bench, sim=sim, sim_description=sim_bench)
        journal = _journal(plan, store, items, resume=resume)
    except SweeprigError as exc:
        print_error(exc)
        raise typer.Exit(exc.exit_code) from None
    try:
        _night(console, plan, night, items, journal, command, store=store, sim=sim,
               sim_bench=sim_bench, quiet=quiet, report=report)
    finally:
        journal.close()


def _journal(plan: Path, store: Path, items: list[NightItem], *, resume: bool) -> NightJournal:
    """The night's journal: a new one, or (``resume``) the night of this plan to continue."""
    from sweeprig.engine.night_journal import resume_journal, start_journal
    from sweeprig.errors import InputError
    from sweeprig.files import read_file_text, sha256_text

    plan_sha = sha256_text(read_file_text(plan, what="night plan"))
    if resume:
        return resume_journal(store, plan, plan_sha)
    try:
        return start_journal(store, plan, plan_sha,
                             [(i.part.serial, i.part.sequence) for i in items])
    except OSError as exc:
        raise InputError(f"the night's journal cannot be written beside the store "
                         f"({exc.strerror or exc})", where=str(store),
                         fix="give a store in a folder you can write to (--store)") from None


def _night(console: term.Console, plan: Path, night: NightPlan, items: list[NightItem],
           journal: NightJournal, command: list[str] | None, *, store: Path, sim: bool,
           sim_bench: str | None, quiet: bool, report: bool) -> None:
    from sweeprig.engine.night import night_status, predicted_night_s, write_night_summary
    from sweeprig.engine.notify import run_notification
    from sweeprig.plan.duration import format_duration

    predicted_s = predicted_night_s(items)
    console.print(term.Text(f"night of {len(items)} part(s) from {one_line(plan)}: "
                            + ", ".join(f"{i.part.serial} ({Path(i.part.sequence).name})"
                                   for i in items)
                            + f"; predicted bench time {format_duration(predicted_s)} without the "
                            "part changes"))
    if journal.resumed:
        console.print(term.Text(f"resuming night {journal.number} (started {journal.started_utc})"))
    ends: list[PartEnd] = []
    stop_note: str | None = None
    for item in items:
        prior = journal.parts[item.index]
        if prior.run_id is not None and prior.status != "complete":
            prior = _as_stored(store, item, prior)
        if prior.status == "complete":
            console.print(term.Text(f"part {item.index + 1}: serial {one_line(item.part.serial)} "
                                    f"complete already (run {prior.run_id})"))
            ends.append(prior)
            journal.record(item.index, prior)
            continue
        if stop_note is not None:
            ends.append(_not_run(item, stop_note))
            journal.record(item.index, ends[-1])
            continue
        resuming = prior.run_id
        if item.index > 0 and resuming is None and night.night.change == "by_hand" \
                and not _changed(console, item):
            stop_note = "not run: the operator did not confirm the part change"
            ends.append(_not_run(item, stop_note))
            journal.record(item.index, ends[-1])
            continue
        end, code = _run_part(console, item, journal, store=store, sim_bench=sim_bench,
                              quiet=quiet, report=report, resume_id=resuming)
        ends.append(end)
        journal.record(item.index, end)
        stops = active()
        if stops is not None and stops.requested is not None:
            stop_note = f"not run: the night was stopped by {stops.requested}"
        elif end.status == "unsafe" or code == BENCH_UNSAFE_EXIT_CODE:
            stop_note = "not run: the bench was not proven safe after the previous part"
        elif end.status != "complete" and night.night.stop_on_abort:
            stop_note = "not run: a part aborted and the plan says stop_on_abort"
    _print_night(console, ends)
    status = night_status(ends)
    journal.finish(status)
    summary: Path | None = None
    try:
        summary = write_night_summary(journal.folder, str(plan), ends, store, predicted_s)
        console.print(term.Text(f"  night summary: {summary}"))
    except OSError as exc:
        console.print(term.Text(f"  night summary not written: {exc.strerror or exc}",
                                style="yellow"))
    if status == "partial":
        resume_night = (f"sweeprig night {shlex.quote(str(plan))} --resume --store "
                        f"{shlex.quote(str(store))}" + (" --sim" if sim else "")
                        + (f" --sim-bench {shlex.quote(sim_bench)}" if sim_bench else ""))
        console.print(term.Text(f"  next, for the whole night: {one_line(resume_night)}",
                                style="bold"))
    if command is not None:
        result = run_notification(command, {
            "SWEEPRIG_NIGHT_STATUS": status, "SWEEPRIG_SUMMARY": str(summary or ""),
            "SWEEPRIG_STORE": str(store),
            "SWEEPRIG_RUN_IDS": " ".join(str(e.run_id) for e in ends if e.run_id is not None),
        })
        console.print(term.Text(f"  {one_line(result.message)}",
                                style="" if result.ok else "yellow"))
    if status == "unsafe":
        raise typer.Exit(BENCH_UNSAFE_EXIT_CODE)
    if status != "complete":
        raise typer.Exit(1)


def _changed(console: term.Console, item: NightItem) -> bool:
    """Ask the operator to change the part; True once confirmed (end of input: False)."""
    console.print(term.Text(f"The bench is safe (read back above). Change the part now: mount "
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


def resume_run(*args: Any, **kwargs: Any) -> RunOutcome:
    """:func:`sweeprig.engine.session.resume_run`, the engine loaded when a part resumes."""
    from sweeprig.engine.session import resume_run as resume

    return resume(*args, **kwargs)


def _run_part(console: term.Console, item: NightItem, journal: NightJournal, *, store: Path,
              sim_bench: str | None, quiet: bool, report: bool,
              resume_id: int | None = None) -> tuple[PartEnd, int]:
    from sweeprig.engine.night import PartEnd

    again = f" (resuming run {resume_id})" if resume_id is not None else ""
    console.print(term.Text(f"part {item.index + 1}: serial {item.part.serial}{again}",
                            style="bold"))
    seen: dict[str, RunOutcome] = {}

    def start(started, point_done, waiting) -> RunOutcome:  # type: ignore[no-untyped-def]
        def on_start(run_id: int, total: int, files: LoadedFiles) -> None:
            journal.record(item.index, PartEnd(item.part.serial, item.part.sequence, run_id,
                                               "running"))
            started(run_id, total, files)

        if resume_id is not None:
            outcome = resume_run(resume_id, store_path=store, sim_description=sim_bench,
                                 on_start=on_start, on_point=point_done, on_wait=waiting)
        else:
            outcome = run_loaded(item.files, store_path=store, sim_description=sim_bench,
                                 on_start=on_start, on_point=point_done, on_wait=waiting)
        seen["outcome"] = outcome
        return outcome

    code = 0
    try:
        _drive(start, quiet=quiet, report=report, notify_each=False)
    except typer.Exit as exit_:
        code = int(exit_.exit_code or 0)
    outcome = seen.get("outcome")
    if outcome is None:
        if resume_id is not None:  # the resume was refused: the run stays as it was
            return PartEnd(item.part.serial, item.part.sequence, resume_id, "not resumed",
                           reason="its resume was refused (see above)"), code
        return PartEnd(item.part.serial, item.part.sequence, None, "not run",
                       reason="refused before the run was recorded (see above)"), code
    verdict, report_path = _verdict(outcome.store_path, outcome.run_id)
    return PartEnd(item.part.serial, item.part.sequence, outcome.run_id, outcome.status,
                   verdict, outcome.reason, outcome.sim_elapsed_s, report_path), code


def _verdict(store: Path, run_id: int) -> tuple[str | None, str | None]:
    """(verdict, report path) from the run's summary.json, (None, None) without one."""
    summary = run_folder(store, run_id) / "summary.json"
    if not summary.is_file():
        return None, None
    try:
        facts = json.loads(summary.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None, None
    return facts.get("verdict"), facts.get("report")


def _as_stored(store: Path, item: NightItem, prior: PartEnd) -> PartEnd:
    """``prior`` (a part whose run the journal saw start) as the store now has it: a run that
    completed after the journal's last word counts as complete."""
    import dataclasses

    from sweeprig.store.sqlite import SqliteRunStore

    assert prior.run_id is not None
    try:
        with SqliteRunStore(store, create=False) as db:
            info = db.run(prior.run_id)
    except SweeprigError:
        return prior
    if info.stored_status != "complete":
        return prior
    verdict, report_path = _verdict(store, prior.run_id)
    return dataclasses.replace(prior, status="complete", verdict=verdict, report=report_path,
                               reason=None, bench_s=prior.bench_s or float(info.duration_s or 0))


def _not_run(item: NightItem, why: str) -> PartEnd:
    from sweeprig.engine.night import PartEnd

    return PartEnd(item.part.serial, item.part.sequence, None, "not run", reason=why)


def _print_night(console: term.Console, ends: list[PartEnd]) -> None:
    from sweeprig.engine.night import night_status
    from sweeprig.plan.duration import format_duration

    table = term.Table(title=f"night: {night_status(ends)}", title_justify="left")
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
            console.print(term.Text(f"  next for serial {one_line(end.serial)}: sweeprig resume "
                                    f"{end.run_id} (see the part's own lines above)", style="bold"))


def register(app: typer.Typer) -> None:
    """Add ``night`` to the root app."""
    app.command("night", help=_NIGHT_HELP, no_args_is_help=True)(night_command)
