"""The HTML report: one self-contained file, plots embedded as base64 PNG.

No scripts, no fonts, no style sheets or images from elsewhere: the file opens the same on a
laptop without a network as on a lab PC. Layout, top to bottom: a compact header (part,
serial, sequence title, run id and state, the verdict as one word), the electrical-
characteristics table (:mod:`sweeprig.report.datasheet`) with its flag footnotes, the
verdict and its counts, the plots (each ``<figure>`` lists the corners it draws in
``data-corners``), then the per-condition summary (collapsed), the uncertainty budgets,
conditions, instruments, run facts (durations, SHA-256), notes and events. Printed from a
browser (A4), the table starts on the first page and every plot on a page of its own when it
does not fit. Every number in it is in ``figures.csv`` (the figure table ``figures.json``
describes) with the point indices behind it.
"""

from __future__ import annotations

import base64
import html
import math
from collections.abc import Sequence
from datetime import UTC, datetime
from pathlib import Path

from sweeprig import __version__
from sweeprig.analysis.figures import FIGURE_CATALOGUE, FLAGS, SUSPECT_FLAGS
from sweeprig.analysis.limits import FAIL, INCONCLUSIVE, PASS
from sweeprig.analysis.reduce import RunFigures
from sweeprig.report.budgets import budget_section
from sweeprig.report.datasheet import DatasheetRow, datasheet_rows
from sweeprig.report.plots import Plot
from sweeprig.report.tables import (
    NO_LIMIT,
    SummaryRow,
    flag_badge,
    format_condition,
    write_text_file,
)

VERDICT_COLOURS = {PASS: "#2f7a4a", FAIL: "#b3261e", INCONCLUSIVE: "#a76a12"}
STATE_COLOURS = {"complete": "#2f7a4a", "aborted": "#b3261e", "partial": "#a76a12",
                 "unsafe": "#7a0d08"}

_CSS = """
:root { --ink:#1f2a36; --muted:#5f6b78; --rule:#d5dbe2; --paper:#fcfbf8; --band:#eef1ec;
  --accent:#2d5f8a; }
* { box-sizing: border-box; }
body { margin:0; background:var(--paper); color:var(--ink);
  font: 14px/1.45 "DejaVu Sans", "Segoe UI", Helvetica, Arial, sans-serif; }
main { max-width: 1040px; margin: 0 auto; padding: 20px 28px 48px; }
header.run { display:grid; grid-template-columns: 1fr auto; gap:4px 24px;
  border-top:6px solid var(--accent); padding-top:10px; margin-bottom:14px; }
header.run h1 { font-size:22px; margin:0; letter-spacing:.3px; }
header.run h1 .kind { font-weight:normal; color:var(--muted); font-size:15px; }
header.run .title { margin:0; color:var(--muted); }
header.run .facts { grid-column: 1 / span 2; margin:0; font-size:12.5px; color:var(--muted); }
header.run .facts b { color:var(--ink); font-weight:600; }
.chip { align-self:start; border-radius:4px; color:#fff; padding:3px 12px; font-weight:bold;
  letter-spacing:1px; font-size:15px; }
.verdict { border-left:6px solid; padding:8px 14px; margin:14px 0 4px; background:#fff; }
.verdict .word { font-size:20px; font-weight:bold; letter-spacing:1px; }
.verdict .counts { color:var(--muted); font-size:13px; margin-left:10px; }
.state { display:inline-block; padding:0 7px; border-radius:9px; color:#fff;
  font-size:11px; font-weight:bold; text-transform:uppercase; }
h2 { font-size:17px; margin:26px 0 8px; border-bottom:1px solid var(--rule);
  padding-bottom:3px; }
h2.sheet { font-size:15px; text-transform:uppercase; letter-spacing:1.5px; margin-top:8px;
  border-bottom:2px solid var(--ink); }
table { border-collapse:collapse; width:100%; font-size:13px; }
th, td { text-align:left; vertical-align:top; padding:4px 8px;
  border-bottom:1px solid var(--rule); }
th { background:var(--band); font-weight:600; }
td.num { white-space:nowrap; font-variant-numeric: tabular-nums; }
table.datasheet { font-size:11.5px; }
table.datasheet th, table.datasheet td { padding:3px 5px; }
table.datasheet th { border-bottom:1.5px solid var(--ink); }
table.datasheet td.num, table.datasheet th.num { text-align:right; }
table.datasheet td.param { font-weight:600; }
table.datasheet td.param .study { display:block; font-weight:normal; color:var(--muted);
  font-size:10.5px; }
table.datasheet td.cond, table.datasheet td.lim { font-size:10.5px; overflow-wrap:anywhere; }
table.datasheet td.notes { font-size:10.5px; }
table.datasheet tr.fail td { background:#fbeceb; }
table.datasheet sup { color:var(--accent); font-weight:bold; }
ol.footnotes { font-size:11.5px; margin:6px 0 0; padding-left:22px; list-style:lower-alpha; }
.sheet-key { font-size:11.5px; color:var(--muted); margin:6px 0 0; }
td.verdict-pass { color:#2f7a4a; font-weight:bold; }
td.verdict-fail { color:#b3261e; font-weight:bold; }
td.verdict-inconclusive { color:#a76a12; font-weight:bold; }
td.verdict-none { color:var(--muted); }
tr.fail td { background:#fbeceb; }
.badge { display:inline-block; font-size:11px; padding:0 6px; margin:1px 2px 1px 0;
  border-radius:8px; background:#efe6d2; color:#5b4519; border:1px solid #e0cfa6;
  cursor:help; white-space:nowrap; }
.badge.suspect { background:#f6dcd6; color:#7d2417; border-color:#e9b5aa; }
.flag { margin:0 0 3px; }
.flag .meaning { color:var(--ink); font-size:12px; }
dl.flags { display:grid; grid-template-columns: max-content 1fr; gap:3px 12px; margin:0; }
dl.flags dd { margin:0; }
details.summary > summary { cursor:pointer; font-size:17px; font-weight:bold; margin:26px 0 8px;
  border-bottom:1px solid var(--rule); padding-bottom:3px; }
figure { margin:18px 0 26px; }
figure img { max-width:100%; height:auto; border:1px solid var(--rule); background:#fff; }
figcaption { color:var(--muted); font-size:12.5px; margin-top:4px; }
figcaption b { color:var(--ink); }
.small { color:var(--muted); font-size:12px; }
code { font-size:12px; word-break:break-all; }
ul.notes li { margin:2px 0; }
footer { margin-top:36px; color:var(--muted); font-size:12px; border-top:1px solid var(--rule);
  padding-top:8px; }
@page { size: A4; margin: 12mm 11mm 14mm; }
@media print {
  body { background:#fff; font-size:11px; }
  main { max-width:none; padding:0; }
  header.run { border-top-width:4px; }
  table.datasheet { font-size:9px; }
  table.datasheet td.cond, table.datasheet td.lim, table.datasheet td.notes,
  table.datasheet td.param .study { font-size:8.5px; }
  ol.footnotes, .sheet-key { font-size:9px; }
  table.datasheet tr, figure { break-inside: avoid; }
  table.datasheet thead { display: table-header-group; }
  section.plots { break-before: page; }
  figure img { max-height: 240mm; width:auto; }
  h2 { break-after: avoid; }
}
"""



def render_html(run: RunFigures, rows: Sequence[SummaryRow], plots: Sequence[Plot]) -> str:
    """The whole report as one HTML document (see the module docstring)."""
    e = html.escape
    title = f"{run.part or 'part'} {run.serial}".strip()
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{e(title)} — run {run.run_id} — {e(run.verdict.upper())}</title>",
        f"<style>{_CSS}</style></head><body><main>",
        _header(run),
        datasheet_section(datasheet_rows(run)),
        _verdict(run),
        _plots(plots),
        _summary(rows),
        budget_section(run),
        _conditions(run),
        _instruments(run),
        _facts(run),
        _notes(run),
        _events(run),
        f'<footer>sweeprig {e(__version__)} — report written '
        f'{datetime.now(UTC).strftime("%Y-%m-%d %H:%M UTC")}. Numbers are in figures.csv '
        "(described by figures.json) with the run-store point indices behind each; the raw "
        "readings are in captures.csv."
        "</footer>",
        "</main></body></html>",
    ]
    return "\n".join(p for p in parts if p)


def write_html(path: Path, run: RunFigures, rows: Sequence[SummaryRow],
               plots: Sequence[Plot]) -> Path:
    """Write the report to ``path`` (UTF-8)."""
    write_text_file(path, render_html(run, rows, plots))
    return path


# -- sections ----------------------------------------------------------------------------------


def _header(run: RunFigures) -> str:
    """Who and what, on three lines: part and serial with the verdict as one word, the
    sequence title, then the run's facts."""
    e = html.escape
    colour = VERDICT_COLOURS.get(run.verdict, "#6b7785")
    state_colour = STATE_COLOURS.get(run.state, "#6b7785")
    state = f'<span class="state" style="background:{state_colour}">{e(run.state)}</span>'
    if run.status != run.state:
        state += f' <span class="small">(stored as {e(run.status)})</span>'
    if run.reason:
        state += f" — {e(run.reason)}"
    done = f"{run.points_done}" + (f" of {run.points_total}" if run.points_total else "")
    items = [
        ("run", f"{run.run_id}" + (" (simulated bench)" if run.simulated else "")),
        ("state", state),
        ("points", done),
        ("operator", e(run.operator) or "—"),
        ("started", e(_when(run.created))),
    ]
    facts = " · ".join(f"{k} <b>{v}</b>" for k, v in items)
    return (
        '<header class="run">'
        f"<h1>{e(run.part or 'Unnamed part')}"
        f"{(' <span class=kind>serial ' + e(run.serial) + '</span>') if run.serial else ''}"
        "</h1>"
        f'<span class="chip" style="background:{colour}" title="overall verdict against the '
        f'sequence\'s [[spec]] limits">{e(run.verdict.upper())}</span>'
        f'<p class="title">{e(run.title or run.sequence_path)}</p>'
        f'<p class="facts">{facts}</p></header>'
    )


def datasheet_section(rows: Sequence[DatasheetRow]) -> str:
    """The electrical-characteristics table, its key and the flag footnotes (every flag met
    in the table spelled out under it, lettered in the notes column)."""
    e = html.escape
    if not rows:
        return ('<section class="datasheet"><h2 class="sheet">Electrical characteristics</h2>'
                "<p>No figures: the run holds no readings a figure needs.</p></section>")
    met = [name for name in FLAGS if any(name == f for row in rows for f, _ in row.flags)]
    letter = {name: chr(ord("a") + i) for i, name in enumerate(met)}
    body = []
    for row in rows:
        verdict_class = "none" if row.verdict == NO_LIMIT else row.verdict
        notes = ", ".join(
            f"<sup>{letter[name]}</sup>&#8239;{e(flag_badge(name)[0])}"
            + (f" ×{count}" if row.count > 1 or count > 1 else "")
            for name, count in row.flags)
        body.append(
            f'<tr class="{"fail" if row.verdict == FAIL else ""}" data-figure="{e(row.name)}" '
            f'data-study="{e(row.study)}">'
            f'<td class="param">{e(row.label)}<span class="study">{e(row.study)}</span></td>'
            f'<td class="cond">{e(row.conditions_text)}</td>'
            f'<td class="num min">{e(row.min_text)}</td>'
            f'<td class="num typ">{e(row.typ_text)}</td>'
            f'<td class="num max">{e(row.max_text)}</td>'
            f'<td class="unit">{e(row.display_unit)}</td>'
            f'<td class="num">{e(row.uncertainty_text)}</td>'
            f'<td class="lim">{e(row.limit_text) or "—"}</td>'
            f'<td class="verdict-{verdict_class}">{e(row.verdict_text)}</td>'
            f'<td class="notes">{notes}</td></tr>')
    footnotes = "".join(
        f'<li id="note-{letter[name]}" class="flag"><b>{e(flag_badge(name)[0])}</b> '
        f'(<code>{e(name)}</code>): <span class="meaning">{e(flag_badge(name)[1])}</span>.'
        + (" A limit check on such a figure is inconclusive." if name in SUSPECT_FLAGS
           else "") + "</li>"
        for name in met)
    return (
        '<section class="datasheet" id="datasheet">'
        '<h2 class="sheet">Electrical characteristics</h2>'
        '<table class="datasheet"><thead><tr><th>parameter</th><th>test conditions</th>'
        '<th class="num">min</th><th class="num">typ</th><th class="num">max</th>'
        "<th>unit</th><th class=\"num\">U (k=2)</th><th>limit</th><th>result</th>"
        "<th>notes</th></tr></thead><tbody>" + "".join(body) + "</tbody></table>"
        '<p class="sheet-key">Min and max over every corner measured (temperature, supply, '
        "frequency, LO drive); typ: median at the temperature nearest +25 °C, the middle "
        "supply and the middle LO drive measured. U: the largest expanded uncertainty of the "
        "row (k = 2, JCGM 100:2008). A bound keeps its sign (&gt; : the true value is above). "
        "Result: the worst verdict against the sequence's limits, with how many of the row's "
        "figures had it; \"within ±U\": checks whose limit lies inside the figure's ± U, "
        "judged on the measured value and not certain at k = 2. Worst m×n spur: at each "
        "point the strongest counted product.</p>"
        + (f'<ol class="footnotes">{footnotes}</ol>' if footnotes else "")
        + "</section>"
    )


def _verdict(run: RunFigures) -> str:
    e = html.escape
    counts = run.assessment.counts
    colour = VERDICT_COLOURS.get(run.verdict, "#6b7785")
    judged = (f"{counts['pass']} pass · {counts['fail']} fail · {counts['inconclusive']} "
              f"inconclusive" if run.limits else "no limits in the sequence")
    return (f'<div class="verdict" style="border-color:{colour}" title="overall verdict '
            f'against the sequence\'s [[spec]] limits"><span class="word" '
            f'style="color:{colour}">{e(run.verdict.upper())}</span>'
            f'<span class="counts">{e(judged)}</span></div>')


def _summary(rows: Sequence[SummaryRow]) -> str:
    e = html.escape
    if not rows:
        return "<h2>Summary</h2><p>No figures: the run holds no readings a figure needs.</p>"
    body = []
    for row in rows:
        _unit, meaning = FIGURE_CATALOGUE.get(row.name, ("", ""))
        verdict_class = "none" if row.verdict == NO_LIMIT else row.verdict
        badges = "".join(
            f'<div class="flag">{_badge(name, count, row.count)} '
            f'<span class="meaning">{e(flag_badge(name)[1])}</span></div>'
            for name, count in row.flags)
        points = " ".join(str(p) for p in row.points[:12]) + (" …" if len(row.points) > 12
                                                               else "")
        value_title = f"{row.range_text} over {row.count} figures" if row.range_text else ""
        body.append(
            f'<tr class="{"fail" if row.verdict == FAIL else ""}">'
            f'<td title="{e(meaning)}">{e(row.label)}</td>'
            f"<td>{e(row.study)}</td><td>{e(row.conditions_text)}</td>"
            f'<td class="num" title="{e(value_title)}">{e(row.value_text)}</td>'
            f'<td class="num">{e(row.limit_text) or "—"}</td>'
            f'<td class="verdict-{verdict_class}">{e(row.verdict)}</td>'
            f"<td>{badges}</td>"
            f'<td class="small">{e(points)}</td></tr>'
        )
    return (
        f'<details class="summary"><summary>Summary by condition ({len(rows)} rows)</summary>'
        '<p class="small">One row per figure and study, temperature and supply; where a row '
        "holds several figures, the value shown is the one nearest to (or furthest beyond) its "
        "limit, else the worst. Each flag is explained beside its figure; red flags make a "
        "limit check on the figure inconclusive.</p>"
        "<table><thead><tr><th>figure</th><th>study</th><th>conditions</th><th>value</th>"
        "<th>limit</th>"
        "<th>result</th><th>flags</th><th>points</th></tr></thead><tbody>"
        + "".join(body) + "</tbody></table>" + _flag_legend(rows) + "</details>"
    )


def _flag_legend(rows: Sequence[SummaryRow]) -> str:
    """Every flag met in the summary, with its meaning and whether it makes a limit check
    inconclusive (empty when no figure is flagged)."""
    e = html.escape
    met = {name for row in rows for name, _ in row.flags}
    if not met:
        return ""
    items = []
    for name in FLAGS:
        if name not in met:
            continue
        text, meaning = flag_badge(name)
        effect = (" A limit check on such a figure is inconclusive."
                  if name in SUSPECT_FLAGS else "")
        items.append(f'<dt><span class="badge{" suspect" if name in SUSPECT_FLAGS else ""}">'
                     f"{e(text)}</span> <code>{e(name)}</code></dt>"
                     f"<dd>{e(meaning)}.{e(effect)}</dd>")
    return ('<h3 id="flags">What the flags mean</h3><dl class="flags">' + "".join(items)
            + "</dl>")


def _badge(name: str, count: int, total: int) -> str:
    e = html.escape
    text, meaning = flag_badge(name)
    suffix = f" ×{count}" if total > 1 else ""
    css = "badge suspect" if name in SUSPECT_FLAGS else "badge"
    return f'<span class="{css}" title="{e(name)}: {e(meaning)}">{e(text)}{suffix}</span>'


def _plots(plots: Sequence[Plot]) -> str:
    e = html.escape
    if not plots:
        return "<h2>Plots</h2><p>No plots: the run has no sweep to draw.</p>"
    items = []
    for plot in plots:
        data = base64.b64encode(plot.png).decode("ascii")
        items.append(
            f'<figure id="plot-{e(plot.key)}" data-corners="{e(" ; ".join(plot.corners))}">'
            f'<img alt="{e(plot.title)}" '
            f'width="{plot.width_px}" height="{plot.height_px}" '
            f'src="data:image/png;base64,{data}">'
            f"<figcaption><b>{e(plot.title)}.</b> {e(plot.caption)}</figcaption></figure>"
        )
    return '<section class="plots"><h2>Plots</h2>' + "".join(items) + "</section>"


def _conditions(run: RunFigures) -> str:
    e = html.escape
    rows = []
    for study in run.studies:
        temps = ", ".join(f"{t:g} °C" for t in study.temperatures_c) or "—"
        supplies = ", ".join(f"{v:g} V" for v in study.supplies_v) or "—"
        planned = f" of {study.points_planned}" if study.points_planned else ""
        rows.append(
            f"<tr><td>{e(study.name)}</td><td class=num>{study.points}{planned}</td>"
            f"<td>{e(temps)}</td><td>{e(supplies)}</td>"
            f"<td>{e(', '.join(study.readings))}</td>"
            f"<td>{e(', '.join(study.roles))}</td></tr>"
        )
    ranges = []
    for key, values in run.conditions.items():
        shown = [format_condition(key, v, run.conversion) for v in values]
        text = ", ".join(shown) if len(shown) <= 6 else \
            f"{shown[0]} … {shown[-1]} ({len(shown)} values)"
        ranges.append(f"<tr><td>{e(key)}</td><td>{e(text)}</td></tr>")
    return (
        "<h2>Conditions</h2><table><thead><tr><th>study</th><th>points</th>"
        "<th>temperatures</th><th>supplies</th><th>readings</th><th>figures from</th></tr>"
        "</thead><tbody>" + "".join(rows) + "</tbody></table>"
        '<p class="small">Settings over the whole run (at the DUT port planes):</p>'
        "<table><tbody>" + "".join(ranges) + "</tbody></table>"
    )


def _instruments(run: RunFigures) -> str:
    e = html.escape
    if not run.instruments:
        return "<h2>Instruments</h2><p>No instruments recorded.</p>"
    rows = "".join(
        f"<tr><td>{e(i.role)}</td><td><code>{e(i.resource)}</code></td><td>{e(i.profile)}</td>"
        f"<td>{e(i.idn) or '—'}</td></tr>"
        for i in run.instruments
    )
    return ("<h2>Instruments</h2><table><thead><tr><th>role</th><th>resource</th>"
            "<th>profile</th><th>*IDN?</th></tr></thead><tbody>" + rows + "</tbody></table>")


def _facts(run: RunFigures) -> str:
    e = html.escape
    sha_note = "" if run.sequence_sha256_ok else \
        " (the stored text no longer matches this hash)"
    items = [
        ("sequence", f"<code>{e(run.sequence_path)}</code>"),
        ("sequence SHA-256", f"<code>{e(run.sequence_sha256)}</code>{e(sha_note)}"),
        ("bench", f"<code>{e(run.bench_path or '—')}</code>"),
        ("bench SHA-256", f"<code>{e(run.bench_sha256 or '—')}</code>"),
        ("bench time", e(_duration(run.duration_sim_s))
         + (" (simulated)" if run.simulated else "")),
        ("wall time", e(_duration(run.duration_wall_s))),
        ("started", e(_when(run.created))),
        ("finished", e(_when(run.finished)) if run.finished else "—"),
    ]
    rows = "".join(f"<tr><th>{k}</th><td>{v}</td></tr>" for k, v in items)
    return "<h2>Run</h2><table><tbody>" + rows + "</tbody></table>"


def _notes(run: RunFigures) -> str:
    if not run.notes:
        return ""
    items = "".join(f"<li>{html.escape(n)}</li>" for n in run.notes)
    return f'<h2>Notes</h2><ul class="notes">{items}</ul>'


def _events(run: RunFigures) -> str:
    e = html.escape
    if not run.events:
        return "<h2>Events</h2><p>No faults, retries or notes were logged.</p>"
    rows = "".join(
        f"<tr><td class=num>{e(_when(ev.time))}</td><td>{e(ev.severity)}</td>"
        f"<td>{e(ev.kind)}</td><td class=num>"
        f"{'' if ev.point_index is None else ev.point_index}</td><td>{e(ev.message)}</td></tr>"
        for ev in run.events
    )
    return ("<h2>Events</h2><table><thead><tr><th>time</th><th>severity</th><th>kind</th>"
            "<th>point</th><th>message</th></tr></thead><tbody>" + rows + "</tbody></table>")


def _when(moment: datetime | None) -> str:
    if moment is None:
        return "—"
    return moment.astimezone(UTC).strftime("%Y-%m-%d %H:%M:%S UTC")


def _duration(seconds: float | None) -> str:
    if seconds is None or not math.isfinite(seconds):
        return "—"
    whole = round(seconds)
    hours, rest = divmod(whole, 3600)
    minutes, secs = divmod(rest, 60)
    if hours:
        return f"{hours} h {minutes:02d} min {secs:02d} s"
    if minutes:
        return f"{minutes} min {secs:02d} s"
    return f"{seconds:.1f} s"

