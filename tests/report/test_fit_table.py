"""Tables fitted to a width: shorter forms first, then the least important columns."""

from __future__ import annotations

import io

from rich.console import Console

from sweeprig.report.fit_table import Column, fitted_table


def _render(width: int) -> str:
    columns = [
        Column("id", ["1", "22"], 100, justify="right"),
        Column("name", ["a long name here", "short"], 100, wrap=True),
        Column("when", ["2026-12-03 05:19", "2026-12-03 06:00"], 60,
               short_cells=["05:19", "06:00"]),
        Column("note", ["kept last", "x"], 40),
    ]
    console = Console(width=width, record=True, file=io.StringIO())
    console.print(fitted_table(columns, width, console, box=None, pad_edge=False))
    return console.export_text()


def test_everything_shows_when_there_is_room():
    text = _render(80)
    assert "a long name here" in text and "2026-12-03 05:19" in text and "kept last" in text


def test_the_short_form_comes_before_a_column_is_left_out():
    text = _render(36)
    assert "05:19" in text and "2026-12-03" not in text and "kept last" in text


def test_the_least_important_column_goes_and_no_column_is_crushed():
    text = _render(20)
    assert "kept last" not in text and "05:19" in text
    assert "short" in text and "long" in text  # the name wraps on words, never inside one
    assert all(len(line) <= 20 for line in text.splitlines())
