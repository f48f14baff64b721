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


def test_the_worst_spur_counts_only_products_inside_the_output_band_and_not_expected():
    # products of the fixture at point 0: 2x-2 at 140 MHz (-56 dBc), -1x2 at 2·f_RF − f_LO
    # (-66 dBc), 3x-3 at 210 MHz (in the noise)
    captures = _spur_captures()
    everything = spur_figures(captures)
    assert {(int(f.conditions["m"]), int(f.conditions["n"]))
            for f in everything if f.name == "spur_dbc"} == {(2, -2), (-1, 2), (3, -3)}
    band = spur_figures(captures, if_band_hz=(100e6, 200e6))
    counted = [f for f in band if f.name == "spur_dbc"]
    assert {(int(f.conditions["m"]), int(f.conditions["n"])) for f in counted} == {(2, -2)}
    assert all(f.conditions["band_low_hz"] == 100e6 for f in counted)
    excluded = [f for f in band if f.name == "spur_excluded_dbc"]
    assert {(int(f.conditions["m"]), int(f.conditions["n"])) for f in excluded} == {
        (-1, 2), (3, -3)}
    # (m, n) and (−m, −n) are one product: naming 1x-2 leaves out the -1x2 reading
    named = spur_figures(captures, expected=[(2, -2), (1, -2)])
    assert {(int(f.conditions["m"]), int(f.conditions["n"]))
            for f in named if f.name == "spur_dbc"} == {(3, -3)}
    # nothing read is lost: every product keeps its absolute level
    assert len([f for f in named if f.name == "spur_dbm"]) == 6


def test_the_sequence_states_the_output_band_and_the_expected_products(tmp_path):
    from sweeprig.analysis.reduce import spur_counting
    from sweeprig.formats.sequence import load_sequence

    path = tmp_path / "spurs.toml"
    path.write_text(
        'format = 1\n[part]\nid = "KX-2417"\nexpected_gain = "12 dB"\n'
        '[mixing]\nif_frequency = "100 MHz"\n[[study]]\nname = "spurs"\n'
        'rf_frequency = "2.2 GHz"\nrf_power = "-10 dBm"\nlo_power = "0 dBm"\n'
        'read = ["wanted", { kind = "mxn", order = 5, output_band = ["90 MHz", "110 MHz"], '
        'expected = ["1x1", "2x-2"] }]\n', encoding="utf-8")
    assert spur_counting(load_sequence(path)) == {
        "spurs": ((90e6, 110e6), ((1, 1), (2, -2)))}
