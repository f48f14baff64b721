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


def test_every_finite_float_reads_back_exactly(tmp_path: Path) -> None:
    rng = np.random.default_rng(14)
    values = np.concatenate([
        rng.standard_normal(2000) * 10.0 ** rng.integers(-300, 300, 2000),
        rng.uniform(-200.0, 30.0, 2000).round(6),  # levels as a bench reports them
        np.array([0.0, -0.0, 5e-324, -5e-324, 2.2250738585072014e-308,
                  1.7976931348623157e308, 0.1, 1 / 3, 2.4e9, 1e16, 1e-5, 123456789.0]),
    ])
    frame = pd.DataFrame({"x": values, "y": values[::-1].copy()})
    path = write_frame_csv(frame, tmp_path / "floats.csv", chunk_rows=777)
    lines = path.read_text("utf-8").splitlines()
    assert lines[0] == "x,y"
    read = np.array([float(line.split(",")[0]) for line in lines[1:]])
    assert read.tolist() == values.tolist()  # float(text) == value, exactly
    assert np.signbit(read).tolist() == np.signbit(values).tolist()
    frame.to_csv(tmp_path / "pandas.csv", index=False)
    assert path.read_text("utf-8") == (tmp_path / "pandas.csv").read_text("utf-8")


def test_quoting_is_the_csv_writers(tmp_path: Path) -> None:
    texts = ["", "plain", "a,b", 'q"uote', "line\nbreak", "cr\ronly", "crlf\r\n", " lead",
             "trail ", ",", '"', "tab\there"]
    for frame in (pd.DataFrame({"t": texts, "n": range(len(texts))}),
                  pd.DataFrame({"only, one": texts}),  # one column: an empty cell is ""
                  pd.DataFrame({"t": pd.array(texts, dtype="string")})):
        ours = write_frame_csv(frame, tmp_path / "ours.csv", chunk_rows=5)
        frame.to_csv(tmp_path / "pandas.csv", index=False)
        assert ours.read_text("utf-8") == (tmp_path / "pandas.csv").read_text("utf-8")



def test_a_float_column_like_an_earlier_one_is_written_as_its_own(tmp_path: Path) -> None:
    """A float column whose values are mostly an earlier column's (taken from its texts,
    the differing cells formatted) is still written cell for cell as pandas writes it:
    -0.0 beside 0.0, NaN beside a number, a number beside NaN."""
    rng = np.random.default_rng(4)
    noise = rng.normal(60.0, 20.0, 300)
    scatter = noise.copy()
    scatter[::7] = rng.normal(60.0, 20.0, scatter[::7].size)
    noise[5], scatter[5] = 0.0, -0.0
    noise[6], scatter[6] = math.nan, 12.5
    noise[8], scatter[8] = 3.25, math.nan
    noise[9] = scatter[9] = math.nan
    noise[10] = scatter[10] = math.inf
    frame = pd.DataFrame({"noise_snr_db": noise, "text": ["a"] * 300, "scatter_snr_db": scatter,
                          "again": noise})
    ours = write_frame_csv(frame, tmp_path / "ours.csv", chunk_rows=128).read_text("utf-8")
    frame.to_csv(tmp_path / "pandas.csv", index=False)
    assert ours == (tmp_path / "pandas.csv").read_text("utf-8")


def test_whole_numbers_with_empty_cells_are_written_as_pandas_writes_them(
        tmp_path: Path) -> None:
    """An object column of ints and None (a budget's sweeps), beside one that mixes in a
    bool and a NumPy integer (not plain ints: the general path)."""
    ints = [None, 1, 0, -7, 2**70, None, 64]
    frame = pd.DataFrame({"averages": pd.Series(ints, dtype=object),
                          "mixed": pd.Series([True, 1, None, np.int64(3), 0, None, 2],
                                             dtype=object)})
    ours = write_frame_csv(frame, tmp_path / "ours.csv", chunk_rows=3).read_text("utf-8")
    frame.to_csv(tmp_path / "pandas.csv", index=False)
    assert ours == (tmp_path / "pandas.csv").read_text("utf-8")

