"""A table written as CSV column by column, in chunks of rows: :func:`write_frame_csv`.

``DataFrame.to_csv`` formats every cell through pandas' block machinery (a large run's two
tables hold millions of cells: seconds of the report). Here each column of a chunk becomes a
list of strings at once (a float by ``repr``, the shortest text that reads back to the same
number, as pandas writes it; NaN, None and NaT as an empty field; ints and bools by ``str``)
and the standard :mod:`csv` writer (in C, minimal quoting, the same dialect pandas uses)
joins them. The text is what ``to_csv(path, index=False)`` writes for these column types
(``tests/report/test_csv_table.py`` compares them); any other column type is formatted by
pandas itself, a chunk at a time.
"""

from __future__ import annotations

import csv
import io
import math
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

#: Rows formatted per chunk: bounds the strings held at once.
CHUNK_ROWS = 20_000


def _float_texts(values: np.ndarray) -> list[str]:
    if values.size > 64:
        # condition columns repeat a few values: format each distinct value once
        distinct, inverse = np.unique(values, return_inverse=True)
        if distinct.size * 4 < values.size:
            texts = _float_texts(distinct)
            return [texts[i] for i in inverse.ravel().tolist()]
    return ["" if v != v else repr(v) for v in values.tolist()]


def _object_texts(values: list[object]) -> list[str]:
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
    """The cells of ``column`` as ``to_csv`` writes them (see the module docstring)."""
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
    # anything else (dates, categories, nullable types): pandas' own formatting
    text = column.to_frame().to_csv(index=False, header=False, lineterminator="\n")
    rows = list(csv.reader(io.StringIO(text, newline="")))
    return [r[0] if r else "" for r in rows]


def write_frame_csv(frame: pd.DataFrame, path: Path, chunk_rows: int = CHUNK_ROWS) -> Path:
    """Write ``frame`` (no index) to ``path`` as CSV, ``chunk_rows`` rows at a time. OSError
    propagates (the caller names the file)."""
    with path.open("w", encoding="utf-8", newline="") as out:
        write_frame_rows(csv.writer(out, lineterminator="\n"), frame, header=True,
                         chunk_rows=chunk_rows)
    return path


def write_frame_rows(writer: Any, frame: pd.DataFrame, *, header: bool,
                     chunk_rows: int = CHUNK_ROWS) -> None:
    """Write ``frame``'s rows (and its header first when ``header``) through ``writer`` (a
    :func:`csv.writer`), ``chunk_rows`` rows at a time: a table written in slices is the
    same text as written whole."""
    if header:
        writer.writerow([str(c) for c in frame.columns])
    for start in range(0, len(frame), chunk_rows):
        chunk = frame.iloc[start:start + chunk_rows]
        columns = [column_texts(chunk.iloc[:, i]) for i in range(chunk.shape[1])]
        writer.writerows(zip(*columns, strict=True))
