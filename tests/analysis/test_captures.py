"""Capture-table checks and the per-point view."""

import hypothesis.strategies as st
import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings

from sweeprig.analysis import compression_figures
from sweeprig.analysis.captures import (
    CONDITION_COLUMNS,
    column_arrays,
    has_bit,
    point_levels,
    point_table,
)
from sweeprig.analysis.figures import ANALYZER_DISTORTION, IN_NOISE, MISSING_READING, OVERLOAD
from sweeprig.analysis.synthetic import points_frame, reading_rows
from sweeprig.errors import InputError


def _captures() -> pd.DataFrame:
    pts = points_frame(3, rf_power_dbm=[-30.0, -20.0, -10.0])
    return pd.concat(
        [
            reading_rows(pts, "if", [-24.0, -14.0, -4.0], noise_floor_dbm=-100.0),
            reading_rows(pts.iloc[:2], "im3_low", [-97.0, -60.0], noise_floor_dbm=-100.0,
                         overload=[False, True]),
            reading_rows(pts.iloc[1:2], "im3_low", [-80.0], atten_check=True),
            reading_rows(pts.iloc[1:2], "if", [-14.05], atten_check=True),
        ],
        ignore_index=True,
    )


def test_point_table_columns_and_flags():
    table = point_table(_captures(), ("im3_low",))
    assert table["point"].tolist() == [0, 1, 2]
    assert table["if_level_dbm"].tolist() == [-24.0, -14.0, -4.0]
    flags = table["im3_low_flags"].to_numpy()
    assert has_bit(flags, IN_NOISE).tolist() == [True, False, False]
    assert has_bit(flags, OVERLOAD).tolist() == [False, True, False]
    assert has_bit(flags, ANALYZER_DISTORTION).tolist() == [False, True, False]
    assert has_bit(flags, MISSING_READING).tolist() == [False, False, True]
    assert table["im3_low_atten_level_dbm"].iloc[1] == -80.0


def test_later_duplicate_reading_wins():
    df = _captures()
    extra = df[(df["reading"] == "if") & (df["point"] == 0)].assign(level_dbm=-25.0)
    table = point_table(pd.concat([df, extra], ignore_index=True))
    assert table["if_level_dbm"].iloc[0] == -25.0


def assert_point_levels_match(captures: pd.DataFrame, names: tuple[str, ...],
                              studies: list[str]) -> None:
    """point_levels against point_table: the same rows (those with any of ``names``),
    conditions, presence and levels."""
    whole = point_table(captures, names, study=studies)
    narrow = point_levels(captures, names, study=studies)
    any_reading = np.zeros(len(whole), dtype=bool)
    for name in names:
        any_reading |= whole[f"{name}_present"].to_numpy()
    whole = whole[any_reading].reset_index(drop=True)
    assert len(narrow) == len(whole) > 0
    assert narrow["point"].tolist() == whole["point"].tolist()
    assert narrow["study"].tolist() == whole["study"].tolist()
    for col in [*CONDITION_COLUMNS, *(f"{n}_{w}" for n in names
                                      for w in ("present", "level_dbm"))]:
        np.testing.assert_array_equal(narrow[col].to_numpy(), whole[col].to_numpy(),
                                      err_msg=col)


def test_point_levels_are_the_point_table_s_levels():
    """The narrow per-point levels a plot of every point takes: the attenuation repeats
    left out and a later duplicate winning, as in point_table."""
    df = _captures()
    extra = df[(df["reading"] == "im3_low") & (df["point"] == 0)].assign(level_dbm=-91.0)
    both = pd.concat([df, extra], ignore_index=True)
    assert_point_levels_match(both, ("if", "im3_low", "im3_high"), ["demo"])
    assert point_levels(both, ("im3_low",), study=["demo"])[
        "im3_low_level_dbm"].tolist() == [-91.0, -60.0]


def test_aliases_and_optional_columns():
    df = _captures().rename(columns={"point": "point_index", "reading": "reading_name"})
    df = df.drop(columns=["overload", "noise_floor_dbm", "rf2_freq_hz", "m", "n"])
    cols = column_arrays(df)
    assert not cols["overload"].any()
    assert np.isnan(cols["noise_floor_dbm"]).all()


def test_bad_tables_raise_input_errors():
    with pytest.raises(InputError, match="no column 'level_dbm'"):
        compression_figures(_captures().drop(columns=["level_dbm"]))
    with pytest.raises(InputError, match="not numbers"):
        compression_figures(_captures().assign(rf_power_dbm="-10 dBm"))
    with pytest.raises(InputError, match="DataFrame"):
        compression_figures([1, 2, 3])  # type: ignore[arg-type]
    assert compression_figures(_captures(), study="no such study") == []


def test_a_point_table_converts_few_columns_whole_and_reads_the_same() -> None:
    """point_table of a capture table reads its columns through CaptureColumns: the checks
    at once, a column converted when asked (kept: ``[]``, not kept: ``unkept``); the table
    the same as one made of every column converted first (column_arrays)."""
    from sweeprig.analysis.captures import CaptureColumns

    df = pd.concat([_captures(), _captures().assign(study="other", point=lambda d: d.point + 9)],
                   ignore_index=True)
    df["risks"] = np.where(df["reading"] == "im3_low", "noise", None)
    for study in (None, "other", ["other", str(_captures()["study"].iloc[0])]):
        ours = point_table(df, ("if", "im3_low"), study=study)
        every = point_table(column_arrays(df, study=study), ("if", "im3_low"))
        pd.testing.assert_frame_equal(ours, every)
        assert len(ours) == (6 if study is None or isinstance(study, list) else 3)
    columns = CaptureColumns(df, study="other")
    assert list(columns._kept) == ["point"] and "rbw_hz" in columns and "nothing" not in columns
    level = columns.unkept("level_dbm")
    assert list(columns._kept) == ["point"] and level.size == 7
    assert columns["freq_hz"] is columns["freq_hz"] and "freq_hz" in columns._kept
    assert dict(columns).keys() == column_arrays(df).keys()
    with pytest.raises(KeyError):
        columns.unkept("nothing")


def test_point_codes_and_text_codes_read_without_a_python_object_a_row() -> None:
    """A point table's per-row point codes: in one pass when the rows are in point order
    (as a loaded capture table's are), the same as the sorted factorization of any order;
    a text column's codes taken from the table's own: the same as factorizing its values."""
    from sweeprig.analysis.captures import CaptureColumns, _point_codes, factorized, last_rows

    rng = np.random.default_rng(5)
    for points in (np.sort(rng.integers(0, 40, 300)), rng.integers(0, 40, 300),
                   np.array([3, 3, 7]), np.array([7, 3, 3]), np.zeros(0, dtype=np.int64)):
        codes, uniques = pd.factorize(points, sort=True)
        _, first = np.unique(codes, return_index=True)
        ours = _point_codes(points)
        for got, expected in zip(ours, (codes, uniques, first), strict=True):
            assert np.array_equal(got, expected)
        distinct, first_reversed = np.unique(points[::-1], return_index=True)
        got_distinct, got_last = last_rows(points)
        assert np.array_equal(got_distinct, distinct)
        assert np.array_equal(got_last, points.size - 1 - first_reversed)
    df = _captures()
    df["port"] = pd.Categorical(np.where(np.arange(len(df)) % 3 == 0, "rf", None))
    for study in (None, str(df["study"].iloc[0])):
        columns = CaptureColumns(df, study=study)
        for col in ("reading", "port", "study", "risks"):
            codes, uniques = factorized(columns, col)
            expected = pd.factorize(pd.Series(column_arrays(df, study=study)[col],
                                              dtype=object))
            assert np.array_equal(codes, expected[0]) and list(uniques) == list(expected[1])
        assert "reading" not in columns._kept and "port" not in columns._kept


def test_the_output_frequency_column_is_read_as_numbers() -> None:
    """``output_freq_hz`` (a loaded run's captures hold it) is a number column like the
    other frequencies: read as floats, and text there refused naming it."""
    df = _captures()
    df["output_freq_hz"] = np.linspace(100e6, 200e6, len(df))
    cols = column_arrays(df, study=str(df["study"].iloc[0]))
    assert cols["output_freq_hz"].dtype == np.float64
    assert np.array_equal(cols["output_freq_hz"],
                          df.loc[df["study"] == df["study"].iloc[0], "output_freq_hz"])
    with pytest.raises(InputError, match=r"'output_freq_hz' holds .* values, not numbers"):
        column_arrays(df.assign(output_freq_hz="100 MHz"))


def test_own_column_name_wins_over_an_alias():
    df = _captures().assign(name="something else")
    assert point_table(df)["if_present"].all()


def test_condition_mappings_equal_the_plain_reading_and_hold_no_values_of_their_own() -> None:
    """conditions_records gives the mappings a plain ``tolist`` reading gives (the same
    keys in order, values of the same type and bits: -0.0 stays -0.0, NaN left out); each
    mapping is a row of columns shared by the call's rows (48 bytes, not a dict of its
    own), few distinct floats (bit for bit) and texts held as codes."""
    import copy
    import math
    import pickle
    import sys

    from sweeprig.analysis.captures import conditions_records
    from sweeprig.analysis.condition_rows import ConditionRow
    from sweeprig.analysis.figures import read_only_conditions

    rng = np.random.default_rng(3)
    rows = 500
    table = {
        "study": np.array(["gain", "spurs"] * (rows // 2), dtype=object),
        "temperature_c": rng.choice([-40.0, 25.0, 85.0], rows),
        "supply_v": np.where(np.arange(rows) % 3 == 0, 0.0, -0.0),  # signed zeros
        "rf_freq_hz": rng.uniform(1e9, 3e9, rows),  # mostly distinct: not coded
        "lo_power_dbm": np.where(np.arange(rows) % 5 == 0, np.nan, 3.0),  # some missing
        "in_band": np.arange(rows) % 2 == 0,  # booleans stay booleans
    }
    keys = tuple(table)
    ours = conditions_records(table, np.arange(rows), keys)
    for row, mapping in enumerate(ours):
        plain = {k: table[k][row].item() if k != "study" else table[k][row] for k in keys}
        plain = {k: v for k, v in plain.items() if v == v}
        assert list(mapping) == list(plain) and len(mapping) == len(plain)
        for key, value in plain.items():
            assert type(mapping[key]) is type(value) and type(mapping.get(key)) is type(value)
            if isinstance(value, float):
                assert math.copysign(1.0, mapping[key]) == math.copysign(1.0, value)
            assert mapping[key] == value and key in mapping
        assert mapping == plain and plain == mapping and dict(mapping) == plain
        assert "nothing" not in mapping and mapping.get("nothing", 7) == 7
        assert type(mapping) is ConditionRow and sys.getsizeof(mapping) <= 64
        again = copy.deepcopy(mapping)  # a copy holds its own values
        assert again == mapping and pickle.loads(pickle.dumps(mapping)) == mapping
        assert len(pickle.dumps(mapping)) < 300
    assert ours[0] != ours[1] and ours[0] != {**ours[0], "study": "other"}
    kept = read_only_conditions(ours)  # a figure made of them shares them, no copy
    assert all(k is m for k, m in zip(kept, ours, strict=True))
    try:
        hash(ours[0])
    except TypeError:
        pass
    else:
        raise AssertionError("a conditions mapping is unhashable, as a dict")
    shared = {id(m._columns) for m in ours}  # the rows missing lo_power_dbm, and the rest
    assert len(shared) == 2
    held = dict(zip(ours[1]._columns.names, ours[1]._columns._at.values(), strict=True))
    assert held["temperature_c"][0].size == 3 and held["temperature_c"][1].itemsize == 1
    assert held["supply_v"][0].size == 2 and held["study"][0].size == 2
    assert held["rf_freq_hz"][1] is None


@settings(max_examples=150, deadline=None)
@given(data=st.data(), rows=st.integers(0, 40))
def test_condition_mappings_of_rows_missing_different_keys(data: st.DataObject,
                                                           rows: int) -> None:
    """Rows that lack different keys (a two-tone point beside single-tone ones, a missing
    supply) each get the keys they hold, in the table's order, as a row-by-row reading
    gives them; a key no row holds is left out of every mapping."""
    from sweeprig.analysis.captures import conditions_records

    number = st.one_of(st.just(np.nan), st.sampled_from([-40.0, 25.0, 0.0, -0.0, 2.4e9]))
    table = {
        "study": np.array(data.draw(st.lists(st.sampled_from(["gain", "spurs", None]),
                                             min_size=rows, max_size=rows)), dtype=object),
        **{key: np.array(data.draw(st.lists(number, min_size=rows, max_size=rows)),
                         dtype=float)
           for key in ("temperature_c", "supply_v", "rf2_freq_hz", "lo_power_dbm")},
    }
    keys = tuple(table)
    picked = np.array(data.draw(st.lists(st.integers(0, max(rows - 1, 0)), max_size=rows)),
                      dtype=np.int64) if rows else np.zeros(0, dtype=np.int64)
    ours = conditions_records(table, picked, keys)
    held = [k for k in keys if not all(v is None or v != v for v in table[k][picked])] \
        if picked.size else list(keys)
    expected = [{k: table[k][r] for k in held
                 if table[k][r] is not None and table[k][r] == table[k][r]}
                for r in picked.tolist()]
    assert [list(m.items()) for m in ours] == [list(e.items()) for e in expected]


def test_shared_point_tables_are_made_once_per_capture_table_readings_and_study(
        monkeypatch) -> None:
    """Within ``point_tables_shared`` a table it names asked again of the same capture
    table (the same object), readings and study is given again: equal to a new one, a copy
    its user may change; another capture table, other readings or another study, a table it
    does not name, or outside the block: made anew (and not kept)."""
    from sweeprig.analysis import captures as module

    made: list[tuple[str, ...]] = []
    real = module._point_table

    def counted(table, readings, **options):
        made.append(tuple(readings))
        return real(table, readings, **options)

    monkeypatch.setattr(module, "_point_table", counted)
    captures = _captures()
    fresh = point_table(captures, ("im3_low",))
    assert len(made) == 1
    with module.point_tables_shared((("im3_low",), None), (("if",), ["gain", "x"])):
        first = point_table(captures, ("im3_low",), where="one analysis")
        first["added"] = 1.0  # (a user's own column)
        again = point_table(captures, ["im3_low"], where="another")
        assert len(made) == 2
        pd.testing.assert_frame_equal(again, fresh)
        point_table(captures, ("if",))  # not named: made each time
        point_table(captures, ("if",))
        point_table(captures, ("im3_low",), study="gain")
        point_table(captures.copy(), ("im3_low",))
        assert len(made) == 6
        point_table(captures, ("if",), study=("gain", "x"))
        point_table(captures, ("if",), study=["gain", "x"])
        assert len(made) == 7
        held = module._SHARED_POINT_TABLES.get()
        assert held is not None and sum(t is not None for t in held.values()) == 2
    point_table(captures, ("im3_low",))
    assert len(made) == 8
