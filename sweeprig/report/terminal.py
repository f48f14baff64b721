"""The terminal summary: a rich table of the headline figures and the verdict.

Compact by design (it also ends ``sweeprig run``): one row per figure and study, the
temperatures and supplies of a study merged, the worst figure against its limit shown; under
the table, one line per flag met saying what it means.
"""

from __future__ import annotations

import re

from rich import box
from rich.console import Console
from rich.table import Table
from rich.text import Text

from sweeprig.analysis.figures import FLAGS, SUSPECT_FLAGS
from sweeprig.analysis.limits import FAIL, INCONCLUSIVE, PASS
from sweeprig.analysis.reduce import RunFigures
from sweeprig.analysis.uncertainty import COVERAGE_FACTOR
from sweeprig.report.fit_table import Column, fitted_table
from sweeprig.report.tables import (
    NO_LIMIT,
    SummaryRow,
    compact_limit_text,
    figure_text,
    flag_badge,
    summary_rows,
)
from sweeprig.text import escape_controls, one_line

VERDICT_STYLES = {PASS: "bold green", FAIL: "bold red", INCONCLUSIVE: "bold yellow",
                  NO_LIMIT: "dim"}
STATE_STYLES = {"complete": "green", "aborted": "red", "partial": "yellow",
                "unsafe": "bold red"}


def summary_table(run: RunFigures, rows: list[SummaryRow] | None = None, *,
                  width: int = 120, console: Console | None = None) -> Table:
    """The summary as a rich :class:`~rich.table.Table` (rows merged per study) that fits
    ``width`` columns: the uncertainty's coverage moves into the header, flags become the
    numbers of the notes under the table, then the study and the limit columns are left
    out before the figure, its value and the result (report/fit_table.py)."""
    rows = rows if rows is not None else summary_rows(run, by=("study",))
    console = console or Console(width=width)
    numbers = flag_numbers(rows)
    flags_long, flags_short = [], []
    for row in rows:
        times = [(name, f" ×{count}" if row.count > 1 else "") for name, count in row.flags]
        flags_long.append(Text(", ".join(flag_badge(n)[0] + t for n, t in times),
                               style="yellow"))
        flags_short.append(Text(" ".join(f"[{numbers[n]}]" for n, _t in times),
                                style="yellow"))
    values = [figure_text(row.figure) for row in rows]
    columns = [  # Text cells: names and paths are never read as rich markup
        Column("figure", [Text(row.label) for row in rows], 100, wrap=True, min_chars=16),
        Column("study", [Text(f"{row.study} ×{row.count}" if row.count > 1 else row.study)
                         for row in rows], 60, wrap=True),
        Column("worst / value", [Text(v) for v in values], 100, justify="right",
               short_header=f"value (k = {COVERAGE_FACTOR:g})",
               short_cells=[Text(_COVERAGE.sub("", v)) for v in values]),
        Column("limit", [Text(compact_limit_text(row.limit_text) or "—") for row in rows], 80,
               wrap=True),
        Column("result", [Text(row.verdict, style=VERDICT_STYLES.get(row.verdict, ""))
                          for row in rows], 100),
        Column("flags", flags_long, 90, wrap=True, short_cells=flags_short),
    ]
    return fitted_table(columns, width, console, title=f"run {run.run_id}: figures",
                        title_justify="left", show_lines=False, box=box.SIMPLE_HEAD,
                        pad_edge=False)


#: The coverage factor written after an uncertainty (moved into the header when short).
_COVERAGE = re.compile(r"\s*\(k = [0-9.]+\)$")


def flag_numbers(rows: list[SummaryRow]) -> dict[str, int]:
    """The number of each flag met, in the order the notes under the table list them."""
    met = {name for row in rows for name, _ in row.flags}
    return {name: i for i, name in enumerate((n for n in FLAGS if n in met), start=1)}


def print_summary(run: RunFigures, console: Console | None = None) -> None:
    """Print the run's header line, the summary table, the verdict and any notes."""
    console = console or Console(highlight=False)
    state = Text(run.state, style=STATE_STYLES.get(run.state, ""))
    head = Text(f"run {run.run_id}  {one_line(run.part)}"
                + (f" {one_line(run.serial)}" if run.serial else "") + "  ")
    head.append_text(state)
    if run.reason:
        head.append(f" ({escape_controls(run.reason)})")
    console.print(head)
    if run.title:
        console.print(Text(one_line(run.title), style="dim"))
    if run.figures:
        rows = summary_rows(run, by=("study",))
        console.print(summary_table(run, rows, width=console.width, console=console))
        numbers = flag_numbers(rows)
        if numbers:
            console.print(Text("flags:", style="yellow"))
        for name, number in numbers.items():
            badge, meaning = flag_badge(name)
            effect = " (limit check inconclusive)" if name in SUSPECT_FLAGS else ""
            console.print(Text(f"  [{number}] {badge}: {meaning}{effect}", style="yellow"))
    else:
        console.print(Text("no figures: the run holds no readings a figure needs"))
    counts = run.assessment.counts
    verdict = Text("verdict: ")
    verdict.append(run.verdict.upper(), style=VERDICT_STYLES.get(run.verdict, ""))
    if run.limits:
        checks = counts['pass'] + counts['fail'] + counts['inconclusive']
        limits = len(run.limits)
        verdict.append(f"  ({checks} limit check{'s' if checks != 1 else ''} of {limits} spec "
                       f"limit{'s' if limits != 1 else ''}: "
                       f"{counts['pass']} pass, {counts['fail']} fail, "
                       f"{counts['inconclusive']} inconclusive)")
    console.print(verdict)
    straddled = run.assessment.straddled
    if straddled:
        console.print(Text(f"  {straddled} of these checks had a limit within the figure's ± U "
                           "(k = 2): judged on the measured value, not certain at that coverage",
                           style="yellow"))
    for note in run.notes:
        console.print(Text(f"  note: {note}", style="dim"))
