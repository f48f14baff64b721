"""Figures as columns: figure_table gives what the Figure objects hold, row by row."""

from __future__ import annotations

import math

import numpy as np
import pytest

from sweeprig.analysis.captures import has_bit
from sweeprig.analysis.figure_table import BASE_COLUMNS, figure_table
from sweeprig.analysis.figures import IN_NOISE, SLOPE_OFF, Figure


def _figures() -> list[Figure]:
    return [
        Figure("iip3", 12.5, "dBm", None, {"study": "two_tone", "temperature_c": 25.0},
               (SLOPE_OFF,), (3, 4), uncertainty_db=0.4),
        Figure("spur_dbc", -80.0, "dBc", "<", {"study": "spurs", "m": 2.0, "n": -1.0},
               (IN_NOISE,), (7,)),
        Figure("iip3", 11.0, "dBm", None, {"study": "two_tone", "temperature_c": 85.0},
               (), (5, 6), uncertainty_db=0.5),
    ]


def test_rows_are_the_figures_of_the_names_asked_for() -> None:
    table = figure_table(_figures(), ["iip3"])
    assert list(table.columns) == [*BASE_COLUMNS, "study", "temperature_c"]
    assert table.index.tolist() == [0, 2]  # positions in the sequence given
    assert table["value"].tolist() == [12.5, 11.0]
    assert table["uncertainty_db"].tolist() == [0.4, 0.5]
    assert table["points"].tolist() == [(3, 4), (5, 6)]
    assert has_bit(table["flags"].to_numpy(), SLOPE_OFF).tolist() == [True, False]
    assert table["temperature_c"].tolist() == [25.0, 85.0]


def test_all_figures_with_missing_conditions_and_bounds() -> None:
    table = figure_table(_figures())
    assert len(table) == 3
    assert table["bound"].tolist() == ["", "<", ""]
    assert table["study"].tolist() == ["two_tone", "spurs", "two_tone"]
    assert math.isnan(table.loc[1, "temperature_c"]) and table.loc[1, "m"] == 2.0
    assert math.isnan(table.loc[1, "uncertainty_db"])
    assert has_bit(table["flags"].to_numpy(), IN_NOISE).tolist() == [False, True, False]


def test_no_figure_of_those_names_is_an_empty_table() -> None:
    table = figure_table(_figures(), ["noise_figure"])
    assert table.empty and list(table.columns) == list(BASE_COLUMNS)
    assert table["value"].dtype == np.float64


def test_shared_conditions_are_read_once_and_spread_in_order() -> None:
    """Figures of one point share one conditions mapping: distinct_conditions gives each
    mapping once, in order of first appearance, with every figure's index into them, and
    figure_columns spreads the values back figure by figure (what figure_table holds)."""
    import dataclasses

    from sweeprig.analysis.figure_table import distinct_conditions, figure_columns

    first, second, third = _figures()
    shared = [first, dataclasses.replace(first, name="oip3"), second, third,
              dataclasses.replace(second, value=-75.0)]
    mappings, which = distinct_conditions(shared)
    assert [id(m) for m in mappings] == [id(first.conditions), id(second.conditions),
                                         id(third.conditions)]
    assert which.tolist() == [0, 0, 1, 2, 1]
    rows, columns = figure_columns(shared)
    table = figure_table(shared)
    assert rows.tolist() == table.index.tolist() == [0, 1, 2, 3, 4]
    assert list(columns) == list(table.columns)
    for key, column in columns.items():
        expected = table[key].tolist()
        got = column.tolist()
        assert [("nan" if isinstance(v, float) and math.isnan(v) else v) for v in got] == \
            [("nan" if isinstance(v, float) and math.isnan(v) else v) for v in expected], key
    assert columns["study"].tolist() == ["two_tone", "two_tone", "spurs", "two_tone", "spurs"]
    assert distinct_conditions([])[1].size == 0


def _same_arrays(ours: dict[str, np.ndarray], reference: dict[str, np.ndarray]) -> None:
    assert list(ours) == list(reference)  # the keys in order of first appearance
    for key, column in reference.items():
        assert ours[key].dtype == column.dtype, key
        if column.dtype == object:
            assert ours[key].tolist() == column.tolist(), key
        else:  # bit for bit, NaN where missing
            assert ours[key].view(np.uint64).tolist() == column.view(np.uint64).tolist(), key


@pytest.mark.parametrize("chunk", [16_384, 7, 1], ids=["one-chunk", "chunks-of-7", "each"])
def test_condition_columns_read_per_key_order_are_those_read_key_by_key(
        chunk: int, monkeypatch: pytest.MonkeyPatch) -> None:
    """condition_arrays (per distinct key order, a key at a time, a chunk of mappings at a
    time) gives what the key-by-key reading gives: mappings of several key orders, a
    key in some of them only, explicit None, ints and bools as floats, a key with text in
    one mapping only (met in a later chunk than its numbers), a study that is not text, an
    empty mapping."""
    from types import MappingProxyType

    from sweeprig.analysis import figure_table
    from sweeprig.analysis.figure_table import condition_arrays, condition_arrays_by_key

    monkeypatch.setattr(figure_table, "CONDITION_CHUNK", chunk)

    rng = np.random.default_rng(7)
    mappings: list[dict[str, object]] = []
    for i in range(3000):
        kind = i % 7
        if kind == 0:
            mappings.append({"study": "gain", "temperature_c": float(rng.choice([-40, 25])),
                             "rf_freq_hz": float(rng.uniform(1e9, 3e9))})
        elif kind == 1:
            mappings.append({"rf_freq_hz": 2.4e9, "study": "gain", "temperature_c": 85})
        elif kind == 2:
            mappings.append({"study": "spurs", "m": int(rng.integers(-3, 4)), "n": -1,
                             "in_band": bool(i % 2), "freq_hz": None})
        elif kind == 3:
            mappings.append({"study": 7, "sideband": "ssb" if i % 5 else 1.0})
        elif kind == 4:
            mappings.append({})
        elif kind == 5:
            mappings.append({"temperature_c": np.float64(-0.0), "supply_v": 3.3})
        else:
            mappings.append({"lo_power_dbm": math.nan, "study": "lo", "sideband": None,
                             "band": 2 if i < 2990 else "L"})
    proxies = [MappingProxyType(m) for m in mappings]
    _same_arrays(condition_arrays(proxies), condition_arrays_by_key(proxies))
    one_order = proxies[::7]  # (every chunk one group)
    _same_arrays(condition_arrays(one_order), condition_arrays_by_key(one_order))
    _same_arrays(condition_arrays([]), condition_arrays_by_key([]))
    _same_arrays(condition_arrays([{}]), condition_arrays_by_key([{}]))



def test_condition_numbers_are_the_distinct_numbers_of_a_key_ascending() -> None:
    from types import MappingProxyType

    from sweeprig.analysis.figure_table import condition_numbers

    mappings = [MappingProxyType(m) for m in (
        {"rf_freq_hz": 2.4e9, "study": "gain"}, {"rf_freq_hz": 1.9e9}, {"rf_freq_hz": 2.4e9},
        {"rf_freq_hz": 2}, {"rf_freq_hz": "2.1 GHz"}, {"rf_freq_hz": math.nan},
        {"rf_freq_hz": math.inf}, {"study": "band"}, {"rf_freq_hz": None})]
    # the same as judging every mapping one by one
    by_hand = sorted({float(v) for c in mappings if isinstance(v := c.get("rf_freq_hz"),
                                                             int | float)
                      and math.isfinite(float(v))})
    assert condition_numbers(mappings, "rf_freq_hz") == by_hand == [2.0, 1.9e9, 2.4e9]
    every = condition_numbers(mappings, "rf_freq_hz", finite=False)  # (NaN sorts nowhere)
    assert [v for v in every if not math.isnan(v)] == [2.0, 1.9e9, 2.4e9, math.inf]
    assert len(every) == 5 and sum(map(math.isnan, every)) == 1
    assert condition_numbers(mappings, "study") == []
    assert condition_numbers([], "rf_freq_hz") == []


def _same_conditions(ours, reference) -> None:
    """Two :class:`RunConditions` the same: mappings (by identity), which, every array and
    every column, bit for bit."""
    assert [id(m) for m in ours.mappings] == [id(m) for m in reference.mappings]
    assert ours.which.tolist() == reference.which.tolist()
    _same_arrays(ours.arrays, reference.arrays)
    assert list(ours.columns) == list(reference.columns)
    for key, theirs in reference.columns.items():
        mine = ours.columns[key]
        for part in ("present", "number", "value", "text"):
            a, b = getattr(mine, part), getattr(theirs, part)
            assert a.dtype == b.dtype and a.tobytes() == b.tobytes(), (key, part)
        assert (mine.texts is None) == (theirs.texts is None), key
        if theirs.texts is not None:
            assert mine.texts.tolist() == theirs.texts.tolist(), key


def test_conditions_read_back_from_what_made_them_are_those_read_from_the_mappings() -> None:
    """RunConditions.of with what conditions_records made (noted) reads those mappings from
    the columns they were made of: the same as reading every mapping, for columns of every
    kind (floats with gaps, ints, bools, texts with gaps, numbers as objects, objects mixing
    numbers with other kinds, a key text in some rows only, a categorical), rows made but
    held by no figure, mappings made elsewhere among them (one giving a number key a text),
    shared and empty ones."""
    from decimal import Decimal
    from types import MappingProxyType, SimpleNamespace

    import pandas as pd

    from sweeprig.analysis.captures import conditions_noted, conditions_records
    from sweeprig.analysis.figure_table import RunConditions

    rng = np.random.default_rng(11)
    rows = 400
    table = pd.DataFrame({
        "study": rng.choice(["gain", "spurs", "two-tone"], rows).astype(object),
        "temperature_c": rng.choice([-40.0, 25.0, -0.0, 0.0, math.nan], rows),
        "m": rng.integers(-3, 4, rows),
        "in_band": rng.integers(0, 2, rows).astype(bool),
        "label": np.where(rng.random(rows) < 0.3, None,
                          rng.choice(["L", "H"], rows)).astype(object),
        "mixed": np.array([[1.5, 2, None, Decimal("0.5"), True][i % 5] for i in range(rows)],
                          dtype=object),
        "side": np.array(["usb" if i % 9 == 0 else float(i) for i in range(rows)],
                         dtype=object),
        "corner": pd.Categorical(rng.choice(["typ", "slow"], rows)),
        "offset_hz": np.array([[2.5e6, None, 7, -0.0][i % 4] for i in range(rows)],
                              dtype=object),
        "rf_freq_hz": rng.uniform(1e9, 3e9, rows),
        "unused": np.full(rows, math.nan),
    })
    keys = ["study", "temperature_c", "m", "in_band", "label", "mixed", "side", "corner",
            "offset_hz", "rf_freq_hz", "unused"]
    with conditions_noted() as made:
        whole = conditions_records(table, np.arange(rows), keys)
        some = conditions_records(table, np.arange(0, rows, 3), keys[:4])
        conditions_records(table, np.arange(5), keys)  # made, held by no figure
        nothing = conditions_records(table, np.arange(0), keys)
    assert len(made) == 4 and made[0].mappings is whole and not nothing
    assert conditions_records(table, np.arange(3), keys) and len(made) == 4  # (outside)
    elsewhere = [MappingProxyType({"study": "lo", "temperature_c": "hot"}),
                 MappingProxyType({}), MappingProxyType({"extra": 3, "m": 1.0})]
    held = [*whole[::2], *some, *elsewhere, *whole[1::2], whole[0], elsewhere[0]]
    figures = [SimpleNamespace(conditions=c) for c in held]
    reference = RunConditions.of(figures)  # type: ignore[arg-type]
    assert "temperature_c" in reference.arrays and reference.columns["side"].text.any()
    _same_conditions(RunConditions.of(figures, made), reference)  # type: ignore[arg-type]
    # no mapping made elsewhere; none of them made (every one read from itself)
    plain = figures[:len(whole) // 2]
    _same_conditions(RunConditions.of(plain, made), RunConditions.of(plain))  # type: ignore[arg-type]
    loose = [SimpleNamespace(conditions=c) for c in elsewhere]
    _same_conditions(RunConditions.of(loose, made), RunConditions.of(loose))  # type: ignore[arg-type]


def test_object_ids_are_each_objects_id() -> None:
    """object_ids reads an object array's ids from its buffer (CPython): the ids ``id``
    gives, for a contiguous array, a strided view of one, a list, and none."""
    from types import MappingProxyType

    from sweeprig.analysis.figure_table import object_ids

    shared = [MappingProxyType({"k": i}) for i in range(5)]
    column = np.empty(12, dtype=object)
    column[:] = [shared[i % 5] for i in range(9)] + ["text", 3.5, None]
    for objects in (column, column[::2], column[3:7], list(column), column[:0], []):
        assert object_ids(objects).tolist() == [id(o) for o in objects]
        assert object_ids(objects).dtype == np.uint64
