"""The report's uncertainty section: one GUM budget per headline figure.

For each headline figure that has a budget, the budget of its figure with the largest
expanded uncertainty is shown, its shared lines and its own noise lines put back together by
:func:`~sweeprig.analysis.budget_parts.budget_lines` (every figure's own budget is in the
tables beside ``figures.json``).
"""

from __future__ import annotations

import html
import math

import numpy as np

from sweeprig.analysis.budget_parts import budget_lines
from sweeprig.analysis.figures import Figure
from sweeprig.analysis.reduce import RunFigures
from sweeprig.report.tables import FIGURE_LABELS, HEADLINE_FIGURES, figure_text


def widest_budgets(run: RunFigures) -> list[Figure]:
    """Per headline figure name (in headline order), its figure with the widest U (the
    first of equals, in reduction order; a block's found from its columns, only the one
    shown made)."""
    from sweeprig.analysis.figure_block import FigureBlock

    widest: dict[str, tuple[float, FigureBlock | Figure, int]] = {}  # (U, where, row)
    for part in run.figures.parts:
        if not isinstance(part, FigureBlock):
            for f in part:
                if f.name in HEADLINE_FIGURES and f.budget is not None:
                    held = widest.get(f.name)
                    if held is None or f.uncertainty_db > held[0]:
                        widest[f.name] = (f.uncertainty_db, f, 0)
            continue
        if part.name not in HEADLINE_FIGURES or part.budgets is None:
            continue
        rows = np.flatnonzero(part.budgets.present)
        if not rows.size:
            continue
        us = part.uncertainty_db[rows]
        held = widest.get(part.name)
        start = 0
        if held is None:
            held = widest[part.name] = (float(us[0]), part, int(rows[0]))
            start = 1
        rest = np.where(np.isnan(us[start:]), -np.inf, us[start:])
        if rest.size and not math.isnan(held[0]):  # (as "u > U held" one by one: the first
            best = int(np.argmax(rest))            # widest, NaN never wider)
            if rest[best] > held[0]:
                widest[part.name] = (float(rest[best]), part, int(rows[start + best]))
    out = []
    for name in HEADLINE_FIGURES:
        if name in widest:
            _u, where, row = widest[name]
            out.append(where.figure(row) if isinstance(where, FigureBlock) else where)
    return out


def budget_section(run: RunFigures) -> str:
    """The HTML section (empty when no figure has a budget)."""
    figures = widest_budgets(run)
    if not figures:
        return ""
    e = html.escape
    parts = ['<h2>Uncertainty</h2><p class="small">Each budget combines standard '
             "uncertainties u(x<sub>i</sub>) with sensitivity coefficients c<sub>i</sub> by "
             "root sum of squares (JCGM 100:2008, the GUM); the expanded uncertainty U uses "
             "k = 2 (about 95 % coverage). Shown: the widest budget of each figure; every "
             "figure's budget is in figures.json. Specifications marked as assumptions are "
             "defaults: state your instruments' in the bench file's [uncertainty] table.</p>"]
    for figure in figures:
        budget = figure.budget
        assert budget is not None
        rows = "".join(
            f"<tr><td>{e(c.name)}</td><td>{e(c.what)}</td>"
            f'<td class="num">± {c.half_width_db:.3f}</td><td>{e(c.shape)}</td>'
            f'<td class="num">{c.standard_db:.3f}</td><td class="num">{c.sensitivity:g}</td>'
            f'<td class="num">{c.contribution_db:.3f}</td><td>{c.kind}</td>'
            f'<td class="small">{e(c.origin)}</td></tr>'
            for c in budget_lines(budget))
        label = FIGURE_LABELS.get(figure.name, figure.name)
        parts.append(
            f"<h3>{e(label)}: {e(figure_text(figure))}</h3>"
            "<table><tr><th>term</th><th>what</th><th>limit, dB</th><th>distribution</th>"
            "<th>u, dB</th><th>c</th><th>|c|·u, dB</th><th>type</th><th>from</th></tr>"
            f"{rows}"
            f'<tr><td colspan="6">combined standard uncertainty u<sub>c</sub></td>'
            f'<td class="num">{budget.combined_db:.3f}</td><td colspan="2"></td></tr>'
            f'<tr><td colspan="6">expanded uncertainty U (k = {budget.coverage_factor:g})</td>'
            f'<td class="num"><b>{budget.expanded_db:.3f}</b></td><td colspan="2"></td></tr>'
            "</table>")
    return "\n".join(parts)
