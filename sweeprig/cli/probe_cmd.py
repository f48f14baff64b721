"""``sweeprig probe``: drive every operation of a profile once on one instrument, safely."""

from __future__ import annotations

import datetime as dt
import json
import math
from pathlib import Path
from typing import TYPE_CHECKING, Annotated

import typer

from sweeprig.cli import term
from sweeprig.cli.common import fail
from sweeprig.errors import InputError, SweeprigError
from sweeprig.text import one_line

if TYPE_CHECKING:
    from sweeprig.clock import Clock
    from sweeprig.instruments.probe import ProbeReport
    from sweeprig.instruments.profile import Profile

_STYLE = {"ok": "green", "differs": "yellow", "fail": "bold red", "skipped": "dim"}

PROBE_FAILED_EXIT_CODE = 1
"""Exit code when some operation failed (the probe itself ran)."""


def _bench_role(bench_path: Path, resource: str, role: str | None,
                kind: str) -> tuple[object, str]:
    from sweeprig.formats.bench import load_bench

    bench = load_bench(bench_path)
    if role is None:
        matches = [name for name in type(bench.roles).model_fields
                   if (spec := bench.role(name)) is not None
                   and getattr(spec, "resource", None) == resource]
        if len(matches) != 1:
            raise InputError(
                f"the bench file has {'no' if not matches else 'several'} role(s) on "
                f"{resource!r}",
                where=str(bench_path),
                fix="name the role with --role (e.g. --role rf)")
        role = matches[0]
    if bench.role(role) is None:
        raise InputError(f"the bench file has no role {role!r}", where=str(bench_path),
                         fix="name one of its roles with --role")
    return bench, role


def run_probe(resource: str, profile_name: str, *, bench_path: Path | None = None,
              role: str | None = None, profiles_dir: list[Path] | None = None,
              visa_library: str | None = None, timeout_s: float = 5.0,
              clock: Clock | None = None) -> ProbeReport:
    """Open ``resource``, probe it with ``profile_name`` (bench limits when a bench is
    given) and return the report. The connection is closed afterwards. ``clock``: what the
    driver waits on between completion polls (the wall clock; a simulated bench served in
    the same process gives its virtual clock, or its time would stand still)."""
    from sweeprig.engine.locks import BenchLock
    from sweeprig.instruments.profile import load_profile

    profile = load_profile(profile_name, search_dirs=profiles_dir or [])
    bench = None
    if bench_path is not None:
        bench, role = _bench_role(bench_path, resource, role, profile.kind)
    started = dt.datetime.now(dt.UTC).isoformat(timespec="seconds")
    # an instrument a run is using is not probed (the run holds its lock; BenchBusy names it)
    with BenchLock([resource], f"sweeprig probe ({profile.name})"):
        return _probe_open(resource, profile, bench, role, visa_library, timeout_s, started,
                           clock)


def _probe_open(resource: str, profile: Profile, bench: object, role: str | None,
                visa_library: str | None, timeout_s: float, started: str,
                clock: Clock | None = None) -> ProbeReport:
    from sweeprig.instruments import make_driver
    from sweeprig.instruments.probe import probe
    from sweeprig.plan.instrument_limits import bench_bounds
    from sweeprig.transport import visa
    from sweeprig.transport.backend import choose_visa_library

    library = visa_library or choose_visa_library()
    transport = visa.VisaTransport(resource, visa_library=library,
                                   timeout_s=timeout_s, settings=profile.connection)
    control = None
    try:
        if clock is None and bench is not None:
            clock, control = _simulator_clock(bench, library, timeout_s)
        driver = make_driver(profile, role or profile.kind, transport, clock=clock)
        if bench is not None and role is not None:
            for op, bounds in bench_bounds(bench, role).items():  # type: ignore[arg-type]
                if profile.has(op):
                    for bound in bounds:
                        driver.add_bound(op, bound)
        return probe(driver, started_utc=started)
    finally:
        transport.close()
        if control is not None:
            control.close()


def _simulator_clock(bench: object, library: str, timeout_s: float) -> tuple[Clock | None,
                                                                             object]:
    """On a bench with the simulator's control instrument (``sweeprig sim serve``), the
    simulator's clock, so that a completion poll lets simulated time pass (see
    :func:`sweeprig.engine.connect.bench_clock`), and the connection to close afterwards;
    (None, None) on any other bench."""
    from sweeprig.engine.connect import bench_clock
    from sweeprig.instruments import make_driver
    from sweeprig.transport import visa

    spec = bench.role("simctl")  # type: ignore[attr-defined]
    if spec is None:
        return None, None
    control = visa.VisaTransport(spec.resource, visa_library=library, timeout_s=timeout_s)
    try:
        driver = make_driver(spec.profile, "simctl", control)
        return bench_clock(driver, None), control  # type: ignore[arg-type]
    except BaseException:
        control.close()
        raise


def print_report(report: ProbeReport, console: term.Console) -> None:
    """The table of steps, then the counts and the cautions."""
    table = term.Table(title=f"probe of {report.resource} with profile {report.profile!r}",
                       title_justify="left")
    for column in ("operation", "result", "sent", "value", "read back", "ms", "what / fix"):
        table.add_column(column, overflow="fold")
    for step in report.steps:
        ms = "" if step.round_trip_ms is None or not math.isfinite(step.round_trip_ms) else (
            f"{step.round_trip_ms:.1f}")
        note = step.detail + (f"\nfix: {step.fix}" if step.fix else "")
        table.add_row(step.op, term.Text(step.result, style=_STYLE[step.result]),
                      term.Text(one_line("; ".join(step.sent))), term.Text(step.value or ""),
                      term.Text(one_line(step.read_back or "")), ms, term.Text(note))
    console.print(table)
    counts = report.counts()
    console.print(", ".join(f"{n} {k}" for k, n in counts.items()))
    if report.outputs_off_verified is not None:
        console.print("output off: " + ("verified by read-back" if report.outputs_off_verified
                                        else "NOT verified: switch it off at the instrument"))
    for caution in report.cautions:
        console.print(caution)


def probe_command(
    resource: Annotated[str, typer.Argument(help="VISA resource, e.g. "
                                            "TCPIP0::192.168.1.20::5025::SOCKET")],
    profile: Annotated[str, typer.Option("--profile", "-p", help="Driver profile name or "
                                         "file.")],
    bench: Annotated[Path | None, typer.Option("--bench", help="Bench file: probe levels "
                                               "stay inside its limits for the role.")] = None,
    role: Annotated[str | None, typer.Option("--role", help="The bench role of this "
                                             "instrument (default: the role on RESOURCE).")]
    = None,
    out: Annotated[Path | None, typer.Option("--out", "-o", help="Write the result as JSON "
                                             "(default: probe-<profile>.json).")] = None,
    profiles_dir: Annotated[list[Path] | None, typer.Option("--profiles", help="Extra folder "
                                                            "of driver profiles.")] = None,
    visa_library: Annotated[str | None, typer.Option("--visa-library", help="pyvisa backend "
                                                     "(default: $SWEEPRIG_VISA_LIBRARY, else "
                                                     "@py).")] = None,
    timeout_s: Annotated[float, typer.Option("--timeout", min=0.05, help="I/O timeout, s.")]
    = 5.0,
) -> None:
    """Try every operation of a driver profile on one instrument and report what works.

    RF and supply outputs are switched off first (verified by read-back) and kept off; levels
    stay low and inside the profile's limits (and the bench file's, with --bench); a
    chamber's conditioning stays off. After each step the error queue is read; each setting
    is read back; each round trip is timed. The result is written as JSON for a bug report.

    Caution: the probe sends every command of the profile. Connect the instrument to a load
    or a terminated port, not to a part you cannot afford to lose.

    Example: sweeprig probe TCPIP0::192.168.1.20::5025::SOCKET --profile scpi-source
    """
    from sweeprig.instruments.probe import CAUTIONS

    console = term.Console(highlight=False)
    for caution in CAUTIONS:
        console.print(caution)
    try:
        report = run_probe(resource, profile, bench_path=bench, role=role,
                           profiles_dir=profiles_dir, visa_library=visa_library,
                           timeout_s=timeout_s)
    except SweeprigError as exc:
        raise fail(exc) from None
    print_report(report, console)
    target = out or Path(f"probe-{report.profile}.json")
    target.write_text(json.dumps(report.as_json(), indent=2) + "\n", encoding="utf-8")
    console.print(f"result written to {target}")
    if report.failed or report.outputs_off_verified is False:
        raise typer.Exit(PROBE_FAILED_EXIT_CODE)


def register(app: typer.Typer) -> None:
    """Add ``probe`` to the root app."""
    app.command("probe")(probe_command)
