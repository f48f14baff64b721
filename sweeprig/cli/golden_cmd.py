"""``sweeprig golden``: write or refresh a sequence's golden-figures file."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from sweeprig.cli import term
from sweeprig.cli.common import fail
from sweeprig.errors import InputError, SweeprigError

app = typer.Typer(
    help="Golden figures beside a sequence: expected values with tolerances that "
    "`pytest` on the sequence checks (see docs/sequence-tests.md).",
    no_args_is_help=True,
)

_WRITE_HELP = """Run a sequence on the simulated bench (with the part it names in [part]
sim_part) and write its figures, with tolerances, to <sequence>.golden.toml beside it,
replacing any older one. Refuse to write when the run does not complete.

Examples:

  sweeprig golden write sequences/demo/quick.toml

  sweeprig golden write my-sequence.toml --tolerance 0.3
"""


@app.command("write", help=_WRITE_HELP, no_args_is_help=True)
def write_command(
    sequence: Annotated[Path, typer.Argument(help="sequence file", dir_okay=False,
                                             show_default=False)],
    tolerance: Annotated[float, typer.Option(
        "--tolerance", help="± allowed for dB and dBm figures", min=0.001)] = 0.5,
    current_tolerance: Annotated[float, typer.Option(
        "--current-tolerance", help="± allowed for currents, mA", min=0.001)] = 2.0,
) -> None:
    from sweeprig.files import replace_text
    from sweeprig.seqtest.golden import golden_path, golden_text
    from sweeprig.seqtest.judge import test_sequence

    console = term.Console(highlight=False)
    try:
        verdict = test_sequence(sequence, use_golden=False)
        if any(m.figure == "(the run)" for m in verdict.failed):
            raise InputError("the run did not complete: no golden figures written",
                             where=str(sequence), fix="fix what stopped the run (see "
                             "`sweeprig run --sim`) and write again")
        text = golden_text(verdict.figures, sequence_name=sequence.name,
                           tolerance_db=tolerance, tolerance_a=current_tolerance * 1e-3)
        target = golden_path(sequence)
        replace_text(target, text)
    except SweeprigError as exc:
        raise fail(exc) from None
    count = text.count("[[figure]]")
    console.print(term.Text(f"golden figures: {target} ({count} figures, ± {tolerance:g} dB)"))
