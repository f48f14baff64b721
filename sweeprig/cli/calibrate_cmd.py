"""``sweeprig calibrate``: measure the bench's RF source connections with the power meter
and write a calibration file for ``sweeprig run --calibration``."""

from __future__ import annotations

import sys
from collections.abc import Callable
from datetime import timedelta
from pathlib import Path
from typing import Annotated

import typer

from sweeprig.cli import term
from sweeprig.cli.common import fail
from sweeprig.errors import SweeprigError

_HELP = """Calibrate the source levels at the DUT's input planes with the power meter, and
the output paths through a calibration thru with the analyzer, over the frequencies a
sequence needs, and write a calibration file.

Each source the sequence uses (rf, rf2, lo) is set at each frequency to each level of a grid
over the levels the sequence gives it (steps of at most 5 dB; --levels and --lo-levels give
your own grids, dBm at the DUT planes); the power meter's sensor at the DUT port plane reads
what arrives; the difference is the connection's loss, the source's own level error
included. A run interpolates the table in frequency and level and refuses points outside it
(check and plan name them). Where the bench's switch can put a thru in the part's place,
each output path (IF, RF and LO ports) is measured too: the RF source's tone at the DUT RF
plane (power meter) minus what the analyzer reads. The sweep is repeated (--repeats) for the
repeatability. Connections the bench cannot reach by itself keep the bench file's typed
losses, and the command says which; with --attended it asks you instead, step by step, to
move the power sensor where the switch has no route (every RF output off first), and waits
for Enter (end of input stops it, RF off).

The power meter's sensor is zeroed first where the bench file's [sensor] asks for it, and
each reading is corrected by the sensor's calibration factor ([sensor] cal_factor).
--levelling sets each source in closed loop until the meter reads the target within
0.05 dB (a few settings, never above the bench's source limits).
On every exit the bench is left in its safe state, RF off, the part routed back in.

Caution: RF power can damage the part, the sensor and the analyzer input; check the bench
file's limits and follow your lab's rules.

Examples:

  sweeprig calibrate sequences/demo/quick.toml --sim --out cal.toml

  sweeprig run sequences/demo/quick.toml --sim --calibration cal.toml
"""


def calibrate_command(
    sequence: Annotated[Path, typer.Argument(help="sequence file whose frequencies to "
                                             "calibrate", show_default=False)],
    out: Annotated[Path, typer.Option("--out", "-o", help="calibration file to write",
                                      show_default=False)],
    bench: Annotated[Path | None, typer.Option(
        "--bench", "-b", help="bench file (TOML) naming the instruments")] = None,
    sim: Annotated[bool, typer.Option(
        "--sim", help="calibrate the built-in simulated bench")] = False,
    repeats: Annotated[int, typer.Option(
        "--repeats", help="sweeps to make; their spread is the repeatability")] = 2,
    valid_days: Annotated[float, typer.Option(
        "--valid-days", help="days until the calibration expires")] = 7.0,
    temperature: Annotated[float | None, typer.Option(
        "--temperature", help="room temperature, degC (default: the chamber's probe)",
        show_default=False)] = None,
    sim_bench: Annotated[str | None, typer.Option(
        "--sim-bench", help="simulated-bench description (file or shipped name)")] = None,
    levelling: Annotated[bool, typer.Option(
        "--levelling", help="set each source in closed loop until the meter reads the "
        "target within 0.05 dB")] = False,
    attended: Annotated[bool, typer.Option(
        "--attended", help="ask the operator to move the sensor where the switch has no "
        "route (reads Enter from standard input; end of input stops)")] = False,
    levels: Annotated[str | None, typer.Option(
        "--levels", help='grid of RF source levels (rf, rf2) at the DUT RF plane, dBm, e.g. '
        '"-30,-20,-10" (default: the sequence\'s own levels)', show_default=False)] = None,
    lo_levels: Annotated[str | None, typer.Option(
        "--lo-levels", help='grid of LO source levels at the DUT LO plane, dBm, e.g. "0,7" '
        "(default: the sequence's own levels)", show_default=False)] = None,
) -> None:
    import numpy as np

    from sweeprig.engine.calibrate import calibrate_sources

    console = term.Console(highlight=False, soft_wrap=True)
    console.print(term.Text(
        "Caution: the calibration switches RF on at the levels the sequence gives each source "
        "(never above 10 dB under the power meter's maximum input) and at most -10 dBm for "
        "the output paths; on a real bench check the bench file's limits, the cabling and that "
        "the calibration thru (if used) is rated for it, and follow your lab's rules.",
        style="yellow"))
    try:
        if not 0 < valid_days <= 366:
            raise SweeprigError(f"--valid-days {valid_days:g} is not within 0 to 366 days",
                                where="sweeprig calibrate --valid-days",
                                fix="give the days until the calibration expires, e.g. 7")
        grid: dict[str, list[float]] = {}
        if levels is not None:
            grid["rf"] = grid["rf2"] = _parse_levels(levels, "--levels")
        if lo_levels is not None:
            grid["lo"] = _parse_levels(lo_levels, "--lo-levels")
        result = calibrate_sources(
            sequence, bench, out, sim=sim, repeats=repeats, levels=grid,
            valid_for=timedelta(days=valid_days), temperature_c=temperature,
            sim_description=sim_bench, levelling=levelling,
            operator=_operator(console) if attended else None,
            on_step=lambda message: console.print(term.Text(f"  {message}", style="dim")))
    except SweeprigError as exc:
        raise fail(exc) from None
    for connection, (freqs, losses) in result.tables.items():
        spread = result.spread_db.get(connection)
        grid = result.levels.get(connection)
        shape = f"{len(freqs)} frequencies"
        if grid is not None:
            shape += (f" at {grid[0]:g} dBm" if len(grid) == 1 else
                      f" × {len(grid)} levels ({grid[0]:g} to {grid[-1]:g} dBm)")
        console.print(term.Text(
            f"{connection}: {shape}, loss {float(np.min(losses)):.3f} to "
            f"{float(np.max(losses)):.3f} dB" + (f", repeats within {spread:.3f} dB (1 sigma)"
                                                  if spread is not None else "")))
    for connection, counts in result.level_iterations.items():
        console.print(term.Text(f"{connection}: levelled in {min(counts)} to {max(counts)} "
                                f"settings (mean {sum(counts) / len(counts):.1f})"))
    for connection, why in result.skipped.items():
        console.print(term.Text(f"{connection}: not calibrated: {why}", style="yellow"))
    if result.safe is not None:
        console.print(term.Text("safe state read back: " + (", ".join(result.safe.done)
                                                     or "nothing to do")))
    console.print(term.Text(f"calibration written: {result.path} (bench time "
                            f"{result.duration_s:.1f} s); use it with "
                            f"`sweeprig run ... --calibration {result.path}`"))


def _parse_levels(text: str, option: str) -> list[float]:
    """``"-30, -20 dBm, -10"`` → levels in dBm (a located error for anything else)."""
    from sweeprig.units import parse_quantity

    where = f"sweeprig calibrate {option}"
    values = []
    for item in (t.strip() for t in text.split(",")):
        if not item:
            continue
        try:
            values.append(float(item))
        except ValueError:
            values.append(parse_quantity(item, "power", where=where))
    if not values:
        raise SweeprigError(f"{option} holds no level", where=where,
                            fix='give levels in dBm at the DUT planes, e.g. "-30,-20,-10"')
    return values


def _operator(console: term.Console) -> Callable[[str], bool]:
    """Tell the operator a step and wait for a line on standard input (False at its end)."""

    def ask(prompt: str) -> bool:
        console.print(term.Text(prompt, style="bold"))
        return sys.stdin.readline() != ""

    return ask


def register(app: typer.Typer) -> None:
    app.command("calibrate", help=_HELP)(calibrate_command)
