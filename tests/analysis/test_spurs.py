"""The m×n spur table."""

import numpy as np
import pandas as pd
import pytest

from sweeprig.analysis import spur_figures, spur_matrix, spur_table
from sweeprig.analysis.figures import ANALYZER_DISTORTION, IN_NOISE, MISSING_READING
from sweeprig.analysis.spurs import in_band, mxn_freqs_hz, product_freq_hz, spur_dbc
from sweeprig.analysis.synthetic import points_frame, reading_rows
from sweeprig.errors import InputError

LO_HZ, RF_HZ = 2.330e9, 2.400e9


def test_mxn_frequencies_field_notes_example():
    # Products at |m·f_LO ± n·f_RF|; RF 2.400 GHz, LO 2.330 GHz → IF 70 MHz, sum 4.730 GHz
    # (standard mixer frequency plan, see the project field notes).
    diff, total = mxn_freqs_hz(LO_HZ, RF_HZ, 1, 1)
    assert diff == pytest.approx(70e6) and total == pytest.approx(4.730e9)
    diff, total = mxn_freqs_hz(LO_HZ, RF_HZ, np.array([2, 1, 0]), np.array([2, 2, 3]))
    assert diff == pytest.approx([abs(2 * LO_HZ - 2 * RF_HZ), abs(LO_HZ - 2 * RF_HZ), 3 * RF_HZ])
    assert total == pytest.approx([2 * LO_HZ + 2 * RF_HZ, LO_HZ + 2 * RF_HZ, 3 * RF_HZ])
    # signed multipliers: (1, −1) is the difference product, (−2, 2) the 2×2 one
    assert product_freq_hz(LO_HZ, RF_HZ, 1, -1) == pytest.approx(70e6)
    assert product_freq_hz(LO_HZ, RF_HZ, -2, 2) == pytest.approx(140e6)


def test_dbc_and_band():
    assert spur_dbc(-75.0, -15.0) == pytest.approx(-60.0)
    assert in_band([50e6, 70e6, 140e6], (60e6, 80e6)).tolist() == [False, True, False]
    assert not in_band([70e6], None).any()


def _spur_captures():
    pts = points_frame(2, rf_power_dbm=[-20.0, -10.0])
    products = [(2, -2, -70.0), (-1, 2, -80.0), (3, -3, -99.0)]  # (m, n, level at -20 dBm)
    frames = [reading_rows(pts, "if", [-14.0, -4.0], noise_floor_dbm=-100.0, freq_hz=70e6)]
    for m, n, level in products:
        # common practice: an n-th order RF spur moves (n − 1) dB per dB of RF drive relative
        # to the wanted output, i.e. n dB/dB absolute
        levels = [level, level + 10.0 * abs(n)]
        frames.append(reading_rows(pts, "spur", levels, m=m, n=n, noise_floor_dbm=-100.0,
                                   freq_hz=product_freq_hz(LO_HZ, RF_HZ, m, n)))
    return pd.concat(frames, ignore_index=True)


def test_spur_table_levels_and_frequencies():
    table = spur_table(_spur_captures(), if_band_hz=(100e6, 200e6))
    first = table[table["point"] == 0].set_index(["m", "n"])
    assert first.loc[(2, -2), "dbc"] == pytest.approx(-70.0 - (-14.0))
    assert first.loc[(2, -2), "freq_hz"] == pytest.approx(140e6)
    assert bool(first.loc[(2, -2), "in_band"])
    assert first.loc[(-1, 2), "freq_hz"] == pytest.approx(2 * RF_HZ - LO_HZ)
    assert first.loc[(-1, 2), "order"] == 3
    # the 3×3 product is in the noise: an upper bound, never a number
    assert first.loc[(3, -3), "bound"] == -1 and IN_NOISE in first.loc[(3, -3), "flag_names"]
    second = table[table["point"] == 1].set_index(["m", "n"])
    # n = 2 spur: (n − 1) = 1 dB more in dBc per dB of drive: 10 dB up for +10 dB
    assert second.loc[(2, -2), "dbc"] - first.loc[(2, -2), "dbc"] == pytest.approx(10.0)


def test_spur_figures_and_matrix():
    figs = spur_figures(_spur_captures())
    dbc = [f for f in figs if f.name == "spur_dbc" and f.points == (0,)]
    assert {(f.conditions["m"], f.conditions["n"]) for f in dbc} == {(2, -2), (-1, 2), (3, -3)}
    bounded = [f for f in dbc if f.conditions["m"] == 3]
    assert bounded[0].bound == "<" and bounded[0].text(1) == "< -85.0 dBc"
    matrix = spur_matrix(spur_table(_spur_captures()).query("point == 0"))
    assert matrix.loc[-2, 2] == "-56.0" and matrix.loc[-3, 3] == "< -85.0"


def test_spur_validity():
    df = _spur_captures()
    repeat = df[(df["reading"] == "spur") & (df["m"] == 2)].assign(
        atten_check=True, level_dbm=lambda d: d["level_dbm"] - 20.0
    )
    table = spur_table(pd.concat([df, repeat], ignore_index=True))
    assert all(ANALYZER_DISTORTION in f for f in table[table["m"] == 2]["flag_names"])
    no_if = df[df["reading"] != "if"]
    assert all(MISSING_READING in f for f in spur_table(no_if)["flag_names"])
    with pytest.raises(InputError, match="no m or n"):
        spur_table(df.assign(m=np.nan))
