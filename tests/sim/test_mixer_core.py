"""The Gilbert-cell core: thermal voltage, differential pairs, intercepts, bias laws."""

import math

import numpy as np
import pytest

from sweeprig.sim.mixer.core import (
    KT0_DBM_PER_HZ,
    cell_output_a,
    ideal_commutating_gain,
    pair_angle,
    pair_fraction,
    pair_iip3_amplitude_v,
    pair_slope_per_v,
    pair_transconductance_s,
    switching_functions,
    tail_current_a,
    thermal_voltage_v,
)


def _two_tone_intercept_v(amp_v: float, vt_v: float, i_ee_a: float, r_e_ohm: float) -> float:
    """Input intercept (peak V per tone) by small-signal two-tone extrapolation.

    Tones at bins 10 and 11 of a 256-point record (an exact period), equal amplitude; the
    pair's output fundamental F and IM3 (bin 9) give A_IP = A·sqrt(F/IM3), the crossing of
    the 1:1 and 3:1 lines (Razavi, RF Microelectronics, two-tone test).
    """
    n = 256
    t = np.arange(n) / n
    v = amp_v * (np.cos(2 * np.pi * 10 * t) + np.cos(2 * np.pi * 11 * t))
    spectrum = np.abs(np.fft.rfft(pair_fraction(v, vt_v, i_ee_a, r_e_ohm)))
    return amp_v * math.sqrt(spectrum[10] / spectrum[9])


def test_thermal_voltage_matches_field_notes() -> None:
    # CODATA exact k and q; VT = kT/q: 25.85 mV at 300 K, 24.99 mV at 290 K,
    # 20.09 mV at -40 degC, 30.86 mV at +85 degC
    assert thermal_voltage_v(300.0 - 273.15) == pytest.approx(25.85e-3, abs=0.01e-3)
    assert thermal_voltage_v(290.0 - 273.15) == pytest.approx(24.99e-3, abs=0.01e-3)
    assert thermal_voltage_v(-40.0) == pytest.approx(20.09e-3, abs=0.01e-3)
    assert thermal_voltage_v(85.0) == pytest.approx(30.86e-3, abs=0.01e-3)


def test_kt0_density() -> None:
    # Pozar, noise chapter: kT0 at 290 K = -173.98 dBm/Hz
    assert abs(KT0_DBM_PER_HZ - (-173.98)) < 0.005


def test_undegenerated_pair_is_tanh_with_gm_iee_over_2vt() -> None:
    # Gray, Hurst, Lewis & Meyer, differential pair: ΔI = I_EE·tanh(V_id/(2 VT)),
    # G_m = I_EE/(2 VT)
    vt = thermal_voltage_v(25.0)
    v = np.linspace(-0.3, 0.3, 101)
    np.testing.assert_allclose(pair_fraction(v, vt, 4e-3, 0.0), np.tanh(v / (2 * vt)), rtol=1e-15)
    assert pair_transconductance_s(vt, 4e-3, 0.0) == pytest.approx(4e-3 / (2 * vt), rel=1e-15)
    assert 4e-3 * pair_slope_per_v(0.0, vt, 4e-3, 0.0) == pytest.approx(4e-3 / (2 * vt))


def test_undegenerated_two_tone_intercept_is_4vt() -> None:
    # Gray & Meyer / Razavi (RF Microelectronics, nonlinearity chapter): differential pair
    # A_IIP3 = 4·VT (peak, differential), ~103 mV at 300 K
    vt = thermal_voltage_v(300.0 - 273.15)
    assert pair_iip3_amplitude_v(vt, 4e-3, 0.0) == pytest.approx(4 * vt, rel=1e-12)
    assert 4 * vt == pytest.approx(0.1034, abs=0.0001)
    extrapolated = _two_tone_intercept_v(4 * vt / 100.0, vt, 4e-3, 0.0)
    assert 20 * math.log10(extrapolated / (4 * vt)) == pytest.approx(0.0, abs=0.1)


@pytest.mark.parametrize("r_e_ohm", [5.0, 20.0, 60.0, 250.0])
def test_degenerated_intercept_rises_with_degeneration_factor(r_e_ohm: float) -> None:
    # Derivation (the model's own; Gray & Meyer and Razavi state that the intercept rises
    # with the degeneration factor 1 + G_m0·R_E):
    #   v = 2·VT·atanh(x) + x·I_EE·R_E = a·x + (2·VT/3)·x³ + …,  a = 2·VT + I_EE·R_E
    #   inverting the series: x = v/a − (2·VT/(3·a⁴))·v³ + …
    #   for c1·v + c3·v³ the intercept is sqrt((4/3)·|c1/c3|) (Razavi), so
    #   A_IIP3 = sqrt(2·a³/VT) = 4·VT·(1 + G_m0·R_E)^(3/2),  G_m0 = I_EE/(2·VT).
    vt = thermal_voltage_v(25.0)
    i_ee = 4e-3
    gm0 = i_ee / (2 * vt)
    expected = 4 * vt * (1 + gm0 * r_e_ohm) ** 1.5
    assert pair_iip3_amplitude_v(vt, i_ee, r_e_ohm) == pytest.approx(expected, rel=1e-12)
    extrapolated = _two_tone_intercept_v(expected / 100.0, vt, i_ee, r_e_ohm)
    assert 20 * math.log10(extrapolated / expected) == pytest.approx(0.0, abs=0.1)
    assert expected > pair_iip3_amplitude_v(vt, i_ee, 0.0)
    # degeneration lowers G_m to I_EE/(2 VT + I_EE R_E)
    assert pair_transconductance_s(vt, i_ee, r_e_ohm) == pytest.approx(gm0 / (1 + gm0 * r_e_ohm))


@pytest.mark.parametrize("r_e_ohm", [0.5, 10.0, 26.0, 200.0, 5000.0])
@pytest.mark.parametrize("i_ee_a", [1e-3, 8e-3, 20e-3])
def test_newton_solves_the_implicit_pair_equation(r_e_ohm: float, i_ee_a: float) -> None:
    # the model's defining equation: v = 2·VT·atanh(x) + x·I_EE·R_E (from
    # v_BE1 − v_BE2 = VT·ln(I_C1/I_C2) plus the emitter drops, α = 1)
    vt = thermal_voltage_v(25.0)
    a = 2 * vt + i_ee_a * r_e_ohm
    v = np.concatenate([np.linspace(-30 * a, 30 * a, 20001), [0.0, 1e-12, -1e-9]])
    u = pair_angle(v, vt, i_ee_a, r_e_ohm)
    residual = 2 * vt * u + i_ee_a * r_e_ohm * np.tanh(u) - v
    assert np.all(np.abs(residual) <= 1e-12 * np.maximum(np.abs(v), 1e-300))
    x = pair_fraction(v, vt, i_ee_a, r_e_ohm)
    assert np.all(np.abs(x) <= 1.0)
    inside = np.abs(x) < 0.999  # where atanh(x) is well conditioned
    lhs = 2 * vt * np.arctanh(x[inside]) + x[inside] * i_ee_a * r_e_ohm
    assert np.all(np.abs(lhs - v[inside]) <= 1e-12 * np.maximum(np.abs(v[inside]), 1e-30))
    assert np.all(np.diff(x[:20001]) >= 0)  # monotonic transfer


def test_quad_output_is_the_product_form() -> None:
    # out = I_C1·t1 − I_C2·t2 with I_C1,2 = (I_EE ± ΔI)/2 (the cell's defining equations)
    vt = thermal_voltage_v(25.0)
    rng = np.random.default_rng(1)
    v_lo = rng.uniform(-0.3, 0.3, 200)
    v_rf = rng.uniform(-0.1, 0.1, 200)
    os1, os2, osr = 1e-3, -2e-3, 0.5e-3
    out = cell_output_a(v_lo, v_rf, vt, 4e-3, 10.0, os1, os2, osr)
    delta = 4e-3 * pair_fraction(v_rf + osr, vt, 4e-3, 10.0)
    t1 = np.tanh((v_lo + os1) / (2 * vt))
    t2 = np.tanh((v_lo + os2) / (2 * vt))
    np.testing.assert_allclose(out, (4e-3 + delta) / 2 * t1 - (4e-3 - delta) / 2 * t2, rtol=1e-12)
    d, s = switching_functions(v_lo, vt, os1, os2)
    np.testing.assert_allclose(d, t1 - t2)
    np.testing.assert_allclose(s, t1 + t2)


def test_ideal_commutating_gain_is_2_over_pi_gm_rl() -> None:
    # Razavi / Lee: square-wave LO (4/π)(cos ωt − …) → voltage gain (2/π)·G_m·R_L,
    # i.e. −3.92 dB relative to G_m·R_L
    g = ideal_commutating_gain(0.05, 200.0)
    assert g == pytest.approx(2 / math.pi * 10.0)
    assert 20 * math.log10(g / 10.0) == pytest.approx(-3.92, abs=0.005)


def test_tail_current_laws() -> None:
    # constant: independent of temperature, linear in supply; PTAT ∝ absolute temperature
    args = dict(reference_temperature_c=25.0, nominal_supply_v=3.3, supply_coeff_per_v=0.1)
    assert tail_current_a(4e-3, "constant", -40.0, supply_v=3.3, **args) == pytest.approx(4e-3)
    assert tail_current_a(4e-3, "constant", 85.0, supply_v=3.8, **args) == pytest.approx(4.2e-3)
    assert tail_current_a(4e-3, "ptat", 85.0, supply_v=3.3, **args) == pytest.approx(
        4e-3 * (85 + 273.15) / (25 + 273.15))
    assert tail_current_a(4e-3, "constant", 25.0, supply_v=2.0, min_supply_v=2.7, **args) == 0.0
