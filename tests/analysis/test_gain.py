"""Conversion gain, flatness, temperature coefficient, LO drive."""

import math

import numpy as np
import pandas as pd
import pytest

from sweeprig.analysis import (
    conversion_gain_figures,
    gain_flatness_figures,
    gain_tempco_figures,
    lo_drive_figures,
)
from sweeprig.analysis.figures import EDGE_OF_SWEEP, FEW_POINTS, IN_NOISE
from sweeprig.analysis.gain import (
    conversion_gain_db,
    gain_flatness_db,
    gain_tempco_db_per_c,
    lo_power_for_gain_dbm,
)
from sweeprig.analysis.synthetic import points_frame, reading_rows


def _gain_captures(gain_db, **conditions):
    gain = np.asarray(gain_db, dtype=float)
    pts = points_frame(gain.size, **conditions)
    return reading_rows(pts, "if", pts["rf_power_dbm"].to_numpy() + gain, noise_floor_dbm=-120.0)


def test_conversion_gain_definition():
    assert conversion_gain_db(-14.0, -20.0) == pytest.approx(6.0)
    figs = conversion_gain_figures(_gain_captures([6.0, 5.0], rf_freq_hz=[2.3e9, 2.4e9]))
    assert [f.value for f in figs] == pytest.approx([6.0, 5.0])
    assert figs[1].conditions["rf_freq_hz"] == 2.4e9 and figs[1].points == (1,)


def test_gain_in_the_noise_is_an_upper_bound():
    pts = points_frame(1)
    figs = conversion_gain_figures(reading_rows(pts, "if", -118.0, noise_floor_dbm=-120.0))
    assert figs[0].bound == "<" and IN_NOISE in figs[0].flags


def test_flatness_over_a_band():
    freq = np.array([2.2e9, 2.3e9, 2.4e9, 2.5e9, 2.6e9])
    gain = np.array([4.0, 6.0, 6.5, 5.5, 3.0])
    assert gain_flatness_db(gain) == pytest.approx(3.5)
    assert gain_flatness_db(gain, freq, (2.3e9, 2.5e9)) == pytest.approx(1.0)
    df = _gain_captures(gain, rf_freq_hz=freq, lo_freq_hz=freq - 70e6)
    figs = gain_flatness_figures(df, band_hz=(2.3e9, 2.5e9))
    assert len(figs) == 1 and figs[0].value == pytest.approx(1.0)
    assert figs[0].points == (1, 2, 3)
    assert "rf_freq_hz" not in figs[0].conditions and "lo_freq_hz" not in figs[0].conditions
    one = gain_flatness_figures(df, band_hz=(2.3e9, 2.3e9))
    assert FEW_POINTS in one[0].flags


def test_tempco_of_a_constant_tail_current_gain():
    # G_m = I_C / VT ∝ 1/T at constant tail current (Gray & Meyer, bias chapter, derived):
    # the gain falls by 20·log10(T2/T1) dB, 3.73 dB from −40 °C to +85 °C.
    t1, t2 = -40.0, 85.0
    drop_db = 20 * math.log10((t2 + 273.15) / (t1 + 273.15))
    assert drop_db == pytest.approx(3.73, abs=0.005)
    assert gain_tempco_db_per_c([t1, t2], [6.0, 6.0 - drop_db]) == pytest.approx(-drop_db / 125)
    temps = np.array([-40.0, 25.0, 85.0])
    gain = 6.0 - 20 * np.log10((temps + 273.15) / 298.15)
    df = _gain_captures(gain, temperature_c=temps)
    (fig,) = gain_tempco_figures(df)
    assert fig.unit == "dB/°C" and fig.value == pytest.approx(-drop_db / 125, rel=0.03)
    assert "temperature_c" not in fig.conditions
    (single,) = gain_tempco_figures(_gain_captures([6.0]))
    assert FEW_POINTS in single.flags and math.isnan(single.value)


def test_lo_power_for_full_gain():
    lo = np.array([-6.0, -3.0, 0.0, 3.0, 6.0])
    gain = np.array([3.0, 5.0, 5.8, 6.0, 5.9])
    value, bound, edge = lo_power_for_gain_dbm(lo, gain)
    assert (float(value), int(bound), bool(edge)) == (0.0, 0, False)
    # gain still rising at the top: more drive may be needed → "> 6 dBm"
    value, bound, edge = lo_power_for_gain_dbm(lo, np.array([1.0, 2.0, 3.0, 4.0, 5.0]))
    assert (float(value), int(bound), bool(edge)) == (6.0, 1, True)
    # already flat at the bottom: less drive may do → "< -6 dBm"
    value, bound, _ = lo_power_for_gain_dbm(lo, np.full(5, 6.0))
    assert (float(value), int(bound)) == (-6.0, -1)
    # a dip after reaching full gain pushes the answer up: the gain must stay within 0.5 dB
    value, _, _ = lo_power_for_gain_dbm(lo, np.array([5.8, 6.0, 5.0, 6.0, 5.9]))
    assert float(value) == 3.0
    figs = lo_drive_figures(_gain_captures(gain, lo_power_dbm=lo))
    assert figs[0].value == 0.0 and figs[0].flags == ()
    rising = lo_drive_figures(_gain_captures([1.0, 2.0, 3.0, 4.0, 5.0], lo_power_dbm=lo))
    assert rising[0].bound == ">" and EDGE_OF_SWEEP in rising[0].flags


def test_groups_follow_the_conditions():
    hot = _gain_captures([5.0, 5.5], temperature_c=85.0, lo_power_dbm=[0.0, 3.0])
    cold = _gain_captures([6.0, 6.2], temperature_c=-40.0, lo_power_dbm=[0.0, 3.0]).assign(
        point=lambda d: d["point"] + 10
    )
    figs = lo_drive_figures(pd.concat([hot, cold]))
    assert sorted(f.conditions["temperature_c"] for f in figs) == [-40.0, 85.0]
