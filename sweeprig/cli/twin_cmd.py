"""``sweeprig twin``: fit the behavioural model to a stored run, and write the part file."""

from __future__ import annotations

import math
from pathlib import Path
from typing import Annotated

import typer

from sweeprig.cli import term
from sweeprig.cli.common import fail
from sweeprig.errors import SweeprigError
from sweeprig.store.paths import DEFAULT_STORE_PATH

app = typer.Typer(
    help="A twin of a measured part: the simulated mixer fitted to a stored run, served by "
    "--sim and `sim serve` like any part file.",
    no_args_is_help=True,
)

_FIT_HELP = """Fit the behavioural mixer model to a stored run and write a part file.

Least squares over the figures the run measured (gain and its frequency and LO-drive
dependence, compression, intercepts, isolations, supply current, noise figure when
measured); everything the run did not constrain keeps the template's value, and the part
file says so beside each key. Prints the parameters with 95 % intervals and the residuals.

Use the twin in a sequence ([part] sim_part = "twin.toml") or a sim-bench description
([dut] part = "twin.toml").

Examples:

  sweeprig twin fit 1 --store results/lot7.sqlite --out kx2417-twin.toml

  sweeprig twin fit 3 --template kx-5803 --name "unit 12 twin" --out unit12.toml
"""


@app.command("fit", help=_FIT_HELP, no_args_is_help=True)
def fit_command(
    run_id: Annotated[int, typer.Argument(help="run id, as listed by `sweeprig runs`",
                                          show_default=False)],
    out: Annotated[Path, typer.Option("--out", help="part file to write (TOML)",
                                      dir_okay=False, show_default=False)],
    store: Annotated[Path, typer.Option(
        "--store", help="run store (SQLite file)", dir_okay=False)] = DEFAULT_STORE_PATH,
    template: Annotated[str | None, typer.Option(
        "--template", help="shipped part name or part file whose values the twin keeps "
        "where the run says nothing, of the run's conversion [default: kx-2417 for a "
        "downconverter run, kx-5860u for an upconverter run]",
        show_default=False)] = None,
    name: Annotated[str | None, typer.Option(
        "--name", help="the twin's part name [default: '<part id> twin']",
        show_default=False)] = None,
) -> None:
    from sweeprig.twin.from_run import fit_stored_run
    from sweeprig.twin.partfile import write_part_file

    console = term.Console(highlight=False)
    try:
        twin = fit_stored_run(store, run_id, template=template, name=name)
        write_part_file(twin.text, out)
    except SweeprigError as exc:
        raise fail(exc) from None
    _print_fit(twin, console)
    console.print(term.Text(f"part file: {out}"))


def _print_fit(twin: object, console: term.Console) -> None:
    fit = twin.fit  # type: ignore[attr-defined]
    table = term.Table(title=f"twin of run {twin.run_id}: parameters",  # type: ignore[attr-defined]
                       title_justify="left")
    for col in ("parameter", "value", "95 % interval", "unit"):
        table.add_column(col)
    for p in fit.parameters:
        k = p.display_scale
        if p.at_bound:
            interval = "on its bound"
        elif math.isfinite(p.low) and math.isfinite(p.high):
            interval = f"{p.low * k:.4g} to {p.high * k:.4g}"
            if p.weakly_identified:
                interval += " (weakly identified: see the part file)"
        else:
            interval = "not resolved"
        table.add_row(p.key, f"{p.value * k:.4g}", interval, p.unit)
    console.print(table)
    res = term.Table(title="residuals, model − measured", title_justify="left")
    for col in ("figure", "count", "mean", "RMS", "worst", "unit"):
        res.add_column(col)
    for r in fit.residuals:
        s, unit = (1e3, "mA") if r.unit == "A" else (1.0, r.unit)
        res.add_row(r.name, str(r.count), f"{r.mean * s:+.3f}", f"{r.rms * s:.3f}",
                    f"{r.worst * s:+.3f}", unit)
    console.print(res)
    console.print(term.Text(f"{fit.observations} figures, {len(fit.parameters)} parameters, "
                            f"residual scale s = {fit.residual_scale:.3g}; {fit.bias_note}"))
    left = twin.observations.left_out  # type: ignore[attr-defined]
    if left:
        console.print(term.Text("left out: " + "; ".join(f"{k} ×{v}" for k, v in left.items())))
    if fit.unconstrained:
        console.print(term.Text("not constrained by this run (template values kept):"))
        for key, why in fit.unconstrained:
            console.print(term.Text(f"  {key}: {why}"))
    if not fit.converged:
        console.print(term.Text("warning: the solver stopped before converging; check the "
                                "residuals before trusting the twin"))
