"""The terminal summary: header, one row per figure and study, verdict and notes."""

from __future__ import annotations

import dataclasses

import pytest
from rich.console import Console

from sweeprig.report.terminal import print_summary


def test_the_summary_names_the_run_figures_and_verdict(report_run):
    console = Console(record=True, width=140, force_terminal=False)
    print_summary(report_run, console)
    text = console.export_text()
    assert f"run {report_run.run_id}  KX-2417 T-0001  complete" in text
    for label in ("Conversion gain", "Input P1dB", "IIP3", "Worst m×n spur"):
        assert label in text
    assert "≥ -12 dBm" in text
    assert "verdict: PASS" in text


def test_a_run_without_figures_says_so(report_run):
    empty = dataclasses.replace(report_run, figures=(), notes=("no readings are stored yet",))
    console = Console(record=True, width=100)
    print_summary(empty, console)
    text = console.export_text()
    assert "no figures" in text and "note: no readings are stored yet" in text


def test_titles_and_notes_are_not_read_as_markup(report_run):
    odd = dataclasses.replace(report_run, title="lot [/red] [bold]7[/bold]",
                              notes=("[/] not markup",))
    console = Console(record=True, width=140)
    print_summary(odd, console)
    text = console.export_text()
    assert "lot [/red] [bold]7[/bold]" in text and "note: [/] not markup" in text


def test_flags_met_are_explained_under_the_table(report_run):
    from sweeprig.analysis.figures import FLAG_MEANINGS

    figure = dataclasses.replace(report_run.figures[0], flags=("rbw_merged", "in_noise"))
    flagged = dataclasses.replace(report_run, figures=(figure, *report_run.figures[1:]))
    console = Console(record=True, width=400)
    print_summary(flagged, console)
    text = console.export_text()
    assert "flags:" in text
    assert f"RBW merged: {FLAG_MEANINGS['rbw_merged']} (limit check inconclusive)" in text
    assert f"noise: {FLAG_MEANINGS['in_noise']}\n" in text  # a bound, not suspect


def _summary_at(run, width: int) -> str:
    console = Console(record=True, width=width, force_terminal=False)
    print_summary(run, console)
    text = console.export_text()
    assert all(len(line) <= width for line in text.splitlines()), text
    return text


@pytest.mark.parametrize("width", [80, 120])
def test_the_summary_is_readable_at_80_and_120_columns(report_run, width):
    from sweeprig.report.tables import figure_text, summary_rows

    text = _summary_at(report_run, width)
    rows = summary_rows(report_run, by=("study",))
    lines = text.splitlines()
    for row in rows:  # every figure's value whole on its row, beside the start of its label
        value = figure_text(row.figure).split(" (k =")[0]
        first_word = row.label.split()[0]
        assert any(value in line and line.lstrip().startswith(first_word) for line in lines), \
            f"{row.label} / {value} not on one line:\n{text}"
    for name in {row.study for row in rows}:  # study names never broken inside a word
        assert name in text, text
    header = next(line for line in lines if line.lstrip().startswith("figure"))
    assert "result" in header
    if width == 120:
        assert "(k = 2)" in text and "limit" in header


def test_at_80_columns_flags_become_numbers_of_the_notes(report_run):
    figure = dataclasses.replace(report_run.figures[0], flags=("in_noise",))
    flagged = dataclasses.replace(report_run, figures=(figure, *report_run.figures[1:]))
    text = _summary_at(flagged, 80)
    assert "[1] noise: " in text
    assert "value (k = 2)" in text  # the coverage factor moved into the header
