"""The terminal summary: header, one row per figure and study, verdict and notes."""

from __future__ import annotations

import dataclasses

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
