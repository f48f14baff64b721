"""The electrical-characteristics table: min / typ / max recomputed here from the raw
figures (the tidy figures table, with pandas), and the page shows exactly those numbers."""

from __future__ import annotations

import math
import re

import numpy as np
import pandas as pd
import pytest

from sweeprig.report.datasheet import datasheet_rows
from sweeprig.report.html import datasheet_section
from sweeprig.report.tables import figures_frame


def _nominal(frame: pd.DataFrame) -> pd.DataFrame:
    """Typical conditions, as the table's key states them: temperature nearest +25 °C, the
    middle supply, the middle LO drive (lower middle of an even count)."""
    for column in ("temperature_c", "supply_v", "lo_power_dbm"):
        if column not in frame or frame[column].isna().all():
            continue
        values = sorted(frame[column].dropna().unique())
        pick = (min(values, key=lambda t: (abs(t - 25.0), t)) if column == "temperature_c"
                else values[(len(values) - 1) // 2])
        frame = frame[np.isclose(frame[column], pick)]
    return frame


@pytest.mark.parametrize("fixture", ["corner_run", "report_run"])
def test_min_typ_max_match_an_independent_recomputation(fixture, request):
    run = request.getfixturevalue(fixture)
    table = figures_frame(run)
    rows = datasheet_rows(run)
    assert rows
    for row in rows:
        frame = table[(table["name"] == row.name) & (table["study"] == row.study)]
        frame = frame[np.isfinite(frame["value"])]
        if row.name == "spur_dbc":  # the worst counted product of each point
            frame = frame.loc[frame.groupby("points")["value"].idxmax()]
        assert row.minimum.value == pytest.approx(frame["value"].min()), row.label
        assert row.maximum.value == pytest.approx(frame["value"].max()), row.label
        # the nominal corner is chosen over every figure measured; a bound there gives no typ
        typical = _nominal(frame)
        typical = typical[typical["bound"] == ""]
        if typical.empty:
            assert math.isnan(row.typical), row.label
        else:
            assert row.typical == pytest.approx(typical["value"].median()), row.label
        spread = table.loc[(table["name"] == row.name) & (table["study"] == row.study),
                           "uncertainty_db"].max()
        assert (math.isnan(row.uncertainty) and not np.isfinite(spread)) or \
            row.uncertainty == pytest.approx(spread)


def test_the_table_shows_the_rows_numbers_and_spells_out_every_flag(report_run):
    rows = datasheet_rows(report_run)
    page = datasheet_section(rows)
    cells = re.findall(r'<td class="num min">([^<]*)</td><td class="num typ">([^<]*)</td>'
                       r'<td class="num max">([^<]*)</td>', page)
    assert cells == [(r.min_text.replace(">", "&gt;").replace("<", "&lt;"), r.typ_text,
                      r.max_text.replace(">", "&gt;").replace("<", "&lt;")) for r in rows]
    flagged = {name for r in rows for name, _ in r.flags}
    assert flagged  # the report run has bounds and flags
    footnotes = page[page.index('<ol class="footnotes">'):]
    for name in flagged:
        assert f"<code>{name}</code>" in footnotes


def test_limits_and_verdicts_are_in_the_row(corner_run):
    rows = {(r.name, r.study): r for r in datasheet_rows(corner_run)}
    isolation = rows[("lo_if_isolation", "isolation")]
    assert isolation.limit_text.startswith("≥ 30 dB")
    judged = sum(isolation.judged.values())
    assert judged == isolation.count  # every figure of the row was judged
    assert isolation.verdict_text.split()[0] in ("pass", "fail", "inconclusive")


def test_a_verdict_says_how_many_checks_had_the_limit_within_u() -> None:
    """A gain of 14.22 ± 1.35 dB against max 14 dB fails on its value, but the limit lies
    inside its uncertainty: the row says so (the GUM's coverage interval holds the edge)."""
    from sweeprig.analysis.figures import Figure
    from sweeprig.analysis.limits import Limit, assess

    limit = Limit("conversion_gain", min=9.0, max=14.0)
    figures = [Figure("conversion_gain", 14.22, "dB", uncertainty_db=1.35),
               Figure("conversion_gain", 12.0, "dB", uncertainty_db=0.3)]
    judgements = assess(figures, [limit]).judgements
    assert [j.straddles for j in judgements] == [True, False]
    row = _row_of(figures, judgements)
    assert row.verdict_text == "fail 1/2 (1 within ±U)"


def _row_of(figures, judgements):
    """The datasheet row of ``figures`` judged by ``judgements`` (no run needed)."""
    from types import SimpleNamespace

    import numpy as np

    from sweeprig.analysis.figure_block import Figures
    from sweeprig.analysis.figure_groups import held_groups
    from sweeprig.report.datasheet import _row

    (group,) = held_groups(Figures([tuple(figures)]), ["conversion_gain"],
                           key=lambda c: (str(c.get("study", "")),))
    judged = judgements.of_positions(np.arange(len(figures)))
    run = SimpleNamespace(limits=[j.limit for j in judgements], conversion="down")
    return _row(group, judged, run)
