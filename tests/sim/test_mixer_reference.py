"""Reference figures of the shipped parts, and their consistency with the model."""

import math

import pytest

from sweeprig.sim.mixer import OperatingPoint, load_part, reference_figures

OP = OperatingPoint()


@pytest.fixture(scope="module")
def ideal():
    return reference_figures(load_part("ideal"), OP, 2.33e9, 15.0, 2.4e9)


@pytest.fixture(scope="module")
def demo():
    return reference_figures(load_part("kx-2417"), OP, 2.1e9, 0.0, 2.2e9)


@pytest.fixture(scope="module")
def linear():
    return reference_figures(load_part("kx-5803"), OP, 2.1e9, 13.0, 2.2e9)


def test_ideal_figures(ideal) -> None:
    # Gray & Meyer: G_m = I_EE/(2 VT); Razavi/Lee: ideal commutating gain (2/π)·G_m·R_L
    assert ideal.gm_s == pytest.approx(4e-3 / (2 * ideal.vt_v))
    assert ideal.ideal_voltage_gain == pytest.approx(2 / math.pi * ideal.gm_s * 200.0)
    assert ideal.conversion_gain_db == pytest.approx(ideal.ideal_power_gain_db, abs=0.05)
    # two-tone extrapolation on the full model recovers the closed-form A_IIP3 = 4·VT
    # (Gray & Meyer / Razavi), referred to the port: P = A²/(2·R_in)
    a_iip3 = 4 * ideal.vt_v
    assert ideal.iip3_closed_form_dbm == pytest.approx(
        10 * math.log10(a_iip3**2 / (2 * 100.0) / 1e-3), abs=1e-9)
    assert ideal.iip3_dbm == pytest.approx(ideal.iip3_closed_form_dbm, abs=0.05)
    assert ideal.oip3_dbm == pytest.approx(ideal.iip3_dbm + ideal.conversion_gain_db)
    # a tanh pair compresses before its intercept; for a pure cubic the gap would be
    # 9.6 dB (Razavi); tanh's higher terms change it a little
    assert 8.0 < ideal.iip3_dbm - ideal.input_p1db_dbm < 11.0
    # balanced: no IM2, no LO leakage, no feedthrough
    assert ideal.iip2_dbm == math.inf
    assert ideal.lo_to_if_dbm == -math.inf and ideal.lo_to_rf_dbm == -math.inf
    assert ideal.rf_to_if_isolation_db == math.inf
    assert ideal.supply_current_a == pytest.approx(4e-3)


def test_demo_part_is_a_high_gain_low_iip3_active_mixer(demo) -> None:
    assert 10.0 <= demo.conversion_gain_db <= 15.0
    assert -5.0 <= demo.iip3_dbm <= 5.0
    assert demo.input_p1db_dbm < demo.iip3_dbm
    assert demo.iip3_dbm == pytest.approx(demo.iip3_closed_form_dbm, abs=0.2)
    assert math.isfinite(demo.iip2_dbm) and demo.iip2_dbm > demo.iip3_dbm
    assert -45.0 < demo.lo_to_if_dbm < -20.0
    assert demo.lo_to_rf_dbm == pytest.approx(-38.0, abs=1e-6)
    assert 20.0 < demo.rf_to_if_isolation_db < 50.0
    assert demo.output_freq_hz == 100e6
    # output noise = kT0 + NF + G (Pozar); NF is the mid-band figure, so a measurement at
    # 2.2 GHz / 100 MHz sees it plus the band-edge losses in front of the gain
    part = load_part("kx-2417")
    edges_db = -20 * math.log10(part.rf_port.scalar_magnitude(2.2e9)
                                * part.if_port.scalar_magnitude(100e6))
    measured_nf = demo.if_noise_dbm_per_hz - (-173.98) - demo.conversion_gain_db
    assert measured_nf == pytest.approx(demo.noise_figure_db + edges_db, abs=0.01)


def test_high_linearity_part(linear) -> None:
    assert -6.0 <= linear.conversion_gain_db <= 0.0
    assert linear.iip3_dbm >= 20.0
    assert linear.input_p1db_dbm < linear.iip3_dbm
    assert math.isfinite(linear.iip2_dbm)  # mismatch makes a finite IIP2


def test_iip2_falls_as_mismatch_grows() -> None:
    part = load_part("ideal")
    small = part.with_changes(quad_offset_1_v=1e-3, rf_pair_offset_v=1e-3)
    large = part.with_changes(quad_offset_1_v=4e-3, rf_pair_offset_v=4e-3)
    iip2_small = reference_figures(small, OP, 2.33e9, 10.0, 2.4e9).iip2_dbm
    iip2_large = reference_figures(large, OP, 2.33e9, 10.0, 2.4e9).iip2_dbm
    assert math.isfinite(iip2_small) and iip2_large < iip2_small - 10.0


def test_part_parameters_are_checked_on_change() -> None:
    from sweeprig.errors import InputError

    with pytest.raises(InputError, match="tail current"):
        load_part("ideal").with_changes(tail_current_a=-1e-3)


def test_figures_follow_temperature() -> None:
    part = load_part("ideal")
    cold = reference_figures(part, OperatingPoint(temperature_c=-40.0), 2.33e9, 15.0, 2.4e9)
    hot = reference_figures(part, OperatingPoint(temperature_c=85.0), 2.33e9, 15.0, 2.4e9)
    # A_IIP3 = 4·VT rises with temperature: +20·log10(T2/T1) in power
    assert hot.iip3_closed_form_dbm - cold.iip3_closed_form_dbm == pytest.approx(
        20 * math.log10(358.15 / 233.15), abs=1e-6)
    assert cold.conversion_gain_db > hot.conversion_gain_db
