"""A table written as CSV column by column, in chunks of rows: :func:`write_frame_csv`.

``DataFrame.to_csv`` formats every cell through pandas' block machinery, and the standard
:mod:`csv` writer still looks at every character of every cell (a large run's tables hold
millions of cells: seconds of the report). Here each column of a chunk becomes a list of
strings at once (a float by ``repr``, the shortest text that reads back to the same number,
as pandas writes it; NaN, None and NaT as an empty field; ints and bools by ``str``), only
the text cells that hold a delimiter, a quote or a line break go through the :mod:`csv`
writer (minimal quoting, the dialect pandas uses), and each chunk is joined into one text
and written at once. The text is what ``to_csv(path, index=False)`` writes for these column
types (``tests/report/test_csv_table.py`` compares them); any other column type is
formatted by pandas itself, a chunk at a time.
"""

from __future__ import annotations

import csv
import io
import math
import re
from pathlib import Path
from typing import TextIO

import numpy as np
import pandas as pd

#: Rows formatted per chunk: bounds the strings held at once.
CHUNK_ROWS = 20_000

def _quote_triggers() -> str:
    """The characters that make the csv writer (minimal quoting, ``\\n`` line ends, the
    dialect pandas uses) quote a cell, asked of the writer itself once: its rule has changed
    between Python versions (a lone ``\\r``)."""
    triggers = ""
    for ch in (",", '"', "\n", "\r"):
        buffer = io.StringIO()
        csv.writer(buffer, lineterminator="\n").writerow([f"a{ch}b", ""])
        if buffer.getvalue().startswith('"'):
            triggers += ch
    return triggers


#: A cell holding one of these is quoted: in double quotes, its quotes doubled.
_NEEDS_QUOTES = re.compile("[" + re.escape(_quote_triggers()) + "]").search


def _float_texts(values: np.ndarray) -> list[str]:
    if values.size > 64:
        # condition columns repeat a few values: format each distinct value once
        distinct, inverse = np.unique(values, return_inverse=True)
        if distinct.size * 4 < values.size:
            texts = np.array(_float_texts(distinct), dtype=object)
            return texts[inverse.ravel()].tolist()
    texts = list(map(repr, values.tolist()))
    missing = np.flatnonzero(np.isnan(values))
    for i in missing.tolist():
        texts[i] = ""
    return texts


def _object_texts(values: list[object]) -> list[str]:
    kinds = set(map(type, values))
    if kinds <= {str}:
        return values  # type: ignore[return-value]  # every cell is text already
    if kinds <= {str, type(None)}:
        return ["" if v is None else v for v in values]  # type: ignore[misc]
    if kinds <= {int, type(None)}:  # whole numbers with empty cells (budget columns)
        return ["" if v is None else str(v) for v in values]
    out: list[str] = []
    append = out.append
    for v in values:
        if v is None or v is pd.NA or v is pd.NaT:
            append("")
        elif isinstance(v, float):
            append("" if math.isnan(v) else repr(v))
        elif isinstance(v, str):
            append(v)
        else:
            append(str(v))
    return out


def column_texts(column: pd.Series) -> list[str]:
    """The cells of ``column`` as ``to_csv`` writes them before quoting (see the module
    docstring)."""
    dtype = column.dtype
    if isinstance(dtype, np.dtype):
        if dtype.kind == "f":
            return _float_texts(column.to_numpy())
        if dtype.kind in "iu":
            return list(map(str, column.to_numpy().tolist()))
        if dtype.kind == "b":
            return ["True" if v else "False" for v in column.to_numpy().tolist()]
        if dtype.kind == "O":
            return _object_texts(column.tolist())
    if isinstance(dtype, pd.StringDtype):
        return column.to_numpy(dtype=object, na_value="").tolist()
    if pd.api.types.is_string_dtype(dtype):
        return _object_texts(column.tolist())
    # anything else (dates, categories, nullable types): pandas' own formatting, read back
    # as cell texts (quoted again on the way out, as the csv writer would)
    text = column.to_frame().to_csv(index=False, header=False, lineterminator="\n")
    rows = list(csv.reader(io.StringIO(text, newline="")))
    return [r[0] if r else "" for r in rows]


def _quote_cell(text: str) -> str:
    """``text`` as the csv writer writes it as one of several cells of a row."""
    if _NEEDS_QUOTES(text) is None:
        return text
    return '"' + text.replace('"', '""') + '"'


def _quoted(texts: list[str], may_need: bool) -> list[str]:
    """``texts`` with every cell the csv writer would quote quoted as it would."""
    if not may_need or _NEEDS_QUOTES("".join(texts)) is None:
        return texts
    return list(map(_quote_cell, texts))


def _may_need_quotes(column: pd.Series) -> bool:
    kind = column.dtype.kind if isinstance(column.dtype, np.dtype) else "O"
    return kind not in "iufb"


def write_frame_csv(frame: pd.DataFrame, path: Path, chunk_rows: int = CHUNK_ROWS) -> Path:
    """Write ``frame`` (no index) to ``path`` as CSV, ``chunk_rows`` rows at a time. OSError
    propagates (the caller names the file)."""
    with path.open("w", encoding="utf-8", newline="") as out:
        write_frame_rows(out, frame, header=True, chunk_rows=chunk_rows)
    return path


def write_frame_rows(out: TextIO, frame: pd.DataFrame, *, header: bool,
                     chunk_rows: int = CHUNK_ROWS) -> None:
    """Write ``frame``'s rows as CSV text to ``out`` (a text file opened with
    ``newline=""``), its header first when ``header``, ``chunk_rows`` rows at a time: a
    table written in slices is the same text as written whole."""
    if header:
        out.write(_rows_text([[_header_cell(c)] for c in frame.columns]))
    quote = [_may_need_quotes(frame.iloc[:, i]) for i in range(frame.shape[1])]
    for start in range(0, len(frame), chunk_rows):
        chunk = frame.iloc[start:start + chunk_rows]
        formatted: list[tuple[np.ndarray, list[str]]] = []  # this chunk's float64 columns
        columns = []
        for i in range(chunk.shape[1]):
            column = chunk.iloc[:, i]
            if column.dtype == np.float64:
                values = column.to_numpy()
                texts = _float_texts_beside(values, formatted)
                formatted.append((values, texts))
            else:
                texts = column_texts(column)
            columns.append(_quoted(texts, quote[i]))
        out.write(_rows_text(columns))


def _float_texts_beside(values: np.ndarray, formatted: list[tuple[np.ndarray, list[str]]]
                        ) -> list[str]:
    """:func:`_float_texts` of a float64 column, taken from an earlier column of the same
    rows where most of their values are the same bit for bit (a figure's scatter SNR is
    mostly its noise SNR): only the cells that differ are formatted."""
    if values.size > 64:
        bits = values.view(np.uint64)
        missing = np.isnan(values)
        for earlier, texts in formatted:
            same = (bits == earlier.view(np.uint64)) | (missing & np.isnan(earlier))
            if np.count_nonzero(same) * 2 >= values.size:
                out = list(texts)
                for i in np.flatnonzero(~same).tolist():
                    out[i] = "" if missing[i] else repr(values[i].item())
                return out
    return _float_texts(values)


def _header_cell(name: object) -> str:
    return _quote_cell(str(name))


def _rows_text(columns: list[list[str]]) -> str:
    """Columns of cell texts (quoted already, of equal length) as CSV lines, joined row by
    row in C (no tuple per row is kept); a row of one empty cell is ``""``, as the csv
    writer writes it, so the line is not read back as no row."""
    if not columns or not columns[0]:
        return ""
    if len(columns) == 1:
        return "\n".join(t or '""' for t in columns[0]) + "\n"
    return "\n".join(map(",".join, zip(*columns, strict=True))) + "\n"
