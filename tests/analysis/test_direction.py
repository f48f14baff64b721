"""Figures in the trade's words per conversion direction (``sweeprig.analysis.direction``).

The trade's words (Pozar, *Microwave Engineering*, mixer chapter; the field notes' frequency
plan): an upconverter's input is its IF and its output its RF, so the LO leaking at its output
is LO→RF isolation; the wanted output of a low-side upconversion is f_LO + f_IF, of a
downconversion |f_RF − f_LO| (RF 2.400 GHz, LO 2.330 GHz: IF 70 MHz, sum 4.730 GHz).
"""

from __future__ import annotations

import dataclasses
from types import MappingProxyType

import hypothesis.strategies as st
import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings

from sweeprig.analysis.direction import (
    add_output_frequency_in_place,
    name_in_trade_words,
    output_frequency_conditions,
    trade_named,
    upconverter_figures,
    with_output_frequency,
)
from sweeprig.analysis.figures import make_figures
from sweeprig.analysis.synthetic import points_frame, reading_rows


def test_isolation_names_follow_the_direction():
    figures = make_figures("lo_if_isolation", "dB", [30.0]) + \
        make_figures("lo_rf_isolation", "dB", [40.0]) + \
        make_figures("rf_if_isolation", "dB", [45.0]) + \
        make_figures("conversion_gain", "dB", [10.0])
    assert [f.name for f in trade_named(figures, "down")] == \
        ["lo_if_isolation", "lo_rf_isolation", "rf_if_isolation", "conversion_gain"]
    up = trade_named(figures, "up")
    assert [(f.name, f.value) for f in up] == [
        ("lo_rf_isolation", 30.0), ("lo_if_isolation", 40.0), ("if_rf_isolation", 45.0),
        ("conversion_gain", 10.0)]


def test_output_frequency_from_the_wanted_orders():
    """Field notes' example: RF 2.400 GHz with LO 2.330 GHz gives IF 70 MHz (orders (1, −1))
    and a sum product at 4.730 GHz (orders (1, 1), a low-side upconverter's output)."""
    figure = make_figures("conversion_gain", "dB", [10.0], conditions=[
        {"lo_freq_hz": 2.330e9, "rf_freq_hz": 2.400e9}])
    down = with_output_frequency(figure, (1, -1))[0]
    up = with_output_frequency(figure, (1, 1))[0]
    assert down.conditions["output_freq_hz"] == pytest.approx(70e6)
    assert up.conditions["output_freq_hz"] == pytest.approx(4.730e9)
    assert with_output_frequency(figure, None)[0].conditions["output_freq_hz"] == \
        pytest.approx(70e6)
    bare = make_figures("supply_current", "A", [0.05])
    assert "output_freq_hz" not in with_output_frequency(bare, (1, 1))[0].conditions


def test_the_in_place_and_per_figure_passes_are_the_copying_ones():
    """The reduction's passes (output frequency and names replaced in its own list) give
    the figures the copying passes give, the figures of one point sharing one extended
    mapping; so does each figure's output frequency given as its new conditions."""
    point = MappingProxyType({"lo_freq_hz": 2.330e9, "rf_freq_hz": 2.400e9, "study": "iso"})
    figures = make_figures("lo_if_isolation", "dB", [30.0, 31.0], conditions=[point] * 2) + \
        make_figures("conversion_gain", "dB", [10.0]) + \
        make_figures("rf_if_isolation", "dB", [45.0], conditions=[point])
    for conversion, orders in (("down", (1, -1)), ("up", (1, 1)), ("up", None)):
        expected = with_output_frequency(trade_named(figures, conversion), orders)
        owned = [f if c is None else dataclasses.replace(f, conditions=c) for f, c in
                 zip(figures, output_frequency_conditions(figures, orders), strict=True)]
        name_in_trade_words(owned, conversion)
        assert owned == expected
        assert [dict(f.conditions) for f in owned] == [dict(f.conditions) for f in expected]
        in_place = list(figures)
        add_output_frequency_in_place(in_place, orders)
        name_in_trade_words(in_place, conversion)
        assert in_place == expected
        assert [dict(f.conditions) for f in in_place] == \
            [dict(f.conditions) for f in expected]
        assert in_place[0].conditions is in_place[1].conditions is in_place[3].conditions
    assert owned[0].conditions is owned[1].conditions is owned[3].conditions
    assert output_frequency_conditions(figures, None)[2] is None


def _up_captures(sideband_dbm: float, lo_dbm: float, lo_floor_dbm: float = -150.0
                 ) -> pd.DataFrame:
    points = points_frame(2, lo_freq_hz=5.7e9, rf_freq_hz=100e6, rf_power_dbm=-20.0)
    return pd.concat([
        reading_rows(points, "if", -7.0, freq_hz=5.8e9),
        reading_rows(points, "sideband", sideband_dbm, freq_hz=5.6e9),
        reading_rows(points, "lo_at_if", lo_dbm, freq_hz=5.7e9, noise_floor_dbm=lo_floor_dbm),
    ], ignore_index=True)


def test_sideband_and_lo_suppression_are_dbc_of_the_wanted_output():
    figures = upconverter_figures(_up_captures(sideband_dbm=-37.0, lo_dbm=-32.0))
    by_name = {f.name: f for f in figures}
    assert by_name["sideband_suppression"].value == pytest.approx(30.0)  # -7 − (−37)
    assert by_name["sideband_suppression"].unit == "dBc"
    assert by_name["lo_suppression"].value == pytest.approx(25.0)  # -7 − (−32)
    assert by_name["lo_leakage"].value == pytest.approx(-32.0)
    assert by_name["lo_leakage"].bound is None


def test_a_leak_in_the_noise_is_a_bound():
    """A leak within 6 dB of the analyzer noise is an upper bound on the leak (the
    isolation figures' rule): leakage "<", suppression ">"."""
    figures = upconverter_figures(_up_captures(-37.0, lo_dbm=-101.0, lo_floor_dbm=-100.0))
    by_name = {f.name: f for f in figures}
    assert by_name["lo_leakage"].bound == "<"
    assert by_name["lo_suppression"].bound == ">"
    assert np.isfinite(by_name["lo_suppression"].value)


@settings(max_examples=200, deadline=None)
@given(data=st.data(), orders=st.sampled_from([(1, -1), (1, 1), (-1, 1), (2, -1)]),
       rows=st.integers(1, 6))
def test_a_point_table_holding_the_output_frequency_makes_the_extended_mappings(
        data: st.DataObject, orders: tuple[int, int], rows: int) -> None:
    """Mappings made from a point table holding ``output_freq_hz`` (the reduction's: its
    capture table holds |m·f_LO + n·f_RF| for the sequence's orders) are, key for key and in
    the same order, those the output-frequency pass makes of the mappings without it; rows
    missing the LO or the RF frequency gain none, and mappings made without the LO or the RF
    key gain none."""
    from sweeprig.analysis.captures import CONDITION_COLUMNS, STUDY, conditions_records

    frequency = st.one_of(st.just(np.nan), st.floats(1e6, 6e9),
                          st.sampled_from([2.33e9, 2.4e9]))
    table = {STUDY: np.array(data.draw(st.lists(st.sampled_from(["a", "b"]), min_size=rows,
                                                    max_size=rows)), dtype=object)}
    for key in CONDITION_COLUMNS:
        cells = frequency if key in ("lo_freq_hz", "rf_freq_hz") else \
            st.one_of(st.just(np.nan), st.floats(-60, 90))
        table[key] = np.array(data.draw(st.lists(cells, min_size=rows, max_size=rows)),
                              dtype=float)
    m, n = orders
    with_output = {**table, "output_freq_hz": np.abs(m * table["lo_freq_hz"]
                                                     + n * table["rf_freq_hz"])}
    every = np.arange(rows)
    for keys in ((STUDY, *CONDITION_COLUMNS),
                 (STUDY, "temperature_c", "lo_freq_hz", "rf_freq_hz"),
                 (STUDY, "temperature_c", "rf_freq_hz")):
        plain = make_figures("conversion_gain", "dB", [1.0] * rows,
                             conditions=conditions_records(table, every, keys))
        extended = [f.conditions if c is None else c for f, c in
                    zip(plain, output_frequency_conditions(plain, orders), strict=True)]
        made = conditions_records(with_output, every, keys)
        assert [list(c.items()) for c in made] == [list(c.items()) for c in extended]
