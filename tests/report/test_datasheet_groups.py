"""The datasheet's rows read from columns (sweeprig.analysis.figure_groups) are the rows
read figure by figure: the reference below is the table as it was written over Figure
objects (every member made), kept here to compare with."""

from __future__ import annotations

import dataclasses
import math
import statistics

import numpy as np
import pytest

from sweeprig.analysis.figure_block import FigureBlock, Figures, block_of
from sweeprig.analysis.figure_table import condition_numbers
from sweeprig.analysis.figures import FLAGS, Figure
from sweeprig.analysis.reduce import RunFigures
from sweeprig.report.datasheet import (
    PER_POINT_WORST,
    ROOM_C,
    DatasheetRow,
    corners_text,
    datasheet_rows,
)
from sweeprig.report.tables import (
    HEADLINE_FIGURES,
    NO_LIMIT,
    figure_label,
    limit_text,
    limit_texts,
)
from tests.support import reduced_with_blocks, run_of_figures


def _reference_rows(run: RunFigures) -> list[DatasheetRow]:
    names = list(HEADLINE_FIGURES) + [n for n in dict.fromkeys(li.name for li in run.limits)
                                      if n not in HEADLINE_FIGURES]
    groups: dict[tuple[str, str], list[Figure]] = {}
    positions: dict[tuple[str, str], list[int]] = {}
    for position, figure in zip(*run.figures.named(set(names), budgets=False), strict=True):
        key = (figure.name, str(figure.conditions.get("study", "")))
        groups.setdefault(key, []).append(figure)
        positions.setdefault(key, []).append(position)
    order = {s.name: i for i, s in enumerate(run.studies)}
    keys = sorted(groups, key=lambda k: (names.index(k[0]), order.get(k[1], len(order)), k[1]))
    judgements = run.assessment.judgements
    return [_reference_row(name, study, groups[(name, study)],
                           judgements.of_positions(np.array(positions[(name, study)])), run)
            for name, study in keys]


def _corner_figures(name, figures):
    if name not in PER_POINT_WORST:
        return list(figures)
    worst: dict[tuple[int, ...], Figure] = {}
    for figure in figures:
        if not math.isfinite(figure.value):
            continue
        held = worst.get(figure.points)
        if held is None or figure.value > held.value:
            worst[figure.points] = figure
    return list(worst.values())


def _nominal(figures):
    chosen = list(figures)
    for key in ("temperature_c", "supply_v", "lo_power_dbm"):
        mappings = list({id(f.conditions): f.conditions for f in chosen}.values())
        values = condition_numbers(mappings, key)
        if not values:
            continue
        pick = (min(values, key=lambda t: (abs(t - ROOM_C), t)) if key == "temperature_c"
                else values[(len(values) - 1) // 2])
        chosen = [f for f in chosen
                  if isinstance(v := f.conditions.get(key), int | float)
                  and math.isclose(float(v), pick, rel_tol=1e-9, abs_tol=1e-12)]
    return chosen


def _reference_row(name, study, members, judged, run) -> DatasheetRow:
    values = _corner_figures(name, members)
    finite = [f for f in values if math.isfinite(f.value)]
    typical_numbers = [f.value for f in _nominal(finite) if f.is_number]
    spreads = [f.uncertainty_db for f in members if math.isfinite(f.uncertainty_db)]
    limits = limit_texts(judged.limits) or [
        limit_text(li) for li in run.limits
        if li.name == name and li.conditions.get("study", study) == study]
    counts: dict[str, int] = {}
    for f in members:
        for flag in f.flags:
            counts[flag] = counts.get(flag, 0) + 1
    mappings = list({id(f.conditions): f.conditions for f in members}.values())
    return DatasheetRow(
        name=name, label=figure_label(name), study=study,
        conditions_text=corners_text(mappings, run.conversion), unit=members[0].unit,
        count=len(values),
        minimum=min(finite, key=lambda f: f.value) if finite else None,
        typical=statistics.median(typical_numbers) if typical_numbers else math.nan,
        maximum=max(finite, key=lambda f: f.value) if finite else None,
        uncertainty=max(spreads) if spreads else math.nan,
        limit_text="; ".join(limits), verdict=judged.verdict or NO_LIMIT,
        judged={k: v for k, v in judged.counts.items() if v},
        flags=tuple((f, counts[f]) for f in FLAGS if f in counts),
        straddled=judged.straddled)


def _fields(row: DatasheetRow) -> tuple:
    return tuple(repr(v) for v in dataclasses.astuple(dataclasses.replace(
        row, minimum=None, maximum=None)))


@pytest.mark.parametrize("least", [1, 10**9], ids=["blocks", "loose"])
def test_datasheet_from_columns_is_the_datasheet_figure_by_figure(report_store, least):
    run = reduced_with_blocks(report_store, least)
    if least == 1:
        assert any(isinstance(p, FigureBlock) for p in run.figures.parts)
    rows, reference = datasheet_rows(run), _reference_rows(run)
    assert len(rows) > 10
    assert [_fields(r) for r in rows] == [_fields(r) for r in reference]
    assert [(r.minimum, r.maximum) for r in rows] == \
        [(r.minimum, r.maximum) for r in reference]
    assert any(r.name in PER_POINT_WORST for r in rows)  # the per-point reduction is met
    assert any(math.isfinite(r.typical) for r in rows) and any(r.flags for r in rows)


def test_corner_run_datasheet_is_the_datasheet_figure_by_figure(corner_run):
    """Corners of temperature, supply and LO drive: the nominal corner is chosen the same."""
    rows, reference = datasheet_rows(corner_run), _reference_rows(corner_run)
    assert [_fields(r) for r in rows] == [_fields(r) for r in reference]
    assert [(r.minimum, r.maximum) for r in rows] == \
        [(r.minimum, r.maximum) for r in reference]


def test_spurs_enter_a_row_once_per_point_their_worst_first_of_equals():
    """The worst finite spur of each point, in order of each point's first spur; NaN left
    out; min and max taken over those; the typical value at the nominal corner only."""
    def spur(value, point, temperature):
        return Figure("spur_dbc", value, "dBc", points=(point,),
                      conditions={"study": "spurs", "temperature_c": temperature})

    figures = [spur(-70.0, 1, 25.0), spur(-60.0, 1, 25.0), spur(math.nan, 2, 25.0),
               spur(-80.0, 2, 25.0), spur(-60.0, 1, 25.0), spur(-50.0, 3, 85.0)]
    for held in (Figures([block_of(figures)]), Figures([tuple(figures)])):
        run = run_of_figures(held)
        (row,) = datasheet_rows(run)
        assert row.count == 3
        assert (row.minimum.value, row.minimum.points) == (-80.0, (2,))
        assert (row.maximum.value, row.maximum.points) == (-50.0, (3,))
        assert row.typical == pytest.approx(-70.0)  # median of -60 and -80 at 25 °C
        (reference,) = _reference_rows(run)
        assert _fields(row) == _fields(reference)


def test_the_typical_value_is_at_the_lower_middle_of_an_even_count_of_corners():
    """Two supplies and two LO drives: the typical value is the median at the lower of each
    (the temperature nearest 25 °C first), NaN and bounds left out."""
    def gain(value, temperature, supply, lo, bound=None):
        return Figure("conversion_gain", value, "dB", bound=bound, points=(0,),
                      conditions={"study": "band", "temperature_c": temperature,
                                  "supply_v": supply, "lo_power_dbm": lo})

    figures = [gain(10.0, 25.0, 3.0, -3.0), gain(10.4, 25.0, 3.0, -3.0),
               gain(11.0, 25.0, 3.6, -3.0), gain(12.0, 25.0, 3.0, 0.0),
               gain(13.0, 85.0, 3.0, -3.0), gain(9.0, 25.0, 3.0, -3.0, bound="<"),
               gain(math.nan, 25.0, 3.0, -3.0)]
    for held in (Figures([block_of(figures[:5]), tuple(figures[5:])]),
                 Figures([tuple(figures)])):
        run = run_of_figures(held)
        (row,) = datasheet_rows(run)
        assert row.typical == pytest.approx(10.2)
        assert (row.minimum.value, row.maximum.value, row.count) == (9.0, 13.0, 7)
        (reference,) = _reference_rows(run)
        assert _fields(row) == _fields(reference)
