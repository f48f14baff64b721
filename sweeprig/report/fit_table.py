"""Terminal tables that fit their width: shorter forms first, then fewer columns.

A column is never squeezed below what it needs — its widest cell when it must not wrap, its
longest word when it may — so a narrow terminal never shows two-character columns or one word
per line. When the columns do not fit, the least important column with a shorter form takes
it (``264/264`` for ``264/264 (100%)``), then the least important column is left out.
The order of importance is each table's own choice (common practice, no source).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

from rich.cells import cell_len
from rich.console import Console
from rich.measure import Measurement
from rich.table import Table
from rich.text import Text

#: Importance at or above which a column is never left out.
ESSENTIAL = 100


@dataclass(frozen=True)
class Column:
    """One column: its cells (``str`` or rich ``Text``), an optional shorter form, its
    importance, and whether it may wrap on words."""

    header: str
    cells: Sequence[str | Text]
    priority: int
    short_header: str | None = None
    short_cells: Sequence[str | Text] | None = None
    wrap: bool = False
    #: When it may wrap, the narrowest it goes anyway (up to its widest cell), so that a
    #: label of several short words does not stand one word per line.
    min_chars: int = 0
    justify: str = "left"
    style: str = ""
    options: dict[str, Any] = field(default_factory=dict)


def _plain(cell: str | Text) -> str:
    return cell.plain if isinstance(cell, Text) else str(cell)


def needed_width(header: str, cells: Sequence[str | Text], wrap: bool) -> int:
    """Cells a column needs: its widest cell, or its longest word when it may wrap."""
    texts = [header, *(_plain(c) for c in cells)]
    if wrap:
        return max((cell_len(word) for text in texts for word in text.split()), default=1)
    return max((cell_len(line) for text in texts for line in text.splitlines() or [""]),
               default=1)


def fitted_table(columns: Sequence[Column], width: int, console: Console,
                 **table_options: Any) -> Table:
    """A rich table of ``columns`` that fits ``width`` cells (see the module docstring).

    Every column gets a fixed width: what it needs, and the room left over goes to the
    columns that wrap, up to their widest cell, those that need least to stop wrapping
    first (so that a long column does not take the room that unwraps two short ones)."""
    short = [False] * len(columns)
    kept = [True] * len(columns)
    by_importance = sorted(range(len(columns)), key=lambda i: columns[i].priority)
    while True:
        chosen = [i for i in range(len(columns)) if kept[i]]
        needs = {i: _need(columns[i], short[i], wrap=columns[i].wrap) for i in chosen}
        table = _build(columns, short, chosen, needs, table_options)
        total = Measurement.get(console, console.options.update_width(10_000), table).maximum
        if total <= width or not any(columns[i].priority < ESSENTIAL for i in chosen):
            widths = dict(needs)
            room = width - total
            natural = {i: _need(columns[i], short[i], wrap=False) for i in chosen}
            for i in sorted(chosen, key=lambda i: (natural[i] - needs[i], -columns[i].priority)):
                if room <= 0 or not columns[i].wrap:
                    continue
                grow = min(room, natural[i] - widths[i])
                if grow > 0:
                    widths[i] += grow
                    room -= grow
            return _build(columns, short, chosen, widths, table_options)
        shorter = next((i for i in by_importance if kept[i] and not short[i]
                        and columns[i].short_cells is not None), None)
        if shorter is not None:
            short[shorter] = True
            continue
        dropped = next(i for i in by_importance if kept[i] and columns[i].priority < ESSENTIAL)
        kept[dropped] = False


def _texts(column: Column, short: bool) -> tuple[str, Sequence[str | Text]]:
    header = column.short_header if short and column.short_header else column.header
    cells = column.short_cells if short and column.short_cells is not None else column.cells
    return header, cells


def _need(column: Column, short: bool, *, wrap: bool) -> int:
    header, cells = _texts(column, short)
    need = needed_width(header, cells, wrap)
    if wrap and column.min_chars:
        need = max(need, min(column.min_chars, needed_width(header, cells, False)))
    return need


def _build(columns: Sequence[Column], short: list[bool], chosen: list[int],
           widths: dict[int, int], table_options: dict[str, Any]) -> Table:
    table = Table(**table_options)
    cells_of = []
    for i in chosen:
        column = columns[i]
        header, cells = _texts(column, short[i])
        table.add_column(header, justify=column.justify, style=column.style or None,
                         no_wrap=not column.wrap, overflow="fold" if column.wrap else "ellipsis",
                         width=widths[i], **column.options)  # type: ignore[arg-type]
        cells_of.append(cells)
    rows = len(columns[0].cells) if columns else 0
    for r in range(rows):
        table.add_row(*(cells[r] for cells in cells_of))
    return table
