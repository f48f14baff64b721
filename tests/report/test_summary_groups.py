"""The summary's groups read from columns (sweeprig.analysis.figure_groups) give the same
lines as the same groups read figure by figure: the reference below is the summary as it
was written over Figure objects (every member made), kept here to compare with."""

from __future__ import annotations

import bisect
import dataclasses
import math

import numpy as np
import pytest

from sweeprig.analysis.figure_block import FigureBlock, Figures, block_of
from sweeprig.analysis.figure_groups import held_groups
from sweeprig.analysis.figures import FLAGS, Figure
from sweeprig.analysis.judged_blocks import JudgedGroup
from sweeprig.analysis.reduce import RunFigures
from sweeprig.report.tables import (
    GROUP_KEYS,
    HEADLINE_FIGURES,
    HIGHER_IS_BETTER,
    LOWER_IS_BETTER,
    NO_LIMIT,
    SummaryRow,
    conditions_text,
    figure_label,
    figure_text,
    format_condition,
    format_value,
    limit_text,
    limit_texts,
    summary_rows,
)
from sweeprig.units import format_frequency
from tests.support import reduced_with_blocks, run_of_figures


def flag_tally(figures) -> dict[str, int]:
    """How many of ``figures`` carry each flag, figure by figure."""
    counts: dict[str, int] = {}
    for f in figures:
        for flag in f.flags:
            counts[flag] = counts.get(flag, 0) + 1
    return counts


def _reference_rows(run: RunFigures, by=GROUP_KEYS) -> list[SummaryRow]:
    limited = [limit.name for limit in run.limits]
    names = list(HEADLINE_FIGURES) + [n for n in dict.fromkeys(limited)
                                      if n not in HEADLINE_FIGURES]
    by_name: dict[str, list[tuple[int, Figure]]] = {}
    for position, figure in zip(*run.figures.named(names, budgets=False), strict=True):
        by_name.setdefault(figure.name, []).append((position, figure))
    judgements = run.assessment.judgements
    rows = []
    for name in names:
        groups: dict[tuple, list[tuple[int, Figure]]] = {}
        keys: dict[int, tuple] = {}
        for position, figure in by_name.get(name, []):
            c = figure.conditions
            key = keys.setdefault(id(c), tuple(c.get(k) for k in by))
            groups.setdefault(key, []).append((position, figure))
        for held in groups.values():
            positions = [p for p, _ in held]
            judged = judgements.of_positions(np.array(positions, dtype=np.int64))
            rows.append(_reference_row(name, [f for _, f in held], positions, judged,
                                       run.limits, tuple(by), run.conversion))
    return rows


def _reference_row(name, members, positions, judged: JudgedGroup, limits, by, conversion):
    shown, shown_at = _reference_worst(name, members, positions, judged)
    numbers = [f.value for f in members if math.isfinite(f.value)]
    unit = members[0].unit
    range_text = ""
    if len(members) > 1 and numbers:
        range_text = f"{format_value(min(numbers), unit)} … {format_value(max(numbers), unit)}"
    first = members[0].conditions
    fixed = {k: first[k] for k in by if k in first and k != "study"}
    if len(members) == 1:
        text = conditions_text(shown.conditions, skip=("study",), conversion=conversion)
    else:
        text = conditions_text(fixed, conversion=conversion)
        spread = _reference_spread(members, by, conversion)
        if spread:
            text += f"; {len(members)} figures over {spread}"
        if name in ("spur_dbc", "spur_dbm"):
            c = shown.conditions
            where = f" at {format_frequency(float(c['freq_hz']))}" if "freq_hz" in c else ""
            if "m" in c and "n" in c:
                text += f"; worst m×n {int(float(c['m']))}×{int(float(c['n']))}{where}"
    applying = limit_texts(judged.limits) or [
        limit_text(li) for li in limits if li.name == name and not li.conditions]
    counts = flag_tally(members)
    value_text = figure_text(shown, 2)
    if len(members) > 1 and (name in HIGHER_IS_BETTER or name in LOWER_IS_BETTER
                             or len(judged)):
        value_text = f"worst {value_text}"
    elif len(members) > 1 and range_text:
        value_text = range_text
    return SummaryRow(name=name, label=figure_label(name), study=str(first.get("study", "")),
                      conditions_text=text.lstrip("; "), value_text=value_text,
                      range_text=range_text, limit_text="; ".join(applying),
                      verdict=judged.verdict or NO_LIMIT,
                      flags=tuple((f, counts[f]) for f in FLAGS if f in counts),
                      count=len(members), figure=shown, points=shown.points,
                      position=shown_at)


def _reference_spread(members, by, conversion):
    mappings = list({id(f.conditions): f.conditions for f in members}.values())
    parts = []
    keys = [k for k in ("temperature_c", "supply_v") if k not in by]
    for key in (*keys, "rf_freq_hz", "output_freq_hz", "lo_freq_hz", "lo_power_dbm",
                "rf_power_dbm"):
        values = sorted({float(v) for m in mappings if isinstance(v := m.get(key), int | float)})
        if len(values) > 1:
            if key == "lo_freq_hz" and any("rf_freq_hz" in p for p in parts):
                continue
            low = format_condition(key, values[0], conversion)
            high = format_condition(key, values[-1], conversion)
            parts.append(f"{low}…{high}" if key in ("temperature_c", "supply_v")
                         else f"{low}–{high.split(' ', 1)[1]}")
    if any("m" in c for c in mappings):
        parts.append("the m×n products")
    return ", ".join(parts)


def _reference_worst(name, members, positions, judged):
    at = judged.shown_position()
    if at is not None:
        return members[bisect.bisect_left(positions, at)], at
    finite = [i for i, f in enumerate(members) if math.isfinite(f.value)]
    if not finite:
        return members[0], positions[0]
    if name in HIGHER_IS_BETTER:
        i = min(finite, key=lambda k: members[k].value)
    elif name in LOWER_IS_BETTER:
        i = max(finite, key=lambda k: members[k].value)
    else:
        i = finite[0]
    return members[i], positions[i]


@pytest.mark.parametrize("least", [1, 10**9], ids=["blocks", "loose"])
@pytest.mark.parametrize("by", [GROUP_KEYS, ("study",)], ids=["default", "study"])
def test_summary_from_columns_is_the_summary_figure_by_figure(report_store, least, by):
    run = reduced_with_blocks(report_store, least)
    if least == 1:
        assert any(isinstance(p, FigureBlock) for p in run.figures.parts)
    rows, reference = summary_rows(run, by), _reference_rows(run, by)
    assert len(rows) > 10
    assert [dataclasses.astuple(dataclasses.replace(r, figure=None)) for r in rows] == \
        [dataclasses.astuple(dataclasses.replace(r, figure=None)) for r in reference]
    # the shown figure: the same one the figure-by-figure reading showed
    assert [r.figure for r in rows] == [r.figure for r in reference]
    assert all(r.figure == run.figures.figure_at(r.position, budgets=False) for r in rows)
    assert any(r.verdict == NO_LIMIT and r.count > 1 for r in rows)
    assert any(r.flags for r in rows)


def _figure(name, value, study, temperature, point, flags=(), unit="dB"):
    return Figure(name, value, unit, conditions={"study": study, "temperature_c": temperature},
                  flags=flags, points=(point,))


def test_groups_by_name_order_then_first_figure_with_blocks_and_loose_figures():
    """Names in the given order whatever the figures' order; each name's groups by their
    first figure; a group gathers a block's rows and loose figures alike; NaN values and
    flags kept; the distinct mappings by identity in order of first appearance."""
    hot = {"study": "band", "temperature_c": 85.0}
    cold = {"study": "band", "temperature_c": -40.0}
    block = block_of([Figure("conversion_gain", v, "dB", conditions=c, flags=f, points=(p,))
                      for p, (v, c, f) in enumerate([
                          (10.0, hot, ()), (math.nan, cold, ("overload",)),
                          (11.0, hot, ("overload",)), (9.5, cold, ())])])
    loose = (_figure("noise_figure", 8.0, "band", 25.0, 7),
             Figure("conversion_gain", 12.0, "dB", conditions=dict(cold), points=(9,)),
             _figure("noise_figure", 8.5, "band", 25.0, 8, flags=("overload",)))
    figures = Figures([block, loose])
    groups = held_groups(figures, ["noise_figure", "conversion_gain"],
                         ("study", "temperature_c"))
    assert [(g.name, g.key, g.positions.tolist()) for g in groups] == [
        ("noise_figure", ("band", 25.0), [4, 6]),
        ("conversion_gain", ("band", 85.0), [0, 2]),
        ("conversion_gain", ("band", -40.0), [1, 3, 5]),
    ]
    gains = groups[2]
    assert np.isnan(gains.values[0]) and gains.values[1:].tolist() == [9.5, 12.0]
    assert gains.flag_counts() == {"overload": 1}
    assert [dict(m) for m in gains.mappings] == [cold, cold]  # the block's one, the loose one
    assert gains.mappings[0] is block.conditions[1] and gains.mappings[1] is loose[1].conditions
    assert gains.figure(2) is loose[1]  # a loose figure: itself
    made = gains.figure(1)
    assert (made.name, made.value, made.points, made.budget) == ("conversion_gain", 9.5,
                                                                  (3,), None)
    assert groups[0].flag_counts() == {"overload": 1} and groups[1].unit == "dB"
    assert held_groups(figures, ["iip3"], ("study",)) == []


def test_the_figure_at_a_position():
    block = block_of([_figure("conversion_gain", 10.0 + p, "band", 25.0, p) for p in range(3)])
    loose = (_figure("noise_figure", 8.0, "band", 25.0, 7),)
    figures = Figures([block, loose])
    assert [figures.figure_at(k).value for k in range(4)] == [10.0, 11.0, 12.0, 8.0]
    assert figures.figure_at(3) is loose[0]
    with pytest.raises(IndexError):
        figures.figure_at(4)


@pytest.mark.parametrize(("name", "shown", "text"), [
    ("lo_if_isolation", 2, "worst 28.00 dB"),  # higher is better: the lowest, first of equals
    ("spur_dbc", 4, "worst 30.00 dB"),  # lower is better: the highest
    ("conversion_gain", 1, "28.00 dB … 30.00 dB"),  # neither: the first number; the range
])
def test_a_summary_line_shows_the_worst_in_the_better_direction(name, shown, text):
    """Without a limit: the worst by the figure's better direction; NaN never shown while
    a number is there."""
    cold = {"study": "band", "temperature_c": -40.0}
    figures = [Figure(name, v, "dB", conditions=cold, points=(p,))
               for p, v in enumerate([math.nan, 29.0, 28.0, 28.0, 30.0])]
    for held in (Figures([block_of(figures)]), Figures([tuple(figures)])):
        (row,) = summary_rows(run_of_figures(held), by=("study",))
        assert (row.position, row.count, row.value_text) == (shown, 5, text)
        assert row.range_text == "28.00 dB … 30.00 dB"
