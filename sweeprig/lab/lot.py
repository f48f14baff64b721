"""Lab views: the runs of every bench (with filters) and the lot report.

The lot report takes each unit's figures as the same analysis as ``sweeprig report``
(:func:`sweeprig.analysis.reduce.reduce_run`) gave them when the run finished (kept with the
run, :mod:`sweeprig.lab.figures`; a run without them is reduced once), then, per figure and
set of conditions, summarises the units (:mod:`sweeprig.analysis.lot_stats`): mean, standard
deviation, min/max, "typ", Cpk against the sequence's spec limits, outlier units, and a box
plot of the units with the limits drawn. A figure a unit's run flagged as suspect
(:data:`SUSPECT_FLAGS`) is left out of the statistics and counted, so one bad reading never
becomes the lot's "typ".
One unit counts once: its latest complete run.
"""

from __future__ import annotations

import html
import json
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from sweeprig.analysis.lot_stats import LotStatistic, lot_statistic
from sweeprig.errors import InputError
from sweeprig.store.base import RunSummary
from sweeprig.store.sql import SqlRunStoreCore


@dataclass(frozen=True)
class RunFilter:
    """Which runs a lab view shows (every field optional; dates are UTC, inclusive)."""

    part: str | None = None
    lot: str | None = None
    serial: str | None = None
    bench: str | None = None
    state: str | None = None
    since: datetime | None = None
    until: datetime | None = None


def tag_value(tags: Sequence[str], key: str) -> str | None:
    """The value of tag ``key:VALUE`` (the lab's ``lot:``, ``bench:``), or None."""
    return next((t.split(":", 1)[1] for t in tags if t.startswith(key + ":")), None)


def lab_runs(store: SqlRunStoreCore, where: RunFilter) -> list[RunSummary]:
    """The runs of every bench that ``where`` selects, newest first."""
    out = []
    for run in store.runs():  # type: ignore[attr-defined]
        if where.part is not None and run.part != where.part:
            continue
        if where.serial is not None and run.serial != where.serial:
            continue
        if where.lot is not None and tag_value(run.tags, "lot") != where.lot:
            continue
        if where.bench is not None and tag_value(run.tags, "bench") != where.bench:
            continue
        if where.state is not None and run.status != where.state:
            continue
        if where.since is not None and run.created < where.since:
            continue
        if where.until is not None and run.created > where.until:
            continue
        out.append(run)
    return out


@dataclass(frozen=True)
class LotRow:
    """One figure under one set of conditions over the lot."""

    figure: str
    unit: str
    conditions: tuple[tuple[str, Any], ...]
    stats: LotStatistic
    suspect_units: tuple[str, ...]

    def conditions_text(self) -> str:
        return ", ".join(f"{k}={_fmt_condition(k, v)}" for k, v in self.conditions)


@dataclass(frozen=True)
class LotReport:
    """A lot: its part, lot name, the units and runs it holds, and its rows."""

    part: str
    lot: str | None
    units: tuple[tuple[str, int], ...]
    rows: tuple[LotRow, ...]


def _fmt_condition(key: str, value: Any) -> str:
    if key.endswith("_hz") and isinstance(value, int | float):
        return f"{value / 1e6:g} MHz"
    return f"{value:g}" if isinstance(value, float) else str(value)


def lot_report(store: SqlRunStoreCore, where: RunFilter, *,
               on_reduce: Callable[[int], None] | None = None) -> LotReport:
    """Gather the lot ``where`` selects (its latest complete run per unit) and summarise it.

    Each run's figures are those kept with it when it finished (:mod:`sweeprig.lab.figures`);
    a run without them is reduced now (``on_reduce(run_id)`` is told first) and they are kept.
    """
    from sweeprig.lab.figures import figures_of_runs

    runs = lab_runs(store, RunFilter(**{**where.__dict__, "state": "complete"}))
    latest: dict[str, RunSummary] = {}
    for run in runs:  # newest first: the first seen per serial is its latest
        latest.setdefault(run.serial, run)
    if not latest:
        raise InputError("no complete run matches", where="lab lot",
                         fix="check --part and --lot (see `sweeprig lab runs`)")
    parts = {r.part for r in latest.values()}
    if len(parts) > 1:
        raise InputError(f"the runs selected are of several parts ({', '.join(sorted(parts))})",
                         where="lab lot", fix="give --part")
    figures = figures_of_runs(store, [run.id for run in latest.values()], on_reduce=on_reduce)
    groups: dict[tuple[str, str, tuple[tuple[str, Any], ...]], dict[str, Any]] = {}
    for serial, run in sorted(latest.items()):
        for fig in figures[run.id]:
            key = (fig.name, fig.unit, fig.conditions)
            entry = groups.setdefault(key, {"units": [], "values": [], "suspect": [],
                                            "lsl": fig.lsl, "usl": fig.usl})
            if fig.suspect or fig.value is None:
                entry["suspect"].append(serial)
                continue
            entry["units"].append(serial)
            entry["values"].append(fig.value)
    rows = []
    for (name, unit, conditions), entry in sorted(groups.items(), key=lambda kv: kv[0][:2]):
        if not entry["values"]:
            continue
        rows.append(LotRow(name, unit, conditions,
                           lot_statistic(entry["units"], entry["values"], lsl=entry["lsl"],
                                         usl=entry["usl"]),
                           tuple(entry["suspect"])))
    return LotReport(parts.pop(), where.lot, tuple((s, r.id) for s, r in sorted(latest.items())),
                     tuple(rows))


# -- writing ----------------------------------------------------------------------------------

MAX_PLOTS = 40
"""Box plots drawn at most (figures with spec limits first come first)."""

def _num(value: float | None, digits: int = 2) -> str:
    return "—" if value is None or value != value else f"{value:.{digits}f}"


BOX_W, BOX_H, BOX_PAD = 520, 64, 36
"""Size of a box plot (px) and its left/right margin."""


def box_plot(row: LotRow) -> str:
    """Tukey's box plot of the row's units (Tukey, *Exploratory Data Analysis*, 1977: box from
    Q1 to Q3, median line, whiskers to the furthest unit inside Q1 − 1.5·IQR and Q3 + 1.5·IQR,
    units beyond drawn as outliers) with every unit as a dot and the spec limits dashed, as an
    inline SVG element: a string, drawn in microseconds (a lot has hundreds of rows)."""
    import numpy as np

    s = row.stats
    values = np.asarray(s.values, dtype=float)
    q1, median, q3 = (float(v) for v in np.percentile(values, [25.0, 50.0, 75.0]))
    fence_lo, fence_hi = q1 - 1.5 * (q3 - q1), q3 + 1.5 * (q3 - q1)
    inside = values[(values >= fence_lo) & (values <= fence_hi)]
    whisker_lo, whisker_hi = float(inside.min()), float(inside.max())
    ends = [float(values.min()), float(values.max()),
            *(v for v in (s.lsl, s.usl) if v is not None)]
    lo, hi = min(ends), max(ends)
    if hi - lo <= 0:
        lo, hi = lo - 1.0, hi + 1.0
    span = hi - lo
    lo, hi = lo - 0.05 * span, hi + 0.05 * span

    def x(value: float) -> float:
        return BOX_PAD + (value - lo) / (hi - lo) * (BOX_W - 2 * BOX_PAD)

    mid, half = 24.0, 10.0
    parts = [
        f'<line x1="{x(whisker_lo):.1f}" y1="{mid}" x2="{x(q1):.1f}" y2="{mid}" stroke="#333"/>',
        f'<line x1="{x(q3):.1f}" y1="{mid}" x2="{x(whisker_hi):.1f}" y2="{mid}" stroke="#333"/>',
        f'<rect x="{x(q1):.1f}" y="{mid - half}" width="{max(x(q3) - x(q1), 0.5):.1f}" '
        f'height="{2 * half}" fill="#dbe7f5" stroke="#333"/>',
        f'<line x1="{x(median):.1f}" y1="{mid - half}" x2="{x(median):.1f}" '
        f'y2="{mid + half}" stroke="#1f4e8c" stroke-width="2"/>',
    ]
    for end in (whisker_lo, whisker_hi):
        parts.append(f'<line x1="{x(end):.1f}" y1="{mid - 5}" x2="{x(end):.1f}" '
                     f'y2="{mid + 5}" stroke="#333"/>')
    outlying = set(s.outliers)
    for unit, value in zip(s.units, s.values, strict=True):
        if unit in outlying:
            parts.append(f'<circle cx="{x(value):.1f}" cy="{mid}" r="4" fill="none" '
                         f'stroke="#b3261e"><title>{html.escape(unit)}: {value:.3f}</title>'
                         "</circle>")
        else:
            parts.append(f'<circle cx="{x(value):.1f}" cy="{mid}" r="2" fill="#1f4e8c" '
                         f'fill-opacity="0.5"><title>{html.escape(unit)}: {value:.3f}</title>'
                         "</circle>")
    for name, limit in (("LSL", s.lsl), ("USL", s.usl)):
        if limit is not None:
            parts.append(f'<line x1="{x(limit):.1f}" y1="4" x2="{x(limit):.1f}" y2="{BOX_H - 18}" '
                         'stroke="#b3261e" stroke-dasharray="4 3"/>'
                         f'<text x="{x(limit):.1f}" y="{BOX_H - 6}" font-size="10" '
                         f'text-anchor="middle" fill="#b3261e">{name} {limit:g}</text>')
    for tick in np.linspace(lo, hi, 5)[1:-1]:
        parts.append(f'<text x="{x(float(tick)):.1f}" y="{BOX_H - 20}" font-size="9" '
                     f'text-anchor="middle" fill="#555">{float(tick):.3g}</text>')
    label = html.escape(f"{row.figure} ({row.unit}) over {s.n} units")
    return (f'<svg xmlns="http://www.w3.org/2000/svg" width="{BOX_W}" height="{BOX_H}" '
            f'role="img" aria-label="{label}">' + "".join(parts) + "</svg>")


def write_lot_report(report: LotReport, folder: Path, *, plots: bool = True) -> Path:
    """Write ``lot.html`` (table and box plots) and ``lot.json`` in ``folder``."""
    e = html.escape
    folder.mkdir(parents=True, exist_ok=True)
    title = f"{report.part} lot {report.lot or '(all)'}: {len(report.units)} units"
    body = [f"<h1>{e(title)}</h1>",
            "<p>Per figure and conditions, over the units' latest complete runs. Cpk = "
            "min((USL − μ)/3σ, (μ − LSL)/3σ) (ISO 22514-2; Montgomery, <i>Introduction to "
            "Statistical Quality Control</i>, process capability), μ and σ the lot's mean and "
            "sample standard deviation; typ = the lot's median (common practice); outliers "
            "outside Tukey's fences (Q1 − 1.5·IQR, Q3 + 1.5·IQR). Figures a run flagged as "
            "suspect are left out and counted.</p>",
            "<table><tr><th>figure</th><th>conditions</th><th>n</th><th>typ</th><th>mean</th>"
            "<th>std</th><th>min</th><th>max</th><th>LSL</th><th>USL</th><th>Cpk</th>"
            "<th>outliers</th><th>left out</th></tr>"]
    for row in report.rows:
        s = row.stats
        body.append(
            f"<tr><td>{e(row.figure)} ({e(row.unit)})</td><td>{e(row.conditions_text())}</td>"
            f"<td>{s.n}</td><td>{_num(s.typ)}</td><td>{_num(s.mean)}</td><td>{_num(s.std, 3)}"
            f"</td><td>{_num(s.minimum)}</td><td>{_num(s.maximum)}</td><td>{_num(s.lsl)}</td>"
            f"<td>{_num(s.usl)}</td><td>{_num(s.cpk)}</td>"
            f"<td>{e(', '.join(s.outliers)) or '—'}</td>"
            f"<td>{len(row.suspect_units) or '—'}</td></tr>")
    body.append("</table>")
    if plots:
        drawn = [r for r in report.rows if r.stats.n >= 2 and (r.stats.lsl is not None
                                                                 or r.stats.usl is not None)]
        if len(drawn) > MAX_PLOTS:
            body.append(f"<p>Box plots of the first {MAX_PLOTS} of the {len(drawn)} figures "
                        "with spec limits; every figure is in the table and lot.json.</p>")
        for row in drawn[:MAX_PLOTS]:
            body.append(f"<figure>{box_plot(row)}<figcaption>{e(row.figure)} ({e(row.unit)}) — "
                        f"{e(row.conditions_text())}</figcaption></figure>")
    body.append("<h2>Units</h2><p>" + ", ".join(
        f"{e(serial)} (run {run_id})" for serial, run_id in report.units) + "</p>")
    page = ("<!DOCTYPE html><html lang=\"en\"><head><meta charset=\"utf-8\">"
            f"<title>{e(title)}</title><style>body{{font-family:sans-serif;margin:24px}}"
            "table{border-collapse:collapse}td,th{padding:3px 8px;border-bottom:1px solid #ddd;"
            "font-size:13px}figure img{max-width:100%}</style></head><body>"
            + "".join(body) + f"<footer>written {datetime.now(UTC):%Y-%m-%d %H:%M} UTC</footer>"
            "</body></html>")
    path = folder / "lot.html"
    path.write_text(page, encoding="utf-8")
    (folder / "lot.json").write_text(json.dumps({
        "part": report.part, "lot": report.lot,
        "units": [{"serial": s, "run": r} for s, r in report.units],
        "rows": [{"figure": r.figure, "unit": r.unit, "conditions": dict(r.conditions),
                  **{k: v for k, v in r.stats.__dict__.items()},
                  "suspect_units": list(r.suspect_units)} for r in report.rows],
    }, indent=1, default=str), encoding="utf-8")
    return path
