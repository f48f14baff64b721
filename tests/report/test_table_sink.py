"""The table sink's whole-number columns (budget numbers, sweeps: Python ints or None in an
object column): made pandas' nullable integers as ``pd.array`` makes them, and, when every
cell is a Python int or None, written as CSV by polars from their Arrow column, the same
text as formatted here (the number, or an empty cell)."""

from __future__ import annotations

from pathlib import Path

import hypothesis.strategies as st
import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings

from sweeprig.report import csv_table
from sweeprig.report.table_writing import TableSink, nullable_integers

_INT64 = st.integers(min_value=-(2**63), max_value=2**63 - 1)


def _object_column(values: list[object]) -> pd.Series:
    column = np.empty(len(values), dtype=object)
    column[:] = values
    return pd.Series(column, dtype=object)


@settings(max_examples=200, deadline=None)
@given(st.lists(st.one_of(st.none(), _INT64), max_size=60))
def test_ints_and_nothing_are_made_as_pandas_makes_them(values: list[int | None]) -> None:
    array, plain = nullable_integers(_object_column(values))
    assert plain
    expected = pd.array(values, dtype="Int64")
    assert array.dtype == expected.dtype
    assert array.equals(expected)


@pytest.mark.parametrize("values", [
    [1.0, None, 3.0],            # whole floats
    [np.int64(4), None],         # numpy integers
    [True, 2],                   # a bool is not a number here
    [1, float("nan")],           # a missing cell other than None
])
def test_other_cells_go_through_pandas_and_are_written_here(values: list[object]) -> None:
    array, plain = nullable_integers(_object_column(values))
    assert not plain
    assert array.equals(pd.array(values, dtype="Int64"))


def test_beyond_64_bits_pandas_says_so() -> None:
    with pytest.raises((OverflowError, TypeError, ValueError)):
        nullable_integers(_object_column([2**64, None]))


def _sink_text(folder: Path, frame: pd.DataFrame, integers: tuple[str, ...]) -> str:
    folder.mkdir()
    sink = TableSink({"csv": folder / "t.csv", "parquet": folder / "t.parquet"},
                     integer_columns=integers)
    sink.write(frame)
    sink.close()
    back = pd.read_parquet(folder / "t.parquet")
    for name in integers:
        assert str(back[name].dtype) == "Int64"
        assert back[name].equals(pd.Series(pd.array(frame[name].tolist(), dtype="Int64"),
                                           name=name))
    return (folder / "t.csv").read_text(encoding="utf-8")


def test_whole_number_columns_written_by_polars_read_as_formatted_here(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    rows = 3 * csv_table.CHUNK_ROWS // 2
    rng = np.random.default_rng(7)
    numbers = rng.integers(-10**12, 10**12, rows).tolist()
    budget = _object_column([None if k % 3 else n for k, n in enumerate(numbers)])
    sweeps = _object_column([None] * rows)
    whole_floats = _object_column([float(k) if k % 2 else None for k in range(rows)])
    frame = pd.DataFrame({"value": rng.normal(size=rows), "budget": budget,
                          "averages": sweeps, "odd": whole_floats})
    integers = ("budget", "averages", "odd")
    asked: list[tuple[str, ...]] = []
    real = csv_table.arrow_csv_text

    def spy(table, chunk, texts_here=(), **options):
        asked.append(tuple(texts_here))
        return real(table, chunk, texts_here, **options)

    assert csv_table.polars_module() is not None  # (probed before the spy is in place)
    monkeypatch.setattr(csv_table, "arrow_csv_text", spy)
    through_polars = _sink_text(tmp_path / "polars", frame, integers)
    # polars wrote the plain columns from Arrow; the whole floats' texts were made here
    assert asked == [("odd",), ("odd",)]
    monkeypatch.setattr(csv_table, "_polars_chunk", lambda *a: None)  # every cell here
    here = _sink_text(tmp_path / "here", frame, integers)
    assert through_polars == here
    assert "\n,," not in here.splitlines()[0]
    first = here.splitlines()[1].split(",")
    assert first[1] == str(numbers[0]) and first[2] == "" and first[3] == ""


def test_row_groups_are_written_in_the_slices_order(tmp_path: Path) -> None:
    """The Parquet file holds a row group a slice, in the slices' order, and the CSV file
    the same rows."""
    import pyarrow.parquet as pq

    slices = [pd.DataFrame({"k": np.arange(k * 50, k * 50 + 50), "x": np.full(50, k / 8)})
              for k in range(7)]
    sink = TableSink({"csv": tmp_path / "t.csv", "parquet": tmp_path / "t.parquet"})
    for frame in slices:
        sink.write(frame)
    sink.close()
    whole = pd.concat(slices, ignore_index=True)
    assert pq.ParquetFile(tmp_path / "t.parquet").num_row_groups == len(slices)
    assert pd.read_parquet(tmp_path / "t.parquet").equals(whole)
    assert pd.read_csv(tmp_path / "t.csv").equals(whole)


@pytest.mark.parametrize("failing", [2, 3])
def test_a_row_group_that_cannot_be_written_names_the_parquet_file(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch, failing: int) -> None:
    """A row group's write fails (the second, or the last one): the table's write fails
    naming the Parquet file, not the CSV file written beside it."""
    import pyarrow.parquet as pq

    from sweeprig.errors import StoreError
    from sweeprig.report.table_writing import TableJob, write_job

    calls: list[int] = []
    real = pq.ParquetWriter.write_table

    def write_table(self, table, *args, **kwargs):
        calls.append(table.num_rows)
        if len(calls) == failing:
            raise OSError(28, "No space left on device")
        return real(self, table, *args, **kwargs)

    monkeypatch.setattr(pq.ParquetWriter, "write_table", write_table)
    frame = pd.DataFrame({"x": [1.0, 2.0], "y": ["a", "b"]})
    paths = {"csv": tmp_path / "t.csv", "parquet": tmp_path / "t.parquet"}
    with pytest.raises(StoreError) as raised:
        write_job(TableJob(paths, iter([frame] * 3)))
    assert raised.value.where == str(paths["parquet"])
    assert "No space left on device" in raised.value.what
