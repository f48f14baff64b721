"""A run's conditions read as columns (ConditionColumn, RunConditions.column) give what
reading the mappings one by one gives: the summary's and the datasheet's groups
(held_groups), the distinct numbers of a key (condition_numbers), the nominal corner's
test (math.isclose), the plots' figure columns (figure_columns). Mappings are drawn with
the values that make such readings differ if done carelessly: ints beside equal floats, a
bool, zeros of both signs, NaN, infinities, None, text where numbers are, numbers too
large to be one float, keys missing."""

from __future__ import annotations

import math

import numpy as np
from hypothesis import example, given, settings
from hypothesis import strategies as st

from sweeprig.analysis.figure_block import Figures, block_of
from sweeprig.analysis.figure_groups import _close, held_groups
from sweeprig.analysis.figure_table import (
    ConditionColumn,
    RunConditions,
    condition_numbers,
    figure_columns,
)
from sweeprig.analysis.figures import Figure

NUMBERS = [25.0, -40.0, 85.0, 3.3, 3.0, 0.0]
TRICKY_NUMBERS = [25, 25.0, -40.0, 0.0, -0.0, math.nan, math.inf, -math.inf, True, 1, 1.0,
                  2 ** 53 + 1, float(2 ** 53), np.float64(3.3), 3.3]
TEXTS = ["band", "cold", ""]
ANYTHING = [*TRICKY_NUMBERS, *TEXTS, None, "25"]
KEYS = ("study", "temperature_c", "supply_v", "m")


@st.composite
def _mappings(draw) -> list[dict[str, object]]:
    """Mappings whose every key draws from one pool: numbers, tricky numbers, text, or
    anything (the first and third are read from columns, the others mostly not)."""
    pools = {key: draw(st.sampled_from([NUMBERS, TRICKY_NUMBERS, TEXTS, ANYTHING]))
             for key in KEYS}
    mapping = st.fixed_dictionaries({}, optional={key: st.sampled_from(pool)
                                                  for key, pool in pools.items()})
    return draw(st.lists(mapping, min_size=1, max_size=12))


def _figures(mappings: list[dict[str, object]], picks: list[int]) -> Figures:
    """Figures of two names over the mappings (each shared by several figures, as a
    point's are), some in a block, some loose."""
    made = [Figure("conversion_gain" if k % 3 else "noise_figure", float(k), "dB",
                   conditions=mappings[p % len(mappings)], points=(k,))
            for k, p in enumerate(picks)]
    half = len(made) // 2
    gains = [f for f in made[:half] if f.name == "conversion_gain"]
    rest = [f for f in made[:half] if f.name != "conversion_gain"] + made[half:]
    parts: list[object] = []
    if len(gains) >= 2:
        parts.append(block_of(gains))
    else:
        rest = gains + rest
    parts.append(tuple(rest))
    return Figures(parts)


def _groups_seen(groups) -> list[tuple]:
    return [(g.name, repr(g.key), g.positions.tolist(), [id(m) for m in g.mappings],
             g.mapping_of.tolist()) for g in groups]


@settings(max_examples=150, deadline=None)
@example(mappings=[{"study": ""}, {}], picks=[0, 1, 0, 1, 0, 1], by=("study",))
@example(mappings=[{"temperature_c": 0.0}, {"temperature_c": -0.0}, {"temperature_c": 25}],
         picks=[1, 0, 2, 0, 1, 2], by=("temperature_c",))
@example(mappings=[{"supply_v": 2 ** 53 + 1}, {"supply_v": float(2 ** 53)}], picks=[0, 1, 0, 1],
         by=("m", "supply_v"))
@example(mappings=[{"temperature_c": math.nan}, {"temperature_c": math.nan}, {}],
         picks=[0, 1, 2, 0, 1, 2], by=("temperature_c",))
@example(mappings=[{"temperature_c": math.inf}, {"temperature_c": 1e300},
                   {"temperature_c": 2.0 ** 53}], picks=[0, 1, 2, 1], by=("temperature_c",))
@example(mappings=[{"temperature_c": 25.0}, {"temperature_c": "band", "m": 1}],
         picks=[1, 0, 0, 0], by=("temperature_c",))  # text only beside another name
@given(mappings=_mappings(),
       picks=st.lists(st.integers(0, 11), min_size=1, max_size=30),
       by=st.sampled_from([("study",), ("study", "temperature_c", "supply_v"),
                           ("temperature_c",), ("m", "supply_v")]))
def test_groups_read_from_columns_are_the_groups_read_mapping_by_mapping(mappings, picks, by):
    figures = _figures(mappings, picks)
    conditions = RunConditions.of(figures)
    names = ["conversion_gain", "noise_figure"]
    fast = held_groups(figures, names, by, conditions=conditions)
    assert _groups_seen(fast) == _groups_seen(held_groups(figures, names, by))
    text = held_groups(figures, names, by, as_text=True, conditions=conditions)
    assert _groups_seen(text) == _groups_seen(held_groups(
        figures, names, key=lambda c: tuple(str(c.get(k, "")) for k in by)))
    for wanted in (names, names[:1], ["no_such_figure"]):
        positions, columns = figure_columns(figures, wanted, conditions=conditions)
        want_positions, want = figure_columns(figures, wanted)
        assert positions.tolist() == want_positions.tolist()
        assert list(columns) == list(want)
        for key, values in want.items():
            assert columns[key].dtype == values.dtype, key
            assert repr(columns[key].tolist()) == repr(values.tolist()), key
    for group in fast:
        everything = np.arange(len(group.mappings))
        some = everything[::2]
        for key in KEYS:
            for finite in (True, False):
                got = group.condition_numbers(key, finite=finite)
                want = condition_numbers(group.mappings, key, finite=finite)
                assert repr(got) == repr(want)
                got = group.condition_numbers(key, finite=finite, among=some)
                want = condition_numbers([group.mappings[j] for j in some], key,
                                         finite=finite)
                assert repr(got) == repr(want)
            assert group.holds(key) == any(key in c for c in group.mappings)
            for target in (25.0, 25.0 + 1e-8, 0.0, 1.0, math.inf, 1e300, 3.3, 2.0 ** 53):
                assert group.close_to(key, target, everything).tolist() == \
                    [_close(c.get(key), target) for c in group.mappings]


def test_a_column_holds_each_mappings_value_as_it_is():
    mappings = [{"t": 25}, {"t": "hot"}, {}, {"t": None}, {"t": True}, {"t": 2.5}]
    column = ConditionColumn.of(mappings, "t")
    assert column.present.tolist() == [True, True, False, True, True, True]
    assert column.number.tolist() == [True, False, False, False, True, True]
    assert column.text.tolist() == [False, True, False, False, False, False]
    assert np.array_equal(column.value, [25.0, math.nan, math.nan, math.nan, 1.0, 2.5],
                          equal_nan=True)
    assert column.texts.tolist() == [25, "hot", None, None, True, 2.5]
    every = np.arange(6)
    assert column.numbers(every) == [1.0, 2.5, 25.0]
    assert ConditionColumn.of([{"t": 0.0}, {"t": -0.0}], "t").numbers(np.arange(2)) is None
    assert ConditionColumn.of([{"t": math.nan}], "t").numbers(np.arange(1)) is None


def test_groups_need_the_conditions_of_the_same_figures():
    figures = _figures([{"study": "band"}], [0, 1, 2])
    other = RunConditions.of(_figures([{"study": "band"}], [0, 1]))
    try:
        held_groups(figures, ["conversion_gain"], ("study",), conditions=other)
    except ValueError as exc:
        assert "not those of these figures" in str(exc)
    else:
        raise AssertionError("conditions of other figures were taken")
