"""The table sink: whole-number columns (budget numbers, sweeps: pandas' nullable integers,
made so where they are made) written to Parquet as nullable integers and to CSV by polars
from their Arrow column, the same text as formatted here (the number, or an empty cell);
row groups in the slices' order; a failing row group names the Parquet file."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from pandas.testing import assert_frame_equal

from sweeprig.report import csv_table
from sweeprig.report.table_writing import TableSink


def _sink_text(folder: Path, frame: pd.DataFrame, integers: tuple[str, ...]) -> str:
    folder.mkdir()
    sink = TableSink({"csv": folder / "t.csv", "parquet": folder / "t.parquet"})
    sink.write(frame)
    sink.close()
    back = pd.read_parquet(folder / "t.parquet")
    for name in integers:
        assert str(back[name].dtype) == "Int64"
        assert back[name].equals(frame[name])
    return (folder / "t.csv").read_text(encoding="utf-8")


def test_whole_number_columns_written_by_polars_read_as_formatted_here(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    rows = 3 * csv_table.CHUNK_ROWS // 2
    rng = np.random.default_rng(7)
    numbers = rng.integers(-10**12, 10**12, rows)
    empty = np.arange(rows) % 3 != 0
    budget = pd.arrays.IntegerArray(np.where(empty, 0, numbers), empty)
    sweeps = pd.arrays.IntegerArray(np.zeros(rows, dtype=np.int64), np.ones(rows, dtype=bool))
    frame = pd.DataFrame({"value": rng.normal(size=rows), "budget": budget,
                          "averages": sweeps})
    integers = ("budget", "averages")
    written: list[bool] = []
    real = csv_table.arrow_csv_rows

    def spy(table, chunk, **options):
        rows = real(table, chunk, **options)
        written.append(rows is not None)
        return rows

    assert csv_table.polars_module() is not None  # (probed before the spy is in place)
    monkeypatch.setattr(csv_table, "arrow_csv_rows", spy)
    through_polars = _sink_text(tmp_path / "polars", frame, integers)
    assert written == [True, True]  # every chunk written by polars
    monkeypatch.setattr(csv_table, "_polars_chunk", lambda *a: None)  # every cell here
    here = _sink_text(tmp_path / "here", frame, integers)
    assert through_polars == here
    first = here.splitlines()[1].split(",")
    assert first[1] == str(numbers[0]) and first[2] == ""
    assert here.splitlines()[2].split(",")[1:] == ["", ""]


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


def test_only_few_valued_columns_get_a_dictionary_in_the_parquet_file(tmp_path: Path) -> None:
    """A column of few distinct values (in the first slice) is dictionary-encoded, one of
    values nearly all distinct is written plain; the values read back the same either way."""
    import pyarrow.parquet as pq

    rows = 4000
    rng = np.random.default_rng(11)
    frame = pd.DataFrame({
        "study": np.array(["gain", "two-tone"], dtype=object)[np.arange(rows) % 2],
        "temperature_c": np.array([-40.0, 25.0, 85.0])[np.arange(rows) % 3],
        "level_dbm": rng.normal(-30.0, 5.0, rows),
        "text": [f"{v:.6f} dB" for v in rng.normal(size=rows)],
        "nothing": [None] * rows,  # (Arrow's null type: no distinct values to count)
    })
    sink = TableSink({"parquet": tmp_path / "t.parquet"})
    sink.write(frame.iloc[:rows // 2])
    sink.write(frame.iloc[rows // 2:])
    sink.close()
    assert_frame_equal(pd.read_parquet(tmp_path / "t.parquet"), frame)
    meta = pq.ParquetFile(tmp_path / "t.parquet").metadata
    for group in range(meta.num_row_groups):
        encodings = {meta.row_group(group).column(i).path_in_schema:
                     meta.row_group(group).column(i).encodings for i in range(5)}
        dictionary = {name for name, used in encodings.items()
                      if any("DICTIONARY" in e for e in used)}
        assert dictionary == {"study", "temperature_c"}
