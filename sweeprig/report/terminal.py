"""The terminal summary: a rich table of the headline figures and the verdict.

Compact by design (it also ends ``sweeprig run``): one row per figure and study, the
temperatures and supplies of a study merged, the worst figure against its limit shown; under
the table, one line per flag met saying what it means.
"""

from __future__ import annotations

from rich import box
from rich.console import Console
from rich.table import Table
from rich.text import Text

from sweeprig.analysis.figures import FLAGS, SUSPECT_FLAGS
from sweeprig.analysis.limits import FAIL, INCONCLUSIVE, PASS
from sweeprig.analysis.reduce import RunFigures
from sweeprig.report.tables import (
    NO_LIMIT,
    SummaryRow,
    figure_text,
    flag_badge,
    summary_rows,
)
from sweeprig.text import escape_controls, one_line

VERDICT_STYLES = {PASS: "bold green", FAIL: "bold red", INCONCLUSIVE: "bold yellow",
                  NO_LIMIT: "dim"}
STATE_STYLES = {"complete": "green", "aborted": "red", "partial": "yellow",
                "unsafe": "bold red"}


def summary_table(run: RunFigures, rows: list[SummaryRow] | None = None) -> Table:
    """The summary as a rich :class:`~rich.table.Table` (rows merged per study)."""
    rows = rows if rows is not None else summary_rows(run, by=("study",))
    table = Table(title=f"run {run.run_id}: figures", title_justify="left", show_lines=False,
                  box=box.SIMPLE_HEAD, pad_edge=False)
    table.add_column("figure", no_wrap=True, max_width=20)
    table.add_column("study", overflow="fold", min_width=8)
    table.add_column("worst / value", justify="right", no_wrap=True)
    table.add_column("limit", overflow="fold", min_width=9)
    table.add_column("result", no_wrap=True)
    table.add_column("flags", overflow="fold", min_width=8)
    for row in rows:
        flags = ", ".join(
            flag_badge(name)[0] + (f" ×{count}" if row.count > 1 else "")
            for name, count in row.flags
        )
        study = row.study
        table.add_row(  # Text cells: names and paths are never read as rich markup
            Text(row.label),
            Text(f"{study} ×{row.count}" if row.count > 1 else study),
            Text(figure_text(row.figure)),
            Text(row.limit_text or "—"),
            Text(row.verdict, style=VERDICT_STYLES.get(row.verdict, "")),
            Text(flags, style="yellow"),
        )
    return table


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
        console.print(summary_table(run, rows))
        met = {name for row in rows for name, _ in row.flags}
        if met:
            console.print(Text("flags:", style="yellow"))
        for name in FLAGS:
            if name in met:
                badge, meaning = flag_badge(name)
                effect = " (limit check inconclusive)" if name in SUSPECT_FLAGS else ""
                console.print(Text(f"  {badge}: {meaning}{effect}", style="yellow"))
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
    for note in run.notes:
        console.print(Text(f"  note: {note}", style="dim"))
