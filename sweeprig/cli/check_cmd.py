"""``sweeprig check``, ``sweeprig plan`` and ``sweeprig schema``: work on files, no hardware.

A thin layer over :mod:`sweeprig.formats` and :mod:`sweeprig.plan`; :func:`register` adds the
three commands to the root app.
"""

from __future__ import annotations

import math
import time
from enum import StrEnum
from pathlib import Path
from typing import TYPE_CHECKING, Annotated

import typer

import sweeprig
from sweeprig.cli import term
from sweeprig.cli.common import error_console, fail, print_error
from sweeprig.errors import SweeprigError
from sweeprig.formats.point_limit import DEFAULT_MAX_POINTS
from sweeprig.text import one_line

if TYPE_CHECKING:
    from sweeprig.formats.bench import Bench
    from sweeprig.formats.sequence import Sequence
    from sweeprig.plan.preflight import PreflightReport

# -- where the shipped files are --------------------------------------------------------------


def _data_dir(name: str) -> Path:
    """A shipped data folder: inside the installed package, else at the project root."""
    package = Path(sweeprig.__file__).resolve().parent
    inside = package / f"_{name}"
    return inside if inside.is_dir() else package.parent / name


def builtin_sim_bench() -> Path:
    """Path of the built-in simulated bench file."""
    return _data_dir("sequences") / "benches" / "sim.toml"


def known_profiles() -> set[str] | None:
    """Driver profile names found in ``drivers/`` (None when there are none to check against)."""
    folder = _data_dir("drivers")
    names = {p.stem for p in folder.glob("*.toml")} if folder.is_dir() else set()
    return names or None


# -- output helpers ---------------------------------------------------------------------------


def _out() -> term.Console:
    return term.Console(soft_wrap=True, highlight=False)


_err = error_console
_print_error = print_error
_fail = fail


def _load_bench_or_sim(bench: Path | None) -> tuple[Bench, str]:
    from sweeprig.formats.bench import load_bench

    if bench is None:
        from sweeprig.engine.sim_specs import with_sim_figures

        path = builtin_sim_bench()
        loaded = with_sim_figures(load_bench(path, known_profiles=known_profiles()))
        return loaded, "built-in simulated bench"
    loaded = load_bench(bench, known_profiles=known_profiles())
    return loaded, loaded.source or str(bench)


def check_file(path: Path, bench: Bench, max_points: int = DEFAULT_MAX_POINTS
               ) -> tuple[Sequence, PreflightReport]:
    """Load one sequence and run the pre-flight check; raises the first problem found."""
    from sweeprig.formats.sequence import load_sequence
    from sweeprig.plan.preflight import check_limits, risk_refusal, safety_error
    from sweeprig.plan.spec_coverage import check_specs

    sequence = load_sequence(path, max_points=max_points)
    check_specs(sequence)
    report = check_limits(sequence, bench)
    if not report.ok:
        first = min(report.violations, key=lambda c: c.violation_index or 0)
        raise safety_error(sequence, first)
    refusal = risk_refusal(sequence, report)
    if refusal is not None:
        raise refusal
    return sequence, report


# -- check ------------------------------------------------------------------------------------

_CHECK_HELP = (
    "Validate sequence files without touching any instrument.\n\n"
    "Each file is read with its includes, every key, unit and range is checked, and the pre-"
    "flight safety check runs against the bench (the built-in simulated bench unless --bench "
    "is given): every point's source settings, DUT port powers and predicted analyzer input "
    "against the bench's limits, and every setting the run will send (frequencies, levels, "
    "voltages, temperatures, switch channels, analyzer settings) against each instrument's "
    "own range in its driver profile. Exits 0 when every file is fine, non-zero otherwise (2: a "
    "file problem, 3: a safety limit).\n\n"
    "Example:  sweeprig check sequences/demo/quick.toml --bench lab.toml --junit check.xml"
)


def check(
    sequences: Annotated[list[Path], typer.Argument(
        help="sequence files (.toml) to check", show_default=False)],
    bench: Annotated[Path | None, typer.Option(
        "--bench", help="bench file to check against (default: the built-in simulated bench)",
        show_default=False)] = None,
    junit: Annotated[Path | None, typer.Option(
        "--junit", help="also write a JUnit XML report here (one test case per file)",
        show_default=False)] = None,
    max_points: Annotated[int, typer.Option(
        "--max-points", help="refuse sequences with more points than this")] = DEFAULT_MAX_POINTS,
    calibration: Annotated[Path | None, typer.Option(
        "--calibration", help="calibration file the run will use: its status is shown and "
        "every point is checked against its tables", show_default=False)] = None,
    accept_calibration: Annotated[bool, typer.Option(
        "--accept-calibration", help="accept an expired calibration")] = False,
) -> None:
    from sweeprig.lazy import import_frozen

    # what checking loads (the formats' models, the planner), loaded at once: see import_frozen
    import_frozen("sweeprig.formats.bench", "sweeprig.formats.sequence", "sweeprig.plan.risks",
                  "sweeprig.plan.preflight", "sweeprig.plan.spec_coverage",
                  "sweeprig.engine.sim_specs")
    from sweeprig.plan.risks import summary_lines

    out = _out()
    try:
        loaded_bench, bench_name = _load_bench_or_sim(bench)
        if calibration is not None:
            out.print(term.Text(_calibration_status(loaded_bench, calibration, accept_calibration)))
    except SweeprigError as exc:
        _write_junit(junit, [(str(p), 0.0, exc) for p in sequences])
        raise _fail(exc) from None
    results: list[tuple[str, float, SweeprigError | None]] = []
    exit_code = 0
    for path in sequences:
        t0 = time.perf_counter()
        try:
            sequence, report = check_file(path, loaded_bench, max_points)
        except SweeprigError as exc:
            results.append((str(path), time.perf_counter() - t0, exc))
            out.print(term.Text("FAIL ", style="bold red") + term.Text(one_line(path)))
            for line in problem_lines(exc):
                out.print(term.Text(line))
            exit_code = exit_code or exc.exit_code
            continue
        results.append((str(path), time.perf_counter() - t0, None))
        out.print(term.Text("ok   ", style="bold green") + term.Text(
            f"{one_line(path)}  ({sequence.count_points():,} points, within the limits of "
            f"{one_line(bench_name)})"))
        for note in report.notes + list(report.risks.assumptions if report.risks else ()):
            out.print(term.Text(f"  note: {one_line(note)}"))
        for warning in report.warnings:
            out.print(term.Text("  warning: ", style="bold yellow") + term.Text(one_line(warning)))
        if report.risks is not None:
            for line in summary_lines(report.risks):
                out.print(term.Text(f"    {one_line(line)}"))
    _write_junit(junit, results)
    failed = sum(1 for _, _, e in results if e is not None)
    if failed:
        out.print(f"{failed} of {len(results)} file(s) have problems")
        raise typer.Exit(code=exit_code)


#: Most problems of one file that ``check`` lists (the rest are counted).
MAX_PROBLEMS = 20


def problem_lines(exc: SweeprigError, limit: int = MAX_PROBLEMS) -> list[str]:
    """Every problem ``exc`` carries (itself and ``also``), numbered when more than one, up
    to ``limit``, then how many more there are."""
    problems = [exc, *exc.also]
    if len(problems) == 1:
        return ["  " + exc.message().replace("\n", "\n  ")]
    lines = [f"  {len(problems)} problems:"]
    for number, problem in enumerate(problems[:limit], start=1):
        message = problem.message() if number > 1 else \
            SweeprigError(exc.what, where=exc.where, fix=exc.fix).message()  # not "N more"
        lines.append(f"  {number}. " + message.replace("\n", "\n     "))
    if len(problems) > limit:
        lines.append(f"  ... and {len(problems) - limit} more (fix these and check again)")
    return lines


def _calibration_status(bench: Bench, path: Path, accept: bool) -> str:
    """Load, check and apply a calibration (refusing a damaged or expired one); its status."""
    from datetime import UTC, datetime

    from sweeprig.formats.calibration import (
        apply_calibration,
        check_calibration_age,
        load_calibration,
    )

    cal = load_calibration(path)
    warning = check_calibration_age(cal, datetime.now(UTC), accept=accept)
    apply_calibration(bench, cal)
    left = cal.model.expires.astimezone(UTC) - datetime.now(UTC)
    state = f"WARNING: {warning}" if warning else f"valid for {left.days} more day(s)"
    return (f"{one_line(cal.describe())}; {state}; its instruments are compared with the "
            "bench's when a run starts")


def _write_junit(path: Path | None, results: list[tuple[str, float, SweeprigError | None]]
                 ) -> None:
    if path is None:
        return
    import xml.etree.ElementTree as ET

    failures = sum(1 for _, _, e in results if e is not None)
    total_time = sum(t for _, t, _ in results)
    suites = ET.Element("testsuites", name="sweeprig check", tests=str(len(results)),
                        failures=str(failures), errors="0", time=f"{total_time:.3f}")
    suite = ET.SubElement(suites, "testsuite", name="sweeprig check", tests=str(len(results)),
                          failures=str(failures), errors="0", skipped="0",
                          time=f"{total_time:.3f}")
    for name, seconds, exc in results:
        case = ET.SubElement(suite, "testcase", classname="sweeprig.check", name=name,
                             time=f"{seconds:.3f}")
        if exc is not None:
            failure = ET.SubElement(case, "failure", message=exc.what.splitlines()[0],
                                    type=type(exc).__name__)
            failure.text = "\n".join(problem_lines(exc))
    tree = ET.ElementTree(suites)
    ET.indent(tree)
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        tree.write(path, encoding="utf-8", xml_declaration=True)
    except OSError as exc:
        raise _fail(SweeprigError(f"cannot write the JUnit report: {exc.strerror}",
                                  where=str(path), fix="choose a writable path")) from None


# -- plan -------------------------------------------------------------------------------------

_PLAN_HELP = (
    "Show what a sequence will do: points, predicted duration and port powers.\n\n"
    "Prints the number of points (in all and per study), the predicted duration on a real "
    "bench (settling, analyzer sweeps, chamber ramps and soaks, command overhead), and for "
    "every port the highest predicted power against its limit. Exits 3 when a limit would be "
    "exceeded.\n\n"
    "Example:  sweeprig plan sequences/demo/quick.toml --sim"
)


def plan(
    sequence: Annotated[Path, typer.Argument(help="sequence file (.toml)", show_default=False)],
    bench: Annotated[Path | None, typer.Option(
        "--bench", help="bench file with path losses and limits", show_default=False)] = None,
    sim: Annotated[bool, typer.Option(
        "--sim", help="use the built-in simulated bench (the default without --bench)")
    ] = False,
    max_points: Annotated[int, typer.Option(
        "--max-points", help="refuse sequences with more points than this")] = DEFAULT_MAX_POINTS,
    calibration: Annotated[Path | None, typer.Option(
        "--calibration", help="calibration file the run will use: its status is shown and "
        "the plan uses its tables", show_default=False)] = None,
    accept_calibration: Annotated[bool, typer.Option(
        "--accept-calibration", help="accept an expired calibration")] = False,
) -> None:
    from sweeprig.formats.sequence import load_sequence
    from sweeprig.formats.vocabulary import file_key
    from sweeprig.plan.duration import estimate_duration, format_duration
    from sweeprig.plan.expand import layout
    from sweeprig.plan.preflight import check_limits, format_amount, risk_refusal, safety_error
    from sweeprig.plan.risks import RISK_MEANINGS
    from sweeprig.plan.spec_coverage import check_specs

    if bench is not None and sim:
        raise _fail(SweeprigError("--bench and --sim were both given",
                                  fix="give one of them (or neither, for the simulated bench)"))
    try:
        loaded_bench, bench_name = _load_bench_or_sim(bench)
        status = (_calibration_status(loaded_bench, calibration, accept_calibration)
                  if calibration is not None else None)
        seq = load_sequence(sequence, max_points=max_points)
        check_specs(seq)
        report = check_limits(seq, loaded_bench)
        estimate = estimate_duration(seq, loaded_bench)
        sim_warnings: list[str] = []
        if bench is None:  # the simulated bench: can its part serve this plan?
            from sweeprig.engine.sim_fit import sim_part_warnings

            sim_warnings = sim_part_warnings(seq)
    except SweeprigError as exc:
        raise _fail(exc) from None
    out = _out()
    lay = layout(seq)
    title = seq.about.title or seq.source or str(sequence)
    out.print(term.Text(one_line(title), style="bold"))
    out.print(term.Text(f"part {one_line(seq.part.id)}   bench: {one_line(bench_name)}"))
    if status is not None:
        out.print(term.Text(status))
    out.print(f"{lay.total:,} points = {lay.pass_size:,} per pass × {lay.n_temperatures} "
              f"temperature(s) × {lay.n_supplies} supply voltage(s)")
    for warning in sim_warnings:
        out.print(term.Text("warning: ", style="bold yellow") + term.Text(one_line(warning)))

    studies = term.Table(title="Studies", title_justify="left")
    for col in ("study", "points", "axes (outer → inner)", "predicted time"):
        studies.add_column(col, justify="right" if col == "points" else "left")
    by_name = {s.name: s for s in estimate.studies}
    for block in lay.blocks:
        axes = ", ".join(f"{file_key(a.name, seq.mixing.conversion)} ×{a.count}"
                         for a in block.axes)
        est = by_name[block.study.name]
        studies.add_row(block.study.name, f"{est.points:,}", axes,
                        format_duration(est.total_s) + (" (sampled)" if est.sampled else ""))
    out.print(studies)

    timing = term.Table(title="Predicted duration on a real bench", title_justify="left")
    timing.add_column("step")
    timing.add_column("time", justify="right")
    timing.add_row("settling", format_duration(estimate.settle_s))
    timing.add_row("analyzer sweeps", format_duration(estimate.sweep_s))
    timing.add_row("chamber ramps and soaks", format_duration(estimate.chamber_s))
    timing.add_row("command overhead", format_duration(estimate.overhead_s))
    timing.add_row(term.Text("total", style="bold"), term.Text(format_duration(estimate.total_s),
                                                      style="bold"))
    if estimate.soak_extra_max_s > 0:
        timing.add_row("total if every adaptive soak runs to its maximum",
                       format_duration(estimate.total_max_s))
    out.print(timing)

    ports = term.Table(title="Predicted maxima against the limits", title_justify="left")
    for col in ("check", "predicted", "limit", "margin", "at point", "status", "limit set by"):
        ports.add_column(col, justify="left" if col in ("check", "status", "limit set by")
                         else "right")
    for c in report.checks:
        worst = "-" if c.worst_index is None else format_amount(c.worst, c.unit)
        margin = "-" if math.isinf(c.margin) else format_amount(
            c.margin, "dB" if c.unit == "dBm" else c.unit)  # a distance between levels: dB
        at = "-" if c.worst_index is None else str(c.worst_index)
        status = (term.Text("ok", style="green") if c.ok
                  else term.Text("OVER LIMIT", style="bold red"))
        ports.add_row(c.label, worst, f"{'≤' if c.bound == 'max' else '≥'} "
                      f"{format_amount(c.limit, c.unit, precise=False)}", margin, at, status,
                      c.limit_key.split(" (")[0])
    out.print(ports)
    if report.risks is not None and report.risks.groups:
        risks = term.Table(title="Readings that cannot be trusted as planned (predicted before the "
                           "run)", title_justify="left")
        for col in ("study", "reading", "risk", "readings", "why (first point)"):
            risks.add_column(col, justify="right" if col == "readings" else "left")
        for g in report.risks.groups:
            risks.add_row(g.study, g.reading, g.risk, f"{g.count:,}",
                          f"point {g.first_point}: {g.reason}")
        out.print(risks)
        for risk, meaning in RISK_MEANINGS.items():
            if risk in report.risks.counts():
                out.print(f"  {risk}: {meaning}")
    for note in report.notes + list(report.risks.assumptions if report.risks else ()):
        out.print(term.Text(f"note: {one_line(note)}"))
    for warning in report.warnings:
        out.print(term.Text("warning: ", style="bold yellow") + term.Text(one_line(warning)))
    if not report.ok:
        first = min(report.violations, key=lambda c: c.violation_index or 0)
        raise _fail(safety_error(seq, first))
    refusal = risk_refusal(seq, report)
    if refusal is not None:
        raise _fail(refusal)


# -- schema -----------------------------------------------------------------------------------


class SchemaName(StrEnum):
    sequence = "sequence"
    bench = "bench"


_SCHEMA_HELP = (
    "Print the JSON Schema of sequence or bench files.\n\n"
    "Editors that validate TOML against a JSON Schema use it to check keys and units as you "
    "type.\n\n"
    "Example:  sweeprig schema sequence > sequence.schema.json"
)


def schema(
    which: Annotated[SchemaName, typer.Argument(help="which file format: sequence or bench",
                                                show_default=False)],
) -> None:
    from sweeprig.formats.schema import json_schema_text

    typer.echo(json_schema_text(which.value), nl=False)


def register(app: typer.Typer) -> None:
    """Add the ``check``, ``plan`` and ``schema`` commands to the root app."""
    app.command("check", help=_CHECK_HELP, no_args_is_help=True)(check)
    app.command("plan", help=_PLAN_HELP, no_args_is_help=True)(plan)
    app.command("schema", help=_SCHEMA_HELP, no_args_is_help=True)(schema)
