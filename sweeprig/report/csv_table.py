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
formatted by pandas itself, a chunk at a time. With the ``fast`` extra a large table's text
is written by polars instead, the same bytes (the last section of this module).
"""

from __future__ import annotations

import csv
import functools
import io
import math
import re
from pathlib import Path
from typing import Any, TextIO

import numpy as np
import pandas as pd

#: Rows formatted per chunk: bounds the strings held at once.
CHUNK_ROWS = 20_000
#: Rows from which a frame is written through polars where it is installed: below, the
#: time saved is small and importing it would add about 40 MB to the process (the report
#: writes its small tables itself, its large ones in a helper process).
POLARS_FROM_ROWS = CHUNK_ROWS

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
    if isinstance(dtype, pd.Int64Dtype):  # whole numbers with empty cells (budget columns)
        return _object_texts(column.to_numpy(dtype=object, na_value=None).tolist())
    if isinstance(dtype, pd.StringDtype):
        return column.to_numpy(dtype=object, na_value="").tolist()
    if isinstance(dtype, pd.CategoricalDtype) and _text_categories(dtype):
        # a category of text: each cell its category's text (a run's study, reading, kind)
        texts = [*dtype.categories.tolist(), ""]  # code -1, a missing cell: the last
        return [texts[code] for code in column.cat.codes.to_numpy().tolist()]
    if pd.api.types.is_string_dtype(dtype):
        return _object_texts(column.tolist())
    # anything else (dates, categories of other than text, nullable types): pandas' own
    # formatting, read back as cell texts (quoted again on the way out, as the csv writer
    # would)
    text = column.to_frame().to_csv(index=False, header=False, lineterminator="\n")
    rows = list(csv.reader(io.StringIO(text, newline="")))
    return [r[0] if r else "" for r in rows]


def _text_categories(dtype: pd.CategoricalDtype) -> bool:
    """Whether every category of ``dtype`` is a ``str``."""
    return all(type(c) is str for c in dtype.categories.tolist())


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
                     chunk_rows: int = CHUNK_ROWS,
                     polars_from_rows: int | None = POLARS_FROM_ROWS,
                     arrow: Any = None) -> None:
    """Write ``frame``'s rows as CSV text to ``out`` (a text file opened with
    ``newline=""``), its header first when ``header``, ``chunk_rows`` rows at a time: a
    table written in slices is the same text as written whole.

    A frame of at least ``polars_from_rows`` rows goes through polars' writer, as an Arrow
    table, where it writes the same text (:func:`arrow_csv_text`); None: every cell is
    formatted here. ``arrow``: ``frame`` made an Arrow table already (for its Parquet
    file)."""
    if header:
        out.write(_rows_text([[_header_cell(c)] for c in frame.columns]))
    fast = polars_from_rows is not None and len(frame) >= polars_from_rows \
        and polars_module() is not None
    if fast and arrow is None:
        arrow = _arrow_table(frame)
    # a file's bytes written by polars straight into it (not through a text in between)
    binary = getattr(out, "buffer", None)
    quote: list[bool] | None = None
    for start in range(0, len(frame), chunk_rows):
        chunk = frame.iloc[start:start + chunk_rows]
        rows = None if not fast or arrow is None else _polars_chunk(
            arrow.slice(start, len(chunk)), chunk)
        if rows is not None:
            if binary is None:
                out.write(_rows_csv(rows))
            else:
                out.flush()  # (the text written here before goes first)
                _rows_csv(rows, binary)
            continue
        if quote is None:
            quote = [_may_need_quotes(column) for _, column in frame.items()]
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


# -- the same text through polars' writer ---------------------------------------------------
#
# polars (the optional ``fast`` extra, with pyarrow) writes a table's CSV text in compiled
# code from its Arrow form (which its Parquet file needs anyway): a 100k-point run's figure
# table in 0.7 s of one core against 4.1 s formatted here. It writes the same text as this
# module for what it is given: floats whose shortest text it writes as ``repr`` does, whole
# numbers, ``True``/``False``, texts with a missing cell for an empty one, and every other
# column as the texts :func:`column_texts` makes. Where the two writers differ, the column
# or chunk is formatted here instead, so the bytes never depend on whether polars is
# installed (``tests/report/test_csv_table.py`` compares both ways):
#
# - a float whose ``repr`` is in exponent form (magnitude below 1e-4 or from 1e16): polars
#   writes 2.5e-05 as 0.000025 — that column's texts are made here;
# - a text holding a lone carriage return: polars quotes it, the csv writer does not (Python
#   3.11) — that chunk is written here;
# - a table of one column (an empty cell is written ``""`` by the csv writer: a line of
#   nothing would read back as no row), or one Arrow cannot hold (mixed types, an integer
#   beyond 64 bits) — written here.


@functools.cache
def polars_module() -> Any:
    """polars, or None when it or pyarrow is not installed (the ``fast`` extra), or when the
    installed polars does not write :func:`_probe_frame` as this module does (another
    version may format otherwise: then every table is formatted here). Found once."""
    try:
        import polars
        import pyarrow  # noqa: F401  (the tables reach polars as Arrow tables)
    except ImportError:
        return None
    return polars if _writes_alike(polars) else None


def _probe_frame() -> pd.DataFrame:
    """A few rows of every kind of cell the report's tables hold."""
    return pd.DataFrame({
        "point": np.array([0, 1, -7, 2**62], dtype=np.int64),
        "level_dbm": [-27.283395056245638, math.nan, 0.1 + 0.2, -0.0],
        "freq_hz": [1730000000.0, 1e15 + 0.5, 9999999999999998.0, 1e-4],
        "overload": [True, False, False, True],
        "text": ["2.716 ± 1.348 dB (k = 2)", 'say "x", then', "", None],
        "lines": ["a\nb", "plain", "ü", " lead"],
        "kind": pd.Categorical(["wanted", "if", None, "wanted"]),
        "sweeps": pd.Series([15, None, 0, 3], dtype=object),
    })


def _writes_alike(pl: Any) -> bool:
    """Whether polars (``pl``) writes :func:`_probe_frame` as the cells formatted here."""
    frame = _probe_frame()
    reference = io.StringIO()
    write_frame_rows(reference, frame, header=False, polars_from_rows=None)
    try:
        text = arrow_csv_text(_arrow_table(frame), frame, pl=pl)
    except Exception:  # any failure of another version: not used
        return False
    return text == reference.getvalue()


#: A float written in exponent form by ``repr``: magnitude below this, or ...
_REPR_EXPONENT_BELOW = 1e-4
#: ... from this (Python's float ``repr``: decimal exponent below -4 or from 16).
_REPR_EXPONENT_FROM = 1e16


def _arrow_table(frame: pd.DataFrame) -> Any:
    """``frame`` as an Arrow table (None: a column Arrow cannot hold, e.g. mixed types)."""
    import pyarrow as pa

    try:
        return pa.Table.from_pandas(frame, preserve_index=False)
    except (pa.ArrowException, TypeError, ValueError, OverflowError):
        return None


def _is_text(kind: Any) -> bool:
    """Whether the Arrow type ``kind`` holds text."""
    import pyarrow as pa

    return bool(pa.types.is_string(kind) or pa.types.is_large_string(kind))


def _polars_chunk(table: Any, frame: pd.DataFrame) -> Any:
    """:func:`arrow_csv_rows`, or None when polars fails on this chunk (a column type the
    probe did not hold, say): the chunk is then formatted here, the same text."""
    try:
        return arrow_csv_rows(table, frame)
    except Exception:  # any failure of polars on this chunk: formatted here instead
        return None


def arrow_csv_text(table: Any, frame: pd.DataFrame, *, pl: Any = None) -> str | None:
    """The rows of ``frame`` as CSV text written by polars (``pl``; None: the one
    :func:`polars_module` found) from ``table`` (``frame`` as an Arrow table), the same text
    as formatted here; None where polars would write other text (see above)."""
    rows = arrow_csv_rows(table, frame, pl=pl)
    return None if rows is None else _rows_csv(rows)


def _rows_csv(rows: Any, into: Any = None) -> str | None:
    """polars' CSV text of ``rows`` (:func:`arrow_csv_rows`: no header, ``\n`` line ends)
    written into the binary file ``into``, or (None) returned as a text."""
    return rows.write_csv(into, include_header=False, line_terminator="\n")


def arrow_csv_rows(table: Any, frame: pd.DataFrame, *, pl: Any = None) -> Any:
    """The polars frame :func:`arrow_csv_text` writes (every cell a text or missing, as it
    is written), or None where polars would write other text. The columns of a type not
    listed above are formatted here from ``frame``."""
    import pyarrow as pa

    pl = pl or polars_module()
    if frame.shape[1] < 2 or not len(frame) or table.num_columns != frame.shape[1]:
        return None
    # every column a series, what polars does to it an expression, all evaluated in one
    # pass (a chunk of the figure table has some thirty columns); a text column's empty
    # texts become missing cells in the same pass
    series = []
    cells = []
    for i, (field, (label, original)) in enumerate(
            zip(table.schema, frame.items(), strict=True)):
        kind = field.type
        name = f"c{i}"
        column = table.column(i)
        texts: list[str] | None = None  # cells formatted here
        cell = pl.col(name)
        if str(label) != field.name:
            texts = column_texts(original)
        elif pa.types.is_float64(kind) and original.dtype == np.float64:
            size = np.abs(original.to_numpy())
            exponent_form = ((size < _REPR_EXPONENT_BELOW) & (size > 0.0)) | (
                (size >= _REPR_EXPONENT_FROM) & (size < np.inf))
            if exponent_form.any():
                texts = column_texts(original)
            else:
                series.append(pl.Series(name, column))
                cells.append(cell.fill_nan(None))
        elif pa.types.is_integer(kind) or pa.types.is_null(kind):
            series.append(pl.Series(name, column))
            cells.append(cell)
        elif pa.types.is_boolean(kind) and original.dtype == np.bool_:
            series.append(pl.Series(name, column))
            cells.append(pl.when(cell).then(pl.lit("True")).otherwise(pl.lit("False"))
                         .alias(name))
        elif _is_text(kind) or (pa.types.is_dictionary(kind) and _is_text(kind.value_type)):
            if _holds_carriage_return(column):
                return None
            series.append(pl.Series(name, column))
            cells.append(_missing_if_empty(pl, cell.cast(pl.String), name))
        else:
            texts = column_texts(original)
        if texts is not None:
            if any("\r" in t for t in texts):
                return None
            series.append(pl.Series(name, texts, dtype=pl.String))
            cells.append(_missing_if_empty(pl, cell, name))
    return pl.DataFrame(series).select(cells)


def _holds_carriage_return(column: Any) -> bool:
    """Whether an Arrow text column (plain or dictionary) holds a carriage return: the csv
    writer leaves a lone CR unquoted, polars quotes it (such a chunk is formatted here)."""
    import pyarrow as pa
    import pyarrow.compute as pc

    if pa.types.is_dictionary(column.type):
        column = pa.chunked_array([chunk.dictionary for chunk in column.chunks],
                                  type=column.type.value_type)
    return bool(pc.any(pc.match_substring(column, "\r")).as_py())


def _missing_if_empty(pl: Any, cell: Any, name: str) -> Any:
    """A text column's expression with its empty texts as missing cells (what the csv
    writer writes for both)."""
    return pl.when(cell == "").then(None).otherwise(cell).alias(name)
