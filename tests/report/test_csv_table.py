"""The column-wise CSV writer writes what ``DataFrame.to_csv(index=False)`` writes."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd

from sweeprig.report.csv_table import write_frame_csv


def _frame() -> pd.DataFrame:
    return pd.DataFrame({
        "point": np.arange(5, dtype=np.int64),
        "study": ["compression", "two, tone", 'say "x"', "", "line\nbreak"],
        "level_dbm": [-27.283395, math.nan, 1e-05, 2.4e9, -math.inf],
        "overload": [True, False, False, True, False],
        "risks": [None, "noise", math.nan, 3, 0.1],
        "m": pd.array([1, None, 3, 4, 5], dtype="Int64"),
        "category": pd.Categorical(["a", "b\nc", None, "a", "d"]),
        "when": pd.to_datetime(["2026-01-01T00:00:00Z"] * 4 + [None], utc=True),
    })


def test_the_text_is_pandas_to_csv(tmp_path: Path) -> None:
    frame = _frame()
    ours = write_frame_csv(frame, tmp_path / "ours.csv", chunk_rows=2).read_text("utf-8")
    frame.to_csv(tmp_path / "pandas.csv", index=False)
    assert ours == (tmp_path / "pandas.csv").read_text("utf-8")


def test_an_empty_table_is_its_header(tmp_path: Path) -> None:
    frame = _frame().iloc[:0]
    ours = write_frame_csv(frame, tmp_path / "ours.csv").read_text("utf-8")
    frame.to_csv(tmp_path / "pandas.csv", index=False)
    assert ours == (tmp_path / "pandas.csv").read_text("utf-8")
