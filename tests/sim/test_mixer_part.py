"""The mixer part: loading shipped parts, evaluation, port networks, temperature, supply."""

import math

import numpy as np
import pytest

from sweeprig.errors import InputError
from sweeprig.sim.mixer import (
    MixerPart,
    OperatingPoint,
    PortNetwork,
    ToneInput,
    load_part,
    shipped_parts,
)
from sweeprig.sim.mixer.core import KT0_DBM_PER_HZ, thermal_voltage_v
from sweeprig.sim.mixer.reference import line_power_dbm

OP = OperatingPoint()


def _gain_db(part: MixerPart, lo_dbm: float, *, op: OperatingPoint = OP, lo_hz: float = 2.33e9,
             rf_hz: float = 2.4e9, rf_dbm: float = -70.0) -> float:
    resp = part.evaluate(op, ToneInput(lo_hz, lo_dbm), [ToneInput(rf_hz, rf_dbm)])
    return line_power_dbm(resp.if_port, abs(rf_hz - lo_hz)) - rf_dbm


def _ideal_power_gain_db(part: MixerPart, op: OperatingPoint = OP) -> float:
    cell = part.cell_at(op)
    gm = cell.i_ee_a / (2 * cell.vt_v + cell.i_ee_a * cell.r_e_ohm)
    g_v = 2 / math.pi * gm * part.if_port.resistance_ohm
    return 20 * math.log10(g_v) + 10 * math.log10(
        part.rf_port.resistance_ohm / part.if_port.resistance_ohm)


def test_shipped_parts_load() -> None:
    names = shipped_parts()
    assert "ideal" in names and len(names) >= 3
    for name in names:
        part = load_part(name)
        assert part.name and part.conversion in ("down", "up")
    demo = load_part("KX-2417")
    assert demo.name == "KX-2417" and demo.conversion == "down"


def test_products_sit_at_m_lo_plus_n_rf() -> None:
    # field notes, frequency plan (the standard mixer product relation): RF 2.400 GHz with
    # LO 2.330 GHz → IF 70 MHz and a sum product at 4.730 GHz; every product sits at
    # |m·f_LO + n·f_RF|
    part = load_part("ideal")
    resp = part.evaluate(OP, ToneInput(2.33e9, 0.0), [ToneInput(2.4e9, -40.0)])
    by_orders = {p.orders: p for p in resp.if_port}
    assert by_orders[(-1, 1)].freq_hz == 70e6
    assert by_orders[(1, 1)].freq_hz == 4.73e9
    for p in resp.if_port:
        assert p.freq_hz == pytest.approx(abs(p.orders[0] * 2.33e9 + p.orders[1] * 2.4e9),
                                          abs=1e-3)
    assert [p.freq_hz for p in resp.if_port] == sorted(p.freq_hz for p in resp.if_port)


def test_ideal_cell_has_only_odd_lo_harmonics() -> None:
    # Razavi / Lee: only odd LO harmonics in an ideal balanced cell; even-order products
    # appear through mismatch
    part = load_part("ideal")
    lo, rf = ToneInput(2.33e9, 0.0), [ToneInput(2.4e9, -30.0)]
    resp = part.evaluate(OP, lo, rf)
    wanted = line_power_dbm(resp.if_port, 70e6)
    even = [p.power_dbm - wanted for p in resp.if_port if p.orders[0] % 2 == 0]
    assert all(level < -150.0 for level in even)
    odd_m = {abs(p.orders[0]) for p in resp.if_port}
    assert {1, 3, 5, 7} <= odd_m
    mismatched = part.with_changes(quad_offset_1_v=2e-3, quad_offset_2_v=1e-3)
    resp = mismatched.evaluate(OP, lo, rf)
    levels = {p.orders: p.power_dbm - wanted for p in resp.if_port}
    assert levels[(2, -1)] > -80.0  # 2·LO − RF
    assert levels[(0, 1)] > -100.0  # RF feedthrough from the quad's duty-cycle error


def test_ideal_gain_approaches_commutating_limit_and_rises_with_lo() -> None:
    # Razavi / Lee (field notes): ideal commutating gain (2/π)·G_m·R_L; with R_in, R_L the
    # power gain is 20·log10((2/π)·G_m·R_L) + 10·log10(R_in/R_L)
    part = load_part("ideal")
    limit = _ideal_power_gain_db(part)
    drives = np.arange(-30.0, 22.0, 2.0)
    gains = np.array([_gain_db(part, p) for p in drives])
    assert np.all(np.diff(gains) > 0.0)
    assert gains[-1] == pytest.approx(limit, abs=0.05)
    assert gains[-1] <= limit + 1e-6


def test_fundamental_and_im3_slopes_below_compression() -> None:
    # Razavi / Pozar: below compression the fundamental moves 1 dB/dB and IM3 3 dB/dB
    for name, lo_dbm in (("ideal", 0.0), ("kx-2417", 0.0), ("kx-5803", 13.0)):
        part = load_part(name)
        lo = ToneInput(2.1e9, lo_dbm)
        iip3 = _closed_form_iip3(part)
        drives = np.linspace(iip3 - 50.0, iip3 - 30.0, 9)  # 20 dB of drive
        fund, im3 = [], []
        for p in drives:
            resp = part.evaluate(OP, lo, [ToneInput(2.2e9, p), ToneInput(2.201e9, p)])
            fund.append(line_power_dbm(resp.if_port, 100e6))
            im3.append(line_power_dbm(resp.if_port, 99e6))
        assert np.polyfit(drives, fund, 1)[0] == pytest.approx(1.0, abs=0.05)
        assert np.polyfit(drives, im3, 1)[0] == pytest.approx(3.0, abs=0.05)


def _closed_form_iip3(part: MixerPart) -> float:
    from sweeprig.sim.mixer.reference import closed_form_iip3_dbm

    return closed_form_iip3_dbm(part, OP, 2.2e9)


def test_gain_versus_temperature_constant_and_ptat_bias() -> None:
    # Gray & Meyer (bias chapter), via G_m = I_C/VT: constant tail current → small-signal
    # gain falls by 20·log10(T2/T1) = 3.73 dB from −40 to +85 degC; PTAT holds it constant
    part = load_part("ideal")
    cold, hot = OperatingPoint(temperature_c=-40.0), OperatingPoint(temperature_c=85.0)
    drop = _gain_db(part, 15.0, op=cold) - _gain_db(part, 15.0, op=hot)
    expected = 20 * math.log10((85.0 + 273.15) / (-40.0 + 273.15))
    assert expected == pytest.approx(3.73, abs=0.005)
    assert drop == pytest.approx(expected, abs=0.02)
    ptat = part.with_changes(bias="ptat")
    assert _gain_db(ptat, 15.0, op=cold) == pytest.approx(_gain_db(ptat, 15.0, op=hot), abs=0.02)


def test_noise_density_is_kt0_plus_nf_plus_gain() -> None:
    # Pozar, noise chapter: output noise density = kT0 (−174 dBm/Hz) + NF + G
    part = load_part("kx-2417")
    resp = part.evaluate(OP, ToneInput(2.1e9, 0.0), [])
    gain = resp.notes["conversion_gain_db"]
    assert resp.if_noise_dbm_per_hz == pytest.approx(KT0_DBM_PER_HZ + 9.5 + gain, abs=1e-9)
    # the mid-band analytic gain agrees with the tone-based one (band edges divided out)
    measured = _gain_db(part, 0.0, lo_hz=2.1e9, rf_hz=2.2e9)
    edges = 20 * math.log10(part.rf_port.scalar_magnitude(2.2e9)
                            * part.if_port.scalar_magnitude(100e6))
    assert measured == pytest.approx(gain + edges, abs=0.01)
    assert part.evaluate(OP, None, []).if_noise_dbm_per_hz == pytest.approx(KT0_DBM_PER_HZ)


def test_supply_current_and_supply_dependence() -> None:
    part = load_part("kx-2417")
    assert part.evaluate(OP, None, []).supply_current_a == pytest.approx(0.008 + 0.022)
    low = OperatingPoint(supply_v=3.0)
    expected = 0.008 * (1 + 0.08 * (3.0 - 3.3)) + 0.022 * (1 + 0.10 * (3.0 - 3.3))
    assert part.evaluate(low, None, []).supply_current_a == pytest.approx(expected)
    assert _gain_db(part, 0.0, op=low) < _gain_db(part, 0.0)
    dead = part.evaluate(OperatingPoint(supply_v=2.0), ToneInput(2.1e9, 0.0),
                         [ToneInput(2.2e9, -30.0)])
    assert line_power_dbm(dead.if_port, 100e6) == -math.inf  # bias off below min_supply
    assert line_power_dbm(dead.if_port, 2.2e9) == pytest.approx(-30.0 - 35.0, abs=1e-9)


def test_port_bandwidths_roll_gain_off_at_band_edges() -> None:
    part = load_part("kx-2417")
    centre = _gain_db(part, 0.0, lo_hz=2.1e9, rf_hz=2.2e9)
    for rf_hz in (0.6e9, 8e9):
        assert _gain_db(part, 0.0, lo_hz=rf_hz - 100e6, rf_hz=rf_hz) < centre - 3.0
    # IF port: the same RF/LO spacing moved to a far-out IF loses gain
    assert _gain_db(part, 0.0, lo_hz=1.2e9, rf_hz=2.2e9) < centre - 3.0
    # LO drive at the core falls as the LO leaves its band: gain falls with it
    weak_lo_in = _gain_db(part, -15.0, lo_hz=2.1e9, rf_hz=2.2e9)
    weak_lo_out = _gain_db(part, -15.0, lo_hz=0.25e9, rf_hz=0.35e9)
    rf_loss = 20 * math.log10(part.rf_port.scalar_magnitude(0.35e9)
                              / part.rf_port.scalar_magnitude(2.2e9))
    assert weak_lo_out - rf_loss < weak_lo_in - 1.0


def test_match_and_reflections() -> None:
    # Pozar: delivered = available·(1 − |Γ|²), return loss = −20·log10|Γ|
    part = load_part("ideal")
    matched = _gain_db(part, 15.0)
    mismatched = part.with_changes(rf_port=PortNetwork(100.0, return_loss_db=10.0))
    assert _gain_db(mismatched, 15.0) == pytest.approx(
        matched + 10 * math.log10(1 - 0.1), abs=1e-4)
    resp = mismatched.evaluate(OP, ToneInput(2.33e9, 15.0), [ToneInput(2.4e9, -20.0)])
    assert line_power_dbm(resp.rf_port, 2.4e9) == pytest.approx(-30.0, abs=1e-9)


def test_leakage_paths_and_empty_inputs() -> None:
    # a balanced cell with only a linear RF→IF path: exactly the path's isolation
    leaky = load_part("ideal").with_changes(isolation_rf_if_db=35.0, isolation_rf_lo_db=40.0)
    rf_only = leaky.evaluate(OP, None, [ToneInput(2.2e9, -20.0, 0.0, (-35.0,))])
    assert line_power_dbm(rf_only.if_port, 2.2e9) == pytest.approx(-55.0, abs=1e-9)
    assert line_power_dbm(rf_only.lo_port, 2.2e9) == pytest.approx(-60.0, abs=1e-9)
    assert line_power_dbm(rf_only.lo_port, 4.4e9) == pytest.approx(-95.0, abs=1e-9)
    # with quad offsets and no LO the unbalanced quad passes RF on top of the path
    part = load_part("kx-2417")
    rf_only = part.evaluate(OP, None, [ToneInput(2.2e9, -20.0)])
    assert line_power_dbm(rf_only.if_port, 2.2e9) > -55.0
    assert all(p.orders[0] == 0 for p in rf_only.if_port)
    lo_only = part.evaluate(OP, ToneInput(2.1e9, 0.0), [])
    assert line_power_dbm(lo_only.rf_port, 2.1e9) == pytest.approx(-38.0, abs=1e-9)
    assert -40.0 < line_power_dbm(lo_only.if_port, 2.1e9) < -25.0
    assert all(len(p.orders) == 1 for p in lo_only.if_port)
    nothing = load_part("ideal").evaluate(OP, None, [])
    assert nothing.if_port == () and nothing.rf_port == () and nothing.lo_port == ()
    assert load_part("ideal").evaluate(OP, ToneInput(2.1e9, 0.0), []).if_port == ()


def test_floor_drops_weak_lines() -> None:
    part = load_part("kx-2417")
    resp = part.evaluate(OP, ToneInput(2.1e9, 0.0), [ToneInput(2.2e9, -30.0)])
    assert min(p.power_dbm for p in resp.if_port) >= part.floor_dbm
    raised = part.with_changes(floor_dbm=-120.0)
    short = raised.evaluate(OP, ToneInput(2.1e9, 0.0), [ToneInput(2.2e9, -30.0)])
    assert 0 < len(short.if_port) < len(resp.if_port)
    kept = {p.orders: p.power_dbm for p in resp.if_port}
    for p in short.if_port:
        # A kept line can lose a coincident contributor that the raised floor pruned first
        # (pruning keeps 20 dB of margin: contributors under floor − 20 dB = −140 dBm go).
        # Since the common-mode IM2 lines (cm_second_order) join the core's lines, such a
        # pair exists; as voltages it moves the line by at most 20·log10(1 + 10^(ΔdB/20)).
        slack = 20.0 * math.log10(1.0 + 10.0 ** ((-140.0 - p.power_dbm) / 20.0))
        assert p.power_dbm == pytest.approx(kept[p.orders], abs=1e-9 + slack)


def test_upconverter_swaps_the_port_roles() -> None:
    base = load_part("ideal")
    up = base.with_changes(conversion="up", rf_port=PortNetwork(200.0),
                           if_port=PortNetwork(100.0))
    resp = up.evaluate(OP, ToneInput(2.1e9, 15.0), [ToneInput(100e6, -70.0)])
    by_orders = {p.orders: p for p in resp.if_port}
    assert by_orders[(1, 1)].freq_hz == 2.2e9
    # same core and resistances (input 100 ohm, output 200 ohm) → same gain as the down part
    down_gain = _gain_db(base, 15.0, lo_hz=2.1e9, rf_hz=2.2e9)
    assert by_orders[(1, 1)].power_dbm + 70.0 == pytest.approx(down_gain, abs=1e-6)
    assert up.input_port is up.if_port and up.output_port is up.rf_port


def test_source_harmonics_and_lo_harmonics_make_products() -> None:
    part = load_part("ideal")
    lo = ToneInput(2.0e9, 5.0, 0.0, (-30.0,))
    resp = part.evaluate(OP, lo, [ToneInput(2.3e9, -40.0, 0.0, (-35.0, -45.0))])
    orders = {p.orders for p in resp.if_port}
    assert (-2, 2) in orders  # RF second harmonic against the LO's second harmonic path


def test_bad_inputs_raise_input_error() -> None:
    part = load_part("ideal")
    lo = ToneInput(2.1e9, 0.0)
    with pytest.raises(InputError, match="at most 3"):
        part.evaluate(OP, lo, [ToneInput(2.2e9 + k, -30.0) for k in range(4)])
    with pytest.raises(InputError, match="not a valid tone"):
        part.evaluate(OP, lo, [ToneInput(0.0, -30.0)])
    with pytest.raises(InputError, match="not a valid tone"):
        part.evaluate(OP, ToneInput(2.1e9, math.nan), [])


def test_three_rf_tones() -> None:
    part = load_part("kx-2417")
    tones = [ToneInput(2.2e9, -30.0), ToneInput(2.201e9, -30.0), ToneInput(2.203e9, -30.0)]
    resp = part.evaluate(OP, ToneInput(2.1e9, 0.0), tones)
    orders = {p.orders: p for p in resp.if_port}
    assert orders[(-1, 1, -1, 1)].freq_hz == pytest.approx(102e6, abs=1e-3)
    assert resp.notes["rf_grid_points"] >= 8**3


def test_evaluation_is_deterministic_and_cache_transparent() -> None:
    part = load_part("kx-2417")
    args = (OP, ToneInput(2.1e9, 0.0), [ToneInput(2.2e9, -25.0), ToneInput(2.2e9 + 10.0, -25.0)])
    first = part.evaluate(*args)
    fresh = load_part("kx-2417").evaluate(*args)
    assert first.if_port == fresh.if_port
    assert part.evaluate(*args) == first


def test_vt_in_notes_follows_die_temperature() -> None:
    resp = load_part("ideal").evaluate(OperatingPoint(temperature_c=85.0), None, [])
    assert resp.notes["vt_v"] == pytest.approx(thermal_voltage_v(85.0))


def test_tone_spacing_does_not_change_the_cost() -> None:
    """10 Hz and 10 MHz two-tone spacing at 2.2 GHz: same grid sizes, same IM3 level."""
    part = load_part("kx-2417")
    lo = ToneInput(2.1e9, 0.0)
    results = []
    for spacing in (10.0, 10e6):
        tones = [ToneInput(2.2e9, -30.0), ToneInput(2.2e9 + spacing, -30.0)]
        resp = part.evaluate(OP, lo, tones)
        im3 = line_power_dbm(resp.if_port, 100e6 - spacing)
        fund = line_power_dbm(resp.if_port, 100e6)
        results.append((resp.notes["rf_grid_points"], resp.notes["lo_grid_n"], fund - im3))
    assert results[0][:2] == results[1][:2]
    # only the band edges differ (the second tone at 2.21 GHz, the IM3 line at 90 MHz)
    assert results[0][2] == pytest.approx(results[1][2], abs=0.05)
