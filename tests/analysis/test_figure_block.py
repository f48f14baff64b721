"""The reduction's passes over figures held as columns (sweeprig.analysis.figure_block) give
what the same passes give over the figures one by one."""

from __future__ import annotations

from types import MappingProxyType

import numpy as np

from sweeprig.analysis.direction import (
    add_output_frequency_in_place,
    add_output_frequency_to_parts,
    name_in_trade_words,
    name_parts_in_trade_words,
)
from sweeprig.analysis.figure_block import (
    FigureBlock,
    Figures,
    flag_marked_parts,
    packed,
)
from sweeprig.analysis.figures import (
    SUPPLY_LIMITED,
    UNPOWERED,
    Figure,
    flag_marked_points,
)


def _figures() -> list[Figure]:
    # two analyses' figures of ten points (their conditions shared per point and analysis),
    # a fitted figure between them
    out: list[Figure] = []
    for name in ("lo_if_isolation", "spur_dbc"):
        for p in range(10):
            conditions = MappingProxyType({"study": "s", "lo_freq_hz": 1.0e9 + p,
                                           "rf_freq_hz": 1.1e9 + 2 * p})
            out.append(Figure(name, -30.0 - p, "dB", "<" if p == 3 else None, conditions,
                              ("overload",) if p == 4 else (), (p,)))
        out.append(Figure("iip3", 12.0, "dBm", points=tuple(range(10))))
    return out


def _as_blocks(figures: list[Figure]) -> list:
    parts = packed(figures, least=2)
    assert sum(isinstance(p, FigureBlock) for p in parts) == 2
    return parts


def test_flags_marked_on_blocks_are_those_marked_on_figures():
    figures = _figures()
    marks = [(UNPOWERED, [2, 5]), (SUPPLY_LIMITED, [5, 7, 99])]
    assert list(Figures(flag_marked_parts(_as_blocks(figures), marks))) == \
        flag_marked_points(figures, marks)
    assert list(Figures(flag_marked_parts(_as_blocks(figures), []))) == figures


def test_the_output_frequency_added_to_blocks_is_the_one_added_to_figures():
    figures = _figures()
    parts = add_output_frequency_to_parts(_as_blocks(figures), (1, -1))
    add_output_frequency_in_place(figures, (1, -1))
    made = list(Figures(parts))
    assert made == figures
    assert made[0].conditions["output_freq_hz"] == 1.0e8
    # one extended mapping per distinct mapping, shared as before
    assert made[0].conditions is made[0].conditions
    assert len({id(f.conditions) for f in made}) == len({id(f.conditions) for f in figures})


def test_blocks_take_the_trade_names_of_an_upconverter():
    figures = _figures()
    parts = name_parts_in_trade_words(_as_blocks(figures), "up")
    name_in_trade_words(figures, "up")
    assert list(Figures(parts)) == figures
    assert {f.name for f in figures} == {"lo_rf_isolation", "spur_dbc", "iip3"}
    assert name_parts_in_trade_words(_as_blocks(figures), "down")[0].name == "lo_rf_isolation"


def test_a_span_of_blocks_gives_its_point_numbers_where_asked():
    from sweeprig.analysis.figure_block import columns_between
    from sweeprig.report.tables import _points_texts

    figures = Figures(_as_blocks(_figures()))
    tuples = columns_between(figures, 0, 10)["points"]
    numbers = columns_between(figures, 0, 10, point_numbers=True)["points"]
    assert numbers.dtype == np.int64
    assert [(int(n),) for n in numbers] == list(tuples) == [(p,) for p in range(10)]
    assert _points_texts(numbers).tolist() == _points_texts(tuples).tolist() == \
        [str(p) for p in range(10)]
    # a span holding a plain figure (the fitted one): tuples throughout
    mixed = columns_between(figures, 5, 15, point_numbers=True)["points"]
    assert mixed.dtype == object and mixed[5] == tuple(range(10))
    assert _points_texts(mixed)[5] == " ".join(map(str, range(10)))
    assert columns_between(figures, 0, 10, point_numbers=True).keys() == \
        columns_between(figures, 0, 10).keys()


def test_figures_by_name_are_those_a_scan_finds():
    """The loose figures' rows by name are worked out once per part and read thereafter:
    every question gives what a scan of the figures gives."""
    import pytest

    figures = Figures(_as_blocks(_figures()))
    every = list(figures)
    for names in (["iip3"], ["spur_dbc"], ["iip3", "lo_if_isolation"], ["none"], []):
        positions, found = figures.named(names)
        assert positions == [i for i, f in enumerate(every) if f.name in names]
        assert found == [every[i] for i in positions]
        loose = [p for p in figures.parts if not isinstance(p, FigureBlock)]
        for part in loose:  # asked twice: the second from the part's index
            assert figures.loose_named(part, frozenset(names)) == \
                figures.loose_named(part, frozenset(names)) == \
                [i for i, f in enumerate(part) if f.name in names]
    with pytest.raises(ValueError):
        figures.loose_named(tuple(every[:1]), frozenset(["iip3"]))


def test_a_block_is_made_of_exactly_its_figures_conditions():
    """block_maker holds each figure's conditions mapping itself (no copy, a ConditionRow
    as well as a mapping proxy), and refuses conditions that do not count one a figure."""
    import pytest

    from sweeprig.analysis.captures import conditions_records
    from sweeprig.analysis.figure_block import BLOCK_MIN_FIGURES, block_maker

    count = BLOCK_MIN_FIGURES + 3
    table = {"study": np.array(["s"] * count, dtype=object),
             "temperature_c": np.linspace(-40.0, 85.0, count)}
    conditions = conditions_records(table, np.arange(count), ("study", "temperature_c"))
    make = block_maker()
    (block,) = make("lo_if_isolation", "dB", np.zeros(count), 0, 0, conditions,
                    [(p,) for p in range(count)])
    assert isinstance(block, FigureBlock)
    assert all(a is b for a, b in zip(block.conditions.tolist(), conditions, strict=True))
    with pytest.raises(ValueError, match="conditions"):
        make("lo_if_isolation", "dB", np.zeros(count), 0, 0, conditions[:-1],
             [(p,) for p in range(count)])
