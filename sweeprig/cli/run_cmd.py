"""``sweeprig run``: run a sequence on a bench or on the simulated bench."""

from __future__ import annotations

from collections.abc import Callable, Mapping
from contextlib import suppress
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Annotated, Any

import typer

from sweeprig.cli import term
from sweeprig.cli.common import (
    DbOption,
    QuietOption,
    RunStoreOption,
    SimBenchOption,
    SimOption,
    chosen_store,
    fail,
    print_error,
)
from sweeprig.engine.notify import NOTIFY_ENV
from sweeprig.errors import (
    BENCH_UNSAFE_EXIT_CODE,
    VERDICT_FAILED_EXIT_CODE,
    VERDICT_INCONCLUSIVE_EXIT_CODE,
    InputError,
    StoreError,
    SweeprigError,
    verdict_exit_code,
)
from sweeprig.signals import RunStopped, active
from sweeprig.store.paths import DEFAULT_STORE_PATH, run_folder
from sweeprig.text import escape_controls, one_line

if TYPE_CHECKING:
    from sweeprig.analysis.reduce import RunFigures
    from sweeprig.engine.runner import PointResult
    from sweeprig.engine.safe import SafeOutcome
    from sweeprig.engine.session import RunOutcome

_RUN_HELP = """Run a sequence file on a bench, unattended, storing every point as it is taken.

Before any output is enabled the files are checked and every point's port powers are
predicted against the bench's limits; a violation refuses the run. On every exit (end,
error, Ctrl-C, SIGTERM, SIGHUP) all RF outputs are switched off, the supply goes to its safe
setting and the chamber to its idle set point, and each is read back: when any instrument
cannot be verified, the run ends `unsafe`, names it and exits with code 8.

Caution: RF power can damage the part and the analyzer input, and amplified RF can expose
people to RF energy; chambers and supplies are hazards of their own. Check attenuators and
limits in the bench file and follow your lab's rules.

Examples:

  sweeprig run sequences/demo/kx2417-characterisation.toml --sim

  sweeprig run my-part.toml --bench bench3.toml --store results/lot7.sqlite
"""


def run_sequence(*args: Any, **kwargs: Any) -> RunOutcome:
    """:func:`sweeprig.engine.session.run_sequence`, the engine loaded when a run starts."""
    from sweeprig.engine.session import run_sequence as run

    return run(*args, **kwargs)


def run_command(
    sequence: Annotated[Path, typer.Argument(help="sequence file (TOML)", show_default=False)],
    bench: Annotated[Path | None, typer.Option(
        "--bench", "-b", help="bench file (TOML) naming the instruments")] = None,
    sim: SimOption = False,
    sim_bench: SimBenchOption = None,
    store: RunStoreOption = DEFAULT_STORE_PATH,
    realtime: Annotated[bool, typer.Option(
        "--realtime", help="with --sim: let simulated time pass at wall-clock speed")] = False,
    quiet: QuietOption = False,
    bus_log: Annotated[bool, typer.Option(
        "--bus-log", help="record every SCPI exchange in the run store (see `sweeprig bus`)",
    )] = False,
    report: Annotated[bool, typer.Option(
        "--report/--no-report", help="reduce the run to figures and write the HTML report "
        "next to the store when it ends")] = True,
    fail_on_verdict: Annotated[bool, typer.Option(
        "--fail-on-verdict", help=f"exit with code {VERDICT_FAILED_EXIT_CODE} when the "
        f"figures fail the sequence's spec limits and {VERDICT_INCONCLUSIVE_EXIT_CODE} when the "
        "verdict is inconclusive or no report could be made (only a pass exits 0)")] = False,
    notify: Annotated[str | None, typer.Option(
        "--notify", help="command to run when the run ends (complete, aborted or unsafe), "
        f"with the run's id, status, verdict and report path in its environment; default "
        f"${NOTIFY_ENV}. Run without a shell", show_default=False)] = None,
    visa_library: Annotated[str | None, typer.Option(
        "--visa-library", help="VISA backend or library path for this command only; wins over "
        "$SWEEPRIG_VISA_LIBRARY and the bench file's named backend (@py or @ivi)",
        show_default=False)] = None,
    calibration: Annotated[Path | None, typer.Option(
        "--calibration", help="calibration file: its measured path losses replace the bench "
        "file's typed ones, and it is stored with the run", show_default=False)] = None,
    accept_calibration: Annotated[bool, typer.Option(
        "--accept-calibration", help="use the calibration even when it has expired or was "
        "made with other instruments (recorded as a warning with the run)")] = False,
    db: DbOption = None,
) -> None:
    from sweeprig.transport.backend import visa_library_override

    try:
        target = chosen_store(store, db)
    except SweeprigError as exc:
        raise fail(exc) from None
    with visa_library_override(visa_library):
        _drive(lambda started, point_done, waiting: run_sequence(
            sequence, bench, sim=sim, sim_description=sim_bench, store_path=target,
            realtime=realtime, bus_log=bus_log, on_start=started, on_point=point_done,
            on_wait=waiting, calibration=calibration, accept_calibration=accept_calibration,
        ), quiet=quiet, report=report, fail_on_verdict=fail_on_verdict, notify_option=notify)


def _drive(start: Callable[..., RunOutcome], *, quiet: bool, report: bool = True,
           fail_on_verdict: bool = False, notify_option: str | None = None,
           notify_each: bool = True) -> None:
    """Run ``start(on_start, on_point, on_wait)`` with a progress display; print how it ended, write
    its summary and run the notification command (checked before anything starts)."""
    from sweeprig.engine.notify import notify_command
    from sweeprig.engine.session import LoadedFiles

    console = term.Console(highlight=False)
    try:
        notify = notify_command(notify_option) if notify_each else None  # a night's: once
    except SweeprigError as exc:
        print_error(exc)
        raise typer.Exit(exc.exit_code) from None
    live: dict[str, Any] = {}

    def started(run_id: int, total: int, files: LoadedFiles) -> None:
        from rich.live import Live

        from sweeprig.report.live_line import LiveLine, swept_fields

        where = "the simulated bench" if files.simulated else files.bench_path
        console.print(term.Text(
            f"run {run_id}: {one_line(files.sequence_path)} on {one_line(where)}, {total} points"))
        for warning in files.sim_warnings:
            console.print(term.Text(f"warning: {warning}", style="yellow"))
        if quiet:
            return
        live["line"] = LiveLine(total, swept_fields(files.sequence))
        live["display"] = Live(live["line"], console=console, refresh_per_second=4,
                               transient=False)
        live["display"].start()

    def point_done(result: PointResult) -> None:
        line = live.get("line")
        if line is not None:
            line.point(result.point, result.gain_db, _eta_text(result.eta))

    def waiting(activity: Mapping[str, Any]) -> None:
        line = live.get("line")
        if line is not None:
            label = one_line(str(activity.get("label") or activity.get("what") or "waiting"))
            line.waiting(label, _eta_text(activity))

    def stop_display() -> None:
        display = live.pop("display", None)
        if display is not None:
            display.stop()

    try:
        outcome = start(started, point_done, waiting)
    except SweeprigError as exc:
        stop_display()
        print_error(exc)
        raise typer.Exit(exc.exit_code) from None
    except RunStopped as stop:  # before the run was recorded: nothing was switched on
        stop_display()
        print_error(SweeprigError(f"{stop} before the run started; no run was recorded"))
        raise typer.Exit(stop.exit_code) from None
    stop_display()
    stops = active()
    if stops is not None:  # the run has ended: a signal now is recorded, it cannot cut the
        stops.begin_stop_path()  # summary or the report (and their imports) in half
    _print_outcome(console, outcome)
    stopped = stops.requested if stops is not None else None
    made = None
    if outcome.store_error is None and report and stopped is None:  # all data kept
        made = _report(console, outcome)
    verdict = made.verdict if made is not None else None
    code = 0
    if outcome.store_error is not None:  # the data is not all kept: no report from it
        code = StoreError.exit_code
    elif outcome.status == "unsafe" or (outcome.safe is not None and not outcome.safe.ok):
        if verdict is not None:  # the figures were printed after the warning: say it again
            failed = outcome.safe.failed if outcome.safe is not None else ()
            console.print(term.Text("BENCH NOT PROVEN SAFE (see above): "
                                    + (", ".join(name for name, _m in failed) or "safe state")
                                    + " not verified; act by hand now.", style="bold red"))
        code = BENCH_UNSAFE_EXIT_CODE
    elif stopped is not None and outcome.status == "complete":  # a signal while it finished
        console.print(f"stopped by {stopped} as the run ended; report not written")
        code = 1
    elif outcome.status != "complete":
        code = 1
    elif stops is not None and stops.requested is not None:  # a signal during the report
        console.print(f"stopped by {stops.requested} (the report was finished first)")
        code = 1
    elif fail_on_verdict:
        code = verdict_exit_code(verdict)
    _announce(console, outcome, made, notify)
    if code:
        raise typer.Exit(code)


@dataclass(frozen=True)
class _Made:
    """What the report step made: the verdict, the files and the limit-check counts."""

    verdict: str
    html: Path
    figures_json: Path
    counts: dict[str, int]


def _report(console: term.Console, outcome: RunOutcome) -> _Made | None:
    """Reduce the run to figures, write the report next to the store, print the summary.

    A problem here is reported but does not change how the run ended.
    """
    from sweeprig.lab.figures import keep_figures
    from sweeprig.report import report_stored_run
    from sweeprig.report.terminal import print_summary

    folder = run_folder(outcome.store_path, outcome.run_id)

    def keep(reduced: RunFigures) -> None:
        if outcome.status == "complete":  # kept for a lot report: never reduced again
            keep_figures(db, outcome.run_id, reduced)

    try:
        with _open_store(outcome.store_path) as db:
            figures, files = report_stored_run(db, outcome.run_id, folder, reduced=keep)
    except SweeprigError as exc:
        print_error(exc, prefix="report not written: ")
        return None
    print_summary(figures, console)
    console.print(term.Text(f"  report: {files.html}  (figures: {files.figures_json})"))
    return _Made(figures.verdict, files.html, files.figures_json,
                 dict(figures.assessment.counts))


def _announce(console: term.Console, outcome: RunOutcome, made: _Made | None,
              notify: tuple[str, ...] | None) -> None:
    """Write the run's summary.json beside its report and run the notification command.

    Neither changes how the run ended: a problem is printed and recorded as an event.
    """
    from sweeprig.engine.notify import RunEnd, notification_env, run_notification, write_summary

    end = RunEnd(
        run_id=outcome.run_id, status=outcome.status, reason=outcome.reason,
        points_done=outcome.points_done, points_total=outcome.points_total,
        store_path=outcome.store_path, verdict=None if made is None else made.verdict,
        report_html=None if made is None else made.html,
        figures_json=None if made is None else made.figures_json,
        next_steps=outcome.next_steps, limit_counts=None if made is None else made.counts)
    summary: Path | None = None
    try:
        summary = write_summary(end, run_folder(outcome.store_path, outcome.run_id))
    except OSError as exc:
        console.print(term.Text(f"  summary not written: {exc.strerror or exc}", style="yellow"))
    if notify is None:
        return
    result = run_notification(notify, notification_env(end, summary))
    console.print(term.Text(f"  {one_line(result.message)}",
                            style="" if result.ok else "yellow"))
    with suppress(SweeprigError), _open_store(outcome.store_path) as db:
        db.log_event(outcome.run_id, "info" if result.ok else "warning", "notify",
                     result.message)


def _open_store(target: Any) -> Any:
    """The run's store again (its SQLite file or the lab database), to read back."""
    from sweeprig.store.open import open_run_store

    return open_run_store(target, create=False)


def _eta_text(fields: Mapping[str, Any] | None) -> str | None:
    """The live line's ETA: the whole run's wall time left (None when unknown: kept as was)."""
    from sweeprig.engine.eta import eta_text

    if not fields or fields.get("eta_wall_s") is None:
        return None
    return eta_text(float(fields["eta_wall_s"]))


SAFE_CAUTION = ("Check the bench yourself before touching it; RF power, supplies and "
                "chambers can hurt, and your lab's rules come first.")


def print_unsafe(console: term.Console, safe: SafeOutcome) -> None:
    """Say loudly which instruments are not proven safe, what they report, what to do."""
    console.print(term.Text(f"BENCH NOT PROVEN SAFE: {len(safe.failed)} instrument(s) could not be "
                            "verified in their safe state. Act now, by hand:", style="bold red"))
    for _name, message in safe.failed:
        console.print(term.Text(f"  - {escape_controls(message)}", style="red"))
    if safe.done:
        console.print(term.Text("  verified by read-back: " + ", ".join(safe.done)))
    console.print(term.Text(f"  (exit code {BENCH_UNSAFE_EXIT_CODE}: bench not proven safe)",
                            style="red"))


def _print_outcome(console: term.Console, outcome: RunOutcome) -> None:
    from sweeprig.plan.duration import format_duration
    from sweeprig.store.open import store_label  # loaded when a run ends, not at start-up

    colour = "green" if outcome.status == "complete" else "red"
    reason = outcome.reason
    if outcome.safe is not None and not outcome.safe.ok and reason:
        reason = reason.split("; BENCH NOT PROVEN SAFE:")[0]  # told in full below
    console.print(term.Text.assemble(
        (f"run {outcome.run_id} {outcome.status}", colour),
        f": {escape_controls(reason)}" if reason else ""))
    stored = (f"{outcome.points_done} of {outcome.points_total}" if outcome.points_read_back
              else f"unknown: the store at {store_label(outcome.store_path)} cannot be read back")
    console.print(
        f"  points stored: {stored}; "
        f"bench time {format_duration(outcome.sim_elapsed_s)} "
        f"(predicted on real hardware: {format_duration(outcome.predicted_bench_s)}), "
        f"wall time {format_duration(outcome.wall_elapsed_s)}"
    )
    if outcome.safe is not None:
        if outcome.safe.ok:
            console.print(term.Text(
                "  safe state read back: " + (", ".join(outcome.safe.done) or "nothing to do")
                + ". " + SAFE_CAUTION))
        else:
            print_unsafe(console, outcome.safe)
    console.print(term.Text(f"  results: {one_line(store_label(outcome.store_path))} "
                            f"(run {outcome.run_id}); "
                            f"log: {one_line(outcome.log_path)}"))
    for step in outcome.next_steps:
        console.print(term.Text(f"  next: {one_line(step)}", style="bold"))
    if outcome.store_error is not None:
        console.print(term.Text("  the run store failed: the run stopped and the data after that "
                                "point is not kept", style="bold red"))
        if outcome.store_note is not None:
            console.print(term.Text("  the store could not record how the run ended; it is "
                                    f"written in {outcome.store_note}", style="bold red"))
        elif not outcome.end_recorded:
            console.print(term.Text("  how the run ended could not be recorded anywhere: keep this "
                                    "terminal's output", style="bold red"))


_RESUME_HELP = """Continue an interrupted or aborted run: measure only the points not yet stored.

Checks first that the sequence and bench files are unchanged and that every instrument
answers *IDN? as when the run started, and says what differs if not. Every point ends up
stored exactly once. The same safety rules as `sweeprig run` apply.

Examples:

  sweeprig resume 7

  sweeprig resume 7 --store results/lot7.sqlite --accept-changes
"""


def resume_command(
    run_id: Annotated[int, typer.Argument(help="the run to continue", show_default=False)],
    store: RunStoreOption = DEFAULT_STORE_PATH,
    accept_changes: Annotated[bool, typer.Option(
        "--accept-changes", help="resume even though files or instrument identities changed "
        "(what changed is still reported)")] = False,
    sim_bench: Annotated[str | None, typer.Option(
        "--sim-bench", help="simulated-bench description, for runs on the simulated bench",
    )] = None,
    quiet: QuietOption = False,
    bus_log: Annotated[bool, typer.Option(
        "--bus-log", help="record every SCPI exchange in the run store")] = False,
    report: Annotated[bool, typer.Option(
        "--report/--no-report", help="write the HTML report when the run ends")] = True,
    notify: Annotated[str | None, typer.Option(
        "--notify", help="command to run when the run ends (complete, aborted or unsafe), "
        f"with the run's id, status, verdict and report path in its environment; default "
        f"${NOTIFY_ENV}. Run without a shell", show_default=False)] = None,
    visa_library: Annotated[str | None, typer.Option(
        "--visa-library", help="VISA backend or library path for this command only; wins over "
        "$SWEEPRIG_VISA_LIBRARY and the bench file's named backend (@py or @ivi)",
        show_default=False)] = None,
    db: DbOption = None,
) -> None:
    from sweeprig.engine.session import resume_run
    from sweeprig.transport.backend import visa_library_override

    try:
        target = chosen_store(store, db)
    except SweeprigError as exc:
        raise fail(exc) from None
    with visa_library_override(visa_library):
        _drive(lambda started, point_done, waiting: resume_run(
            run_id, store_path=target, accept_changes=accept_changes, sim_description=sim_bench,
            bus_log=bus_log, on_start=started, on_point=point_done, on_wait=waiting,
        ), quiet=quiet, report=report, notify_option=notify)


_SAFE_HELP = """Put a bench in its safe state now: every RF output off, the supply to its safe
setting, the chamber to its idle set point (the bench file's [safe_state]).

For after a run was killed (power cut, SIGKILL, a crashed laptop) and could not do it
itself: the instruments keep their last settings, RF on included, until told otherwise.
Each instrument is tried on its own; each safe setting is read back, with a completion
wait and a look at the error queue, and retried (reconnecting) when it does not agree.
Nothing is called safe that was not read back: an instrument that does not answer or still
reports an output on is named, with what to do by hand, and the exit code is 8. Refused
while a live run holds the bench. Check the bench yourself afterwards; this does not replace
your lab's safety procedures.

Example:

  sweeprig safe --bench bench3.toml
"""


def safe_command(
    bench: Annotated[Path, typer.Option(
        "--bench", "-b", help="bench file (TOML) naming the instruments",
        show_default=False)],
    visa_library: Annotated[str | None, typer.Option(
        "--visa-library", help="VISA backend or library path for this command only; wins over "
        "$SWEEPRIG_VISA_LIBRARY and the bench file's named backend (@py or @ivi)",
        show_default=False)] = None,
) -> None:
    from sweeprig.engine.safe import make_bench_safe
    from sweeprig.formats.bench import load_bench
    from sweeprig.instruments import available_profiles
    from sweeprig.transport.backend import visa_library_override

    console = term.Console(highlight=False)
    try:
        loaded = load_bench(bench, known_profiles=available_profiles())
        if loaded.is_simulated():
            raise InputError(
                "this bench file describes the in-process simulated bench (every resource is "
                '"sim"): its instruments live only inside a `sweeprig run --sim` process and '
                "end with it, so there is nothing here to make safe",
                where=str(bench),
                fix="give the bench file of the real instruments (or of a served simulated "
                "bench, `sweeprig sim serve --write-bench FILE`)")
        with visa_library_override(visa_library):
            outcome = make_bench_safe(loaded)
    except SweeprigError as exc:
        raise fail(exc) from None
    if not outcome.ok:
        print_unsafe(console, outcome)
        raise typer.Exit(BENCH_UNSAFE_EXIT_CODE)
    if not outcome.checks:
        console.print(term.Text("nothing to make safe: the bench file names no source, supply or "
                                "chamber"))
        return
    for check in outcome.checks:
        console.print(term.Text(f"  read back: {check.name}: {check.reported}"))
    console.print(term.Text("safe state verified by read-back on every instrument above. "
                            + SAFE_CAUTION))


def register(app: typer.Typer) -> None:
    """Add ``run``, ``resume`` and ``safe`` to the root app."""
    app.command("run", help=_RUN_HELP, no_args_is_help=True)(run_command)
    app.command("resume", help=_RESUME_HELP, no_args_is_help=True)(resume_command)
    app.command("safe", help=_SAFE_HELP, no_args_is_help=True)(safe_command)
