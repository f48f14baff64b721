"""Compression from power sweeps: checked on a pure cubic y = a1·x + a3·x³."""

import math

import numpy as np
import pandas as pd
import pytest

from sweeprig.analysis import compression_figures, compression_table
from sweeprig.analysis.compression import compression_point, saturated_output, small_signal_gain
from sweeprig.analysis.figures import (
    FEW_POINTS,
    NOT_COMPRESSED,
    NOT_SATURATED,
    OVERLOAD,
)
from sweeprig.analysis.synthetic import (
    amplitude_to_dbm,
    cubic_coefficients,
    cubic_compression_captures,
)
from sweeprig.errors import InputError

# A fictional part: 6 dB conversion gain, IIP3 +10 dBm (50 ohm, peak amplitudes).
A1, A3 = (float(v) for v in cubic_coefficients(6.0, 10.0))


def _by_name(figures):
    return {f.name: f for f in figures}


def _expected_p1db_in_dbm() -> float:
    # Razavi, RF Microelectronics (nonlinearity chapter): A_1dB = sqrt(0.145·|a1/a3|)
    return float(amplitude_to_dbm(math.sqrt(0.145 * abs(A1 / A3))))


def test_cubic_p1db_recovered_within_0p1_db():
    figs = _by_name(compression_figures(cubic_compression_captures(A1, A3, np.arange(-40, 8, 0.5))))
    p1db = figs["input_p1db"]
    assert p1db.bound is None and p1db.flags == ()
    assert p1db.value == pytest.approx(_expected_p1db_in_dbm(), abs=0.1)
    assert figs["small_signal_gain"].value == pytest.approx(6.0, abs=0.02)
    # output-referred: P1dB_out = P1dB_in + G − 1 (definition of 1 dB compression)
    assert figs["output_p1db"].value == pytest.approx(p1db.value + 6.0 - 1.0, abs=0.05)
    assert figs["input_p0p1db"].value < p1db.value < figs["input_p3db"].value
    # the bracketing points are reported
    assert len(p1db.points) == 2


def test_cubic_psat_is_the_output_maximum():
    # The cubic's output a1·A + (3/4)·a3·A³ peaks at A² = 4·a1/(9·|a3|) (d/dA = 0).
    a_peak = math.sqrt(4.0 * A1 / (9.0 * abs(A3)))
    peak_dbm = float(amplitude_to_dbm(A1 * a_peak + 0.75 * A3 * a_peak**3))
    # (beyond A_IIP3 the cubic's output passes through zero and grows again: stay below it)
    figs = _by_name(compression_figures(cubic_compression_captures(A1, A3, np.arange(-20, 8, 0.1))))
    assert figs["output_psat"].bound is None
    assert figs["output_psat"].value == pytest.approx(peak_dbm, abs=0.01)


def test_small_signal_gain_is_robust_to_noise():
    # ±0.2 dB of seeded uniform noise on every reading; the lowest point alone would be off by
    # up to 0.2 dB, the median over the linear region is much closer.
    errors = []
    for seed in range(20):
        df = cubic_compression_captures(A1, A3, np.arange(-40, 8, 1.0), noise_db=0.2, seed=seed)
        figs = _by_name(compression_figures(df))
        errors.append(figs["small_signal_gain"].value - 6.0)
        # near P1dB the curve moves ~0.3 dB of compression per dB of drive, so ±0.2 dB of
        # reading noise moves the interpolated crossing by up to about ±0.7 dB
        assert figs["input_p1db"].value == pytest.approx(_expected_p1db_in_dbm(), abs=1.0)
    # 20 seeds: typical error a few hundredths of a dB, never near the ±0.2 dB of one reading
    assert float(np.sqrt(np.mean(np.square(errors)))) < 0.07
    assert max(abs(e) for e in errors) < 0.15


def test_sweep_not_reaching_compression_gives_a_lower_bound():
    df = cubic_compression_captures(A1, A3, np.arange(-40, -9, 1.0))
    figs = _by_name(compression_figures(df))
    p1db = figs["input_p1db"]
    assert p1db.bound == ">" and p1db.value == -10.0
    assert NOT_COMPRESSED in p1db.flags and p1db.text(0) == "> -10 dBm"
    assert figs["output_p1db"].bound == ">"
    assert figs["output_psat"].bound == ">" and NOT_SATURATED in figs["output_psat"].flags


def test_too_few_linear_points_is_flagged():
    df = cubic_compression_captures(A1, A3, np.array([-40.0, -39.0, 0.0, 1.0, 2.0, 4.0]))
    figs = _by_name(compression_figures(df))
    assert FEW_POINTS in figs["small_signal_gain"].flags
    assert FEW_POINTS in figs["input_p1db"].flags


def test_compressed_from_the_start_gives_an_upper_bound():
    # small-signal gain known to be 6 dB, but the sweep starts 2 dB down already
    x = np.array([[0.0, 1.0, 2.0]])
    cp = compression_point(x, np.array([[4.0, 3.5, 3.0]]), np.array([6.0]), 1.0)
    assert cp.bound.tolist() == [-1] and cp.input_dbm.tolist() == [0.0]
    assert cp.output_dbm.tolist() == [4.0]


def test_overload_at_the_bracketing_points_is_flagged():
    df = cubic_compression_captures(A1, A3, np.arange(-40, 8, 0.5))
    df.loc[df["rf_power_dbm"] >= -2.0, "overload"] = True
    figs = _by_name(compression_figures(df))
    assert OVERLOAD in figs["input_p1db"].flags
    assert OVERLOAD not in figs["small_signal_gain"].flags


def test_sweeps_are_grouped_by_their_conditions():
    cold = cubic_compression_captures(A1, A3, np.arange(-30, 8, 1.0), temperature_c=-40.0)
    hot = cubic_compression_captures(
        A1 / 2, A3 / 2, np.arange(-30, 8, 1.0), temperature_c=85.0, first_point=100
    )
    figs = [f for f in compression_figures(pd.concat([cold, hot])) if f.name == "small_signal_gain"]
    gains = {f.conditions["temperature_c"]: f.value for f in figs}
    assert gains[-40.0] == pytest.approx(6.0, abs=0.02)
    assert gains[85.0] == pytest.approx(6.0 - 20 * math.log10(2), abs=0.02)
    assert "rf_power_dbm" not in figs[0].conditions


def test_compression_table_for_plots():
    table = compression_table(cubic_compression_captures(A1, A3, np.arange(-40, 8, 1.0)))
    assert table["linear"].iloc[0] and not table["linear"].iloc[-1]
    assert table["compression_db"].iloc[0] == pytest.approx(0.0, abs=0.01)


def test_array_functions_need_ascending_sweeps():
    with pytest.raises(InputError, match="ascending"):
        small_signal_gain(np.array([0.0, -1.0]), np.array([1.0, 1.0]))
    sat = saturated_output(np.array([0.0, 1.0, 2.0]), np.array([5.0, 5.5, 5.55]))
    assert int(sat.bound) == 0 and float(sat.output_dbm) == 5.55
