"""Isolation, image rejection, supply."""

import numpy as np
import pandas as pd
import pytest

from sweeprig.analysis import image_rejection_figures, isolation_figures, supply_figures
from sweeprig.analysis.figures import IN_NOISE, MISSING_READING
from sweeprig.analysis.isolation import dc_power_w, image_freq_hz, isolation_db
from sweeprig.analysis.synthetic import points_frame, reading_rows

LO_HZ, RF_HZ = 2.330e9, 2.400e9


def test_isolation_definitions():
    assert isolation_db(7.0, -28.0) == pytest.approx(35.0)
    # image of a downconversion: 2·f_LO − f_RF (field notes, frequency plan)
    assert image_freq_hz(LO_HZ, RF_HZ) == pytest.approx(2.260e9)
    assert image_freq_hz(LO_HZ, image_freq_hz(LO_HZ, RF_HZ)) == pytest.approx(RF_HZ)
    assert dc_power_w(3.3, 0.045) == pytest.approx(0.1485)


def test_isolation_figures_with_a_reading_in_the_noise():
    pts = points_frame(1, lo_power_dbm=7.0, rf_power_dbm=-20.0)
    df = pd.concat([
        reading_rows(pts, "lo_at_if", -28.0, noise_floor_dbm=-100.0),
        reading_rows(pts, "lo_at_rf", -97.0, noise_floor_dbm=-100.0),
        reading_rows(pts, "rf_at_if", -55.0, noise_floor_dbm=-100.0),
    ])
    figs = {f.name: f for f in isolation_figures(df)}
    assert figs["lo_if_isolation"].value == pytest.approx(35.0)
    assert figs["rf_if_isolation"].value == pytest.approx(35.0)
    lo_rf = figs["lo_rf_isolation"]
    assert lo_rf.bound == ">" and lo_rf.value == pytest.approx(104.0)
    assert IN_NOISE in lo_rf.flags


def test_image_rejection_pairs_the_wanted_and_image_points():
    wanted = points_frame(1, rf_freq_hz=RF_HZ, lo_freq_hz=LO_HZ, rf_power_dbm=-20.0)
    image = points_frame(1, first_point=1, rf_freq_hz=image_freq_hz(LO_HZ, RF_HZ),
                         lo_freq_hz=LO_HZ, rf_power_dbm=-20.0)
    df = pd.concat([
        reading_rows(wanted, "if", -14.0),  # G = 6 dB
        reading_rows(image, "image", -49.0),  # G_image = -29 dB
    ])
    (fig,) = image_rejection_figures(df)
    assert fig.value == pytest.approx(35.0) and fig.points == (1, 0)
    assert fig.conditions["rf_freq_hz"] == pytest.approx(RF_HZ)
    assert fig.conditions["image_freq_hz"] == pytest.approx(2.260e9)
    (alone,) = image_rejection_figures(df[df["reading"] == "image"])
    assert MISSING_READING in alone.flags and np.isnan(alone.value)


def test_supply_current_and_dc_power():
    pts = points_frame(2, supply_v=[3.0, 3.6])
    df = reading_rows(pts, "supply_current", value=[0.040, 0.050])
    figs = supply_figures(df)
    current = [f.value for f in figs if f.name == "supply_current"]
    power = [f.value for f in figs if f.name == "dc_power"]
    assert current == pytest.approx([0.040, 0.050])
    assert power == pytest.approx([0.120, 0.180])
    empty = supply_figures(reading_rows(pts, "supply_current"))
    assert all(MISSING_READING in f.flags for f in empty)


def test_image_rejection_with_the_image_read_at_the_wanted_point():
    # layout (a): the RF source is retuned to the image for the image reading only
    pts = points_frame(1, rf_freq_hz=RF_HZ, lo_freq_hz=LO_HZ, rf_power_dbm=-20.0)
    df = pd.concat([reading_rows(pts, "if", -14.0), reading_rows(pts, "image", -54.0)])
    (fig,) = image_rejection_figures(df)
    assert fig.value == pytest.approx(40.0) and fig.points == (0,)
    assert fig.conditions["rf_freq_hz"] == pytest.approx(RF_HZ)
    assert fig.conditions["image_freq_hz"] == pytest.approx(2.260e9)
