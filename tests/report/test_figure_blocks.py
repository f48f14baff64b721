"""A run's figures held as columns (sweeprig.analysis.figure_block) give the same figures,
verdict and report files as the same figures held one by one.

The shared report run is reduced twice: once with every figure it can hold as columns in a
block (a block from a single figure), once with none; the figures must be equal field by
field, budgets included, and the report's tables the same bytes."""

from __future__ import annotations

import dataclasses
import re
from pathlib import Path

import pytest

from sweeprig.analysis import figure_block
from sweeprig.analysis.figure_block import FigureBlock, Figures, block_of, packed
from sweeprig.analysis.figures import Figure
from sweeprig.analysis.reduce import RunFigures, reduce_run
from sweeprig.report import write_report
from sweeprig.store.sqlite import SqliteRunStore


def _reduced(store: tuple[Path, int], least: int, monkeypatch: pytest.MonkeyPatch
             ) -> RunFigures:
    monkeypatch.setattr(figure_block, "BLOCK_MIN_FIGURES", least)
    path, run_id = store
    with SqliteRunStore(path, create=False) as opened:
        return reduce_run(opened, run_id)


@pytest.fixture(scope="module")
def both_ways(report_store) -> tuple[RunFigures, RunFigures]:
    with pytest.MonkeyPatch.context() as patch:
        columns = _reduced(report_store, 1, patch)
        loose = _reduced(report_store, 10**9, patch)
    return columns, loose


def _fields(f: Figure) -> tuple:
    b = f.budget
    budget = None if b is None else (b.shared, repr(b.snr_db), repr(b.scatter_snr_db),
                                     b.averages, b.own_lines, repr(b.combined_db))
    return (f.name, repr(f.value), f.unit, f.bound, dict(f.conditions), f.flags, f.points,
            repr(f.uncertainty_db), budget)


def test_the_run_holds_blocks_of_every_kind_it_can(both_ways):
    columns, loose = both_ways
    assert isinstance(columns.figures, Figures) and isinstance(loose.figures, Figures)
    names = {p.name for p in columns.figures.parts if isinstance(p, FigureBlock)}
    # per-point gains, isolations, supply, the two-tone points and the m×n spurs (their
    # noise read from each spur's own product)
    assert {"conversion_gain", "lo_if_isolation", "supply_current", "im3_low",
            "spur_dbc"} <= names
    assert not any(isinstance(p, FigureBlock) for p in loose.figures.parts)
    # the fitted figures stay figures (their budgets have lines of their own)
    assert "iip3" not in names and "input_p1db" not in names


def test_blocks_give_the_same_figures_budgets_and_verdict(both_ways):
    columns, loose = both_ways
    assert len(columns.figures) == len(loose.figures)
    assert [_fields(f) for f in columns.figures] == [_fields(f) for f in loose.figures]
    assert columns.verdict == loose.verdict and columns.notes == loose.notes
    assert [(j.figure, j.limit, j.verdict, j.suspect, j.reason, j.straddles)
            for j in columns.assessment.judgements] \
        == [(j.figure, j.limit, j.verdict, j.suspect, j.reason, j.straddles)
            for j in loose.assessment.judgements]
    # judged from the blocks' columns
    assert any(type(p).__name__ == "JudgedBlock" for p in columns.assessment.judgements.parts)
    with_budget = [f for f in columns.figures if f.budget is not None]
    assert len(with_budget) > 100


def test_a_judgement_knows_its_figure_by_its_position(both_ways):
    # the report joins a judgement to its figure by its number in the figure table
    for run in both_ways:
        judgements = run.assessment.judgements
        assert len(judgements) > 10
        assert all(run.figures[j.position] == j.figure for j in judgements)
    columns, loose = both_ways
    assert [j.position for j in columns.assessment.judgements] \
        == [j.position for j in loose.assessment.judgements]


def test_blocks_write_the_same_report_tables(both_ways, report_plots, tmp_path):
    # held as blocks, as parts without a block, and as a plain tuple of figures (the
    # writers' own reading of Figure objects)
    columns, loose = both_ways
    plain = dataclasses.replace(loose, figures=tuple(loose.figures))
    written = [write_report(run, tmp_path / name, plots=report_plots).folder
               for name, run in (("columns", columns), ("loose", loose), ("plain", plain))]
    for name in ("figures.csv", "figures.json", "budgets.csv", "budget-terms.csv",
                 "captures.csv"):
        texts = {folder.name: _without_time(folder / name) for folder in written}
        assert texts["columns"] == texts["loose"] == texts["plain"], name
    for name in ("figures.csv", "captures.csv"):
        # the Parquet tables hold the same rows and column types
        import pandas as pd

        frames = [pd.read_parquet(folder / name.replace(".csv", ".parquet"))
                  for folder in written]
        for frame in frames[1:]:
            pd.testing.assert_frame_equal(frames[0], frame)


def _without_time(path: Path) -> bytes:
    """The file, its generation time (figures.json's ``generated_utc``) blanked."""
    text = path.read_bytes()
    return re.sub(rb'"generated_utc":"[^"]*"', b'"generated_utc":""', text)


def test_a_sequence_of_figures_reads_as_one():
    figures = [Figure("gain", float(i), "dB", conditions={"study": "s"}, points=(i,))
               for i in range(6)]
    figures.insert(3, Figure("iip3", 9.0, "dBm", points=(1, 2)))
    parts = packed(figures, least=2)
    assert [type(p).__name__ for p in parts] == ["FigureBlock", "tuple", "FigureBlock"]
    seq = Figures(parts)
    assert len(seq) == 7 and list(seq) == figures and seq == figures and seq == tuple(figures)
    assert seq[3] == figures[3] and seq[-1] == figures[-1] and seq[1:5] == figures[1:5]
    assert seq[::2] == figures[::2]
    with pytest.raises(IndexError):
        seq[7]
    assert seq != figures[:-1]
    positions, named = seq.named(["iip3"])
    assert positions == [3] and named == [figures[3]]
    # made anew each time: a figure is known by its position, not its identity
    assert seq[0] == seq[0] and seq[0] is not seq[0]
    assert block_of(figures[:3]).figure(2) == figures[2]


def test_the_widest_budgets_are_found_from_the_columns(both_ways):
    # the report's uncertainty section: per headline name, the first figure of the widest U
    # with a budget, whether the figures are held as blocks or one by one
    from sweeprig.report.budgets import widest_budgets
    from sweeprig.report.tables import HEADLINE_FIGURES

    columns, loose = both_ways
    reference: dict[str, Figure] = {}
    for f in loose.figures:
        if f.name in HEADLINE_FIGURES and f.budget is not None:
            held = reference.get(f.name)
            if held is None or f.uncertainty_db > held.uncertainty_db:
                reference[f.name] = f
    expected = [_fields(reference[n]) for n in HEADLINE_FIGURES if n in reference]
    assert len(expected) > 2
    assert [_fields(f) for f in widest_budgets(columns)] == expected
    assert [_fields(f) for f in widest_budgets(loose)] == expected


def test_the_budget_columns_are_each_figure_s_budget_as_whole_numbers(both_ways):
    """The figure table's budget numbers and sweeps are pandas' nullable integers: a
    figure's shared part's number and, per reading whose noise scatter is known, its
    sweeps; empty otherwise. Read from a block's columns, or figure by figure, the same."""
    import math

    import pandas as pd

    from sweeprig.report.budget_tables import (
        BUDGET_INTEGER_COLUMNS,
        _slot_names,
        budget_columns,
        figure_budgets,
    )

    tables = []
    for run in both_ways:
        budgets = figure_budgets(run)
        columns = budget_columns(budgets)
        for name in BUDGET_INTEGER_COLUMNS:
            assert isinstance(columns[name], pd.arrays.IntegerArray), name
        tables.append(pd.DataFrame(columns))
        figures = list(run.figures)
        for i, f in enumerate(figures):
            b = f.budget
            budget = columns["budget"][i]
            if b is None:
                assert budget is pd.NA
                continue
            assert budget == budgets.shared_numbers[id(b.shared)]
            for k in range(2):
                sweeps = columns[_slot_names(k)[2]][i]
                known = k < len(b.scatter_snr_db) and not math.isnan(b.scatter_snr_db[k])
                assert (sweeps == b.averages[k]) if known else sweeps is pd.NA
    assert tables[0].equals(tables[1])
