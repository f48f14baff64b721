"""The column-wise CSV writer writes what ``DataFrame.to_csv(index=False)`` writes."""

from __future__ import annotations

import io
import math
import tempfile
from pathlib import Path

import hypothesis.strategies as st
import numpy as np
import pandas as pd
from hypothesis import HealthCheck, given, settings

from sweeprig.report.csv_table import (
    _arrow_table,
    arrow_csv_text,
    polars_module,
    write_frame_csv,
    write_frame_rows,
)


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



# -- polars' writer: the same text ------------------------------------------------------------

_TEXTS = st.one_of(st.none(), st.sampled_from(["", "a,b", 'q"q', "l\nb", " sp", "ü", "x"]),
                   st.text(alphabet=st.characters(codec="utf-8", exclude_categories=["Cs"]),
                           max_size=6))
_FLOATS = st.one_of(st.floats(allow_nan=True, allow_infinity=True),
                    st.sampled_from([0.0, -0.0, 1e-4, 9.999999999999999e-05, 2.5e-05, 1e16,
                                     9999999999999998.0, 1e15, 2.4e9, -27.283395]))


@st.composite
def _frames(draw: st.DrawFn) -> pd.DataFrame:
    rows = draw(st.integers(1, 12))
    kinds = draw(st.lists(st.sampled_from(["float", "int", "bool", "text", "str", "string",
                                           "category", "ints_or_none"]), min_size=1, max_size=5))
    columns: dict[str, object] = {}
    for i, kind in enumerate(kinds):
        if kind == "float":
            cells: object = np.array(draw(st.lists(_FLOATS, min_size=rows, max_size=rows)))
        elif kind == "int":
            cells = np.array(draw(st.lists(st.integers(-2**63, 2**63 - 1), min_size=rows,
                                           max_size=rows)), dtype=np.int64)
        elif kind == "bool":
            cells = np.array(draw(st.lists(st.booleans(), min_size=rows, max_size=rows)))
        elif kind == "text":
            cells = pd.Series(draw(st.lists(_TEXTS, min_size=rows, max_size=rows)),
                              dtype=object)
        elif kind == "str":  # texts as pandas infers them (its own string type from 3.0)
            cells = pd.Series(draw(st.lists(_TEXTS, min_size=rows, max_size=rows)))
        elif kind == "string":  # pandas' nullable string type
            cells = pd.Series(draw(st.lists(_TEXTS, min_size=rows, max_size=rows)),
                              dtype="string")
        elif kind == "category":
            cells = pd.Categorical(draw(st.lists(_TEXTS, min_size=rows, max_size=rows)))
        else:
            cells = pd.Series(draw(st.lists(st.one_of(st.none(), st.integers(-10, 10**20)),
                                            min_size=rows, max_size=rows)), dtype=object)
        columns[f"{kind}{i}"] = cells
    return pd.DataFrame(columns)


def _text(frame: pd.DataFrame, *, fast: bool, chunk_rows: int, into_file: bool = False
          ) -> str:
    """The CSV text written into memory, or (``into_file``) into a file, whose bytes
    polars writes straight into its binary buffer between the texts written here."""
    options = {"header": True, "chunk_rows": chunk_rows,
               "polars_from_rows": 0 if fast else None}
    if not into_file:
        out = io.StringIO()
        write_frame_rows(out, frame, **options)
        return out.getvalue()
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "t.csv"
        with path.open("w", encoding="utf-8", newline="") as file:
            write_frame_rows(file, frame, **options)
        return path.read_bytes().decode("utf-8")


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(frame=_frames(), chunk_rows=st.integers(1, 8))
def test_polars_writes_the_same_text(frame: pd.DataFrame, chunk_rows: int) -> None:
    """Whatever polars is given is written as the cells formatted here are: floats of every
    magnitude (exponent form below 1e-4 and from 1e16), ±0, NaN, ±inf; texts with commas,
    quotes, line breaks, lone carriage returns, empty or missing; categories; whole numbers
    with empty cells; one column or several."""
    reference = _text(frame, fast=False, chunk_rows=chunk_rows)
    assert _text(frame, fast=True, chunk_rows=chunk_rows) == reference
    assert _text(frame, fast=True, chunk_rows=chunk_rows, into_file=True) == reference


def _polars_text(frame: pd.DataFrame) -> str | None:
    return arrow_csv_text(_arrow_table(frame), frame)


def test_the_test_environment_writes_through_polars() -> None:
    """The ``test`` extra installs polars and pyarrow, so the comparison above runs both
    writers, and a plain table is written by polars (not quietly formatted here)."""
    assert polars_module() is not None
    frame = pd.DataFrame({"x": [1.5, math.nan, 2.4e9], "s": ["a", "", None],
                          "k": pd.Categorical(["if", "rf", None]), "b": [True, False, True],
                          "n": np.arange(3)})
    assert _polars_text(frame) == "1.5,a,if,True,0\n,,rf,False,1\n2400000000.0,,,True,2\n"
    assert _polars_text(frame.assign(x=[2.5e-05, 1.0, 1e16])) == \
        "2.5e-05,a,if,True,0\n1.0,,rf,False,1\n1e+16,,,True,2\n"
    assert _polars_text(frame.assign(s=["cr\ronly", "", None])) is None
    assert _polars_text(frame[["x"]]) is None
    import pyarrow as pa

    # an Arrow table holding NaN itself (not as a missing cell) writes it as pandas does
    table = pa.table({"x": pa.array([1.0, math.nan], from_pandas=False), "n": [1, 2]})
    assert arrow_csv_text(table, table.to_pandas()) == "1.0,1\n,2\n"


def test_only_a_large_frame_is_written_through_polars(monkeypatch) -> None:
    """A frame below ``POLARS_FROM_ROWS`` rows is formatted here (the report's small tables
    never import polars); one of that many rows goes through polars."""
    from sweeprig.report import csv_table

    seen: list[tuple[int, bool]] = []
    real = csv_table.arrow_csv_rows

    def spy(table, chunk):
        rows = real(table, chunk)
        seen.append((len(chunk), rows is not None))  # (True: polars wrote it)
        return rows

    monkeypatch.setattr(csv_table, "arrow_csv_rows", spy)
    rows = csv_table.POLARS_FROM_ROWS
    frame = pd.DataFrame({"x": np.arange(rows, dtype=float), "n": np.arange(rows)})
    write_frame_rows(io.StringIO(), frame.iloc[:-1], header=True)
    assert seen == []
    write_frame_rows(io.StringIO(), frame, header=True, chunk_rows=rows // 2)
    assert seen == [(rows // 2, True), (rows // 2, True)]


def test_a_polars_that_writes_otherwise_is_not_used(monkeypatch) -> None:
    """polars is used only after it wrote a probe of every kind of cell as Python does: a
    version that formats otherwise (here: one cell changed), or fails, leaves every table
    to Python."""
    from sweeprig.report import csv_table

    real = csv_table.arrow_csv_text
    try:
        for fake in (lambda *a, **k: real(*a, **k).replace("0.30000000000000004", "0.3"),
                     lambda *a, **k: 1 / 0):
            csv_table.polars_module.cache_clear()
            monkeypatch.setattr(csv_table, "arrow_csv_text", fake)
            assert csv_table.polars_module() is None
        csv_table.polars_module.cache_clear()
        monkeypatch.setattr(csv_table, "arrow_csv_text", real)
        assert csv_table.polars_module() is not None
    finally:  # (the real polars probed again, for the tests after this one)
        monkeypatch.setattr(csv_table, "arrow_csv_text", real)
        csv_table.polars_module.cache_clear()
        csv_table.polars_module()


def test_a_chunk_polars_fails_on_is_formatted_here(monkeypatch) -> None:
    """polars failing on one chunk of a table (a type its probe did not hold) does not stop
    the table: that chunk is formatted here, the text the same."""
    from sweeprig.report import csv_table

    frame = pd.DataFrame({"x": np.arange(6, dtype=float) / 3, "s": list("abcdef")})
    reference = _text(frame, fast=False, chunk_rows=2)
    real = csv_table.arrow_csv_rows
    calls: list[int] = []

    def flaky(table, chunk):
        calls.append(len(chunk))
        if len(calls) % 3 == 2:
            raise RuntimeError("a type polars cannot write")
        return real(table, chunk)

    monkeypatch.setattr(csv_table, "arrow_csv_rows", flaky)
    assert _text(frame, fast=True, chunk_rows=2) == reference
    assert calls == [2, 2, 2]
    # into a file: polars' bytes and the text formatted here, in the rows' order
    assert _text(frame, fast=True, chunk_rows=2, into_file=True) == reference
    assert calls == [2, 2, 2] * 2
