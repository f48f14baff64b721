"""Parquet is the optional ``parquet`` extra (pyarrow): without it a report writes its tables
as CSV only, and an asked-for Parquet file is refused with a message naming the extra."""

from __future__ import annotations

from pathlib import Path

import pytest

from sweeprig import parquet
from sweeprig.errors import InputError
from sweeprig.report.tables import write_tables


def test_with_pyarrow_a_report_writes_csv_and_parquet(report_run, tmp_path: Path) -> None:
    written = write_tables(report_run, tmp_path)
    assert sorted(p.suffix for p in written) == [".csv", ".csv", ".parquet", ".parquet"]


def test_without_pyarrow_a_report_writes_csv_only(report_run, tmp_path: Path,
                                                  monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(parquet, "parquet_available", lambda: False)
    written = write_tables(report_run, tmp_path)
    assert sorted(p.name for p in written) == ["captures.csv", "figures.csv"]


def test_without_pyarrow_an_asked_for_parquet_file_names_the_extra(
        report_run, tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(parquet, "parquet_available", lambda: False)
    with pytest.raises(InputError) as err:
        write_tables(report_run, tmp_path, formats=("parquet",))
    assert "pyarrow" in err.value.what
    assert "sweeprig[parquet]" in (err.value.fix or "")
    assert list(tmp_path.iterdir()) == []
