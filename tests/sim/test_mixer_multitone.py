"""Phase-grid multi-tone evaluation against a brute-force time-domain simulation."""

import math

import numpy as np
import pytest

from sweeprig.sim.mixer.core import thermal_voltage_v
from sweeprig.sim.mixer.multitone import (
    CellState,
    cell_lines,
    combine,
    lo_factor,
    rf_factor,
    rf_grid_shape,
)

VT = thermal_voltage_v(25.0)


def _pair_fraction_bisect(v: np.ndarray, cell: CellState) -> np.ndarray:
    """x from v = 2·VT·atanh(x) + x·I_EE·R_E by bisection (independent of the model's Newton)."""
    lo = np.full(v.shape, -1.0)
    hi = np.full(v.shape, 1.0)
    b = cell.i_ee_a * cell.r_e_ohm
    for _ in range(70):
        mid = 0.5 * (lo + hi)
        with np.errstate(divide="ignore"):
            f = 2 * cell.vt_v * np.arctanh(mid) + b * mid - v
        below = f < 0
        lo = np.where(below, mid, lo)
        hi = np.where(below, hi, mid)
    return 0.5 * (lo + hi)


def _brute_force(
    cell: CellState,
    lo_bins: int,
    lo_amps: list[float],
    lo_phase: float,
    rf_bins: list[int],
    rf_amps: list[list[float]],
    rf_phases: list[float],
    n: int = 8192,
) -> np.ndarray:
    """Complex line amplitudes (peak A) at bins 0..n/2 of one full period of a commensurate
    plan, from the cell's time-domain equations out = I_C1·t1 − I_C2·t2."""
    t = np.arange(n) / n
    v_lo = sum(a * np.cos(h * (2 * np.pi * lo_bins * t + lo_phase))
               for h, a in enumerate(lo_amps, start=1))
    v_rf = np.zeros(n)
    for bins, amps, phase in zip(rf_bins, rf_amps, rf_phases, strict=True):
        v_rf = v_rf + sum(a * np.cos(h * (2 * np.pi * bins * t + phase))
                          for h, a in enumerate(amps, start=1))
    if cell.r_e_ohm:
        x = _pair_fraction_bisect(v_rf + cell.v_os_rf_v, cell)
    else:
        x = np.tanh((v_rf + cell.v_os_rf_v) / (2 * cell.vt_v))
    i_c1 = cell.i_ee_a * (1 + x) / 2
    i_c2 = cell.i_ee_a * (1 - x) / 2
    t1 = np.tanh((v_lo + cell.v_os1_v) / (2 * cell.vt_v))
    t2 = np.tanh((v_lo + cell.v_os2_v) / (2 * cell.vt_v))
    out = i_c1 * t1 - i_c2 * t2
    return 2 * np.fft.rfft(out) / n


CASES = {
    # name: (cell, LO bin, LO amps, LO phase, RF bins, RF amps, RF phases)
    "balanced": (
        CellState(VT, 4e-3), 10, [3.0 * 2 * VT], 0.4, [11, 13],
        [[0.15 * 2 * VT], [0.12 * 2 * VT]], [1.1, -0.7],
    ),
    "degenerated-mismatched-harmonics": (
        CellState(VT, 8e-3, 18.0, 1.5e-3, 0.5e-3, 2e-3), 10, [0.12, 0.004], -0.3, [11, 13],
        [[0.03, 0.0006], [0.025]], [0.5, 2.0],
    ),
    # small-integer plan: many products of different orders share a frequency
    "coincident": (
        CellState(VT, 6e-3, 6.0, 1e-3, -0.6e-3, 1.2e-3), 4, [0.09], 0.9, [6, 7],
        [[0.02], [0.018]], [-1.3, 0.35],
    ),
}


@pytest.mark.parametrize("name", list(CASES))
def test_multitone_agrees_with_time_domain(name: str) -> None:
    cell, lo_bin, lo_amps, lo_phase, rf_bins, rf_amps, rf_phases = CASES[name]
    reference = _brute_force(cell, lo_bin, lo_amps, lo_phase, rf_bins, rf_amps, rf_phases)
    lines = cell_lines(cell, lo_amps, float(lo_bin), lo_phase, rf_amps,
                       [float(b) for b in rf_bins], rf_phases, max_lo_order=60, max_rf_order=15)
    strongest = float(np.abs(reference[1:]).max())
    threshold = strongest * 10 ** (-100 / 20)  # every line above −100 dBc
    model = {round(f): a for f, a in zip(lines.freq_hz, lines.amp, strict=True)}
    assert all(abs(f - round(f)) < 1e-9 for f in lines.freq_hz)
    checked = 0
    for k in range(1, reference.size):
        if abs(reference[k]) > threshold:
            assert k in model, f"bin {k} missing from the model"
            err_db = 20 * math.log10(abs(model[k]) / abs(reference[k]))
            assert err_db == pytest.approx(0.0, abs=0.01), f"bin {k}: {err_db:.4f} dB"
            if abs(reference[k]) > strongest * 1e-3:
                phase = np.angle(model[k] / reference[k])
                assert phase == pytest.approx(0.0, abs=1e-3), f"bin {k} phase"
            checked += 1
    for k, amp in model.items():
        if abs(amp) > threshold:
            assert abs(reference[k]) > 0.5 * abs(amp), f"model line at bin {k} not in reference"
    assert checked > 50


def test_coincident_case_really_has_coinciding_products() -> None:
    """Make sure the "coincident" case tests complex addition: at least one line gets two
    contributions of comparable size (within 20 dB, both above −60 dBc)."""
    cell, lo_bin, lo_amps, lo_phase, rf_bins, rf_amps, rf_phases = CASES["coincident"]
    lo = lo_factor(lo_amps, cell, 60)
    rf = rf_factor(rf_amps, cell, 15)
    raw = combine(lo, float(lo_bin), lo_phase, rf, [float(b) for b in rf_bins], rf_phases,
                  cell.i_ee_a, 60, 15)
    strongest = float(np.abs(raw.amp).max())
    by_bin: dict[int, list[float]] = {}
    for f, a in zip(raw.freq_hz, raw.amp, strict=True):
        if abs(a) > strongest * 1e-3:
            by_bin.setdefault(round(f), []).append(abs(a))
    pairs = [v for v in by_bin.values() if len(v) > 1 and sorted(v)[-2] > 0.1 * max(v)]
    assert pairs


def test_grid_size_does_not_depend_on_tone_spacing() -> None:
    """Cost is set by the amplitudes only: 10 Hz and 10 MHz spacing at 2 GHz use the same
    grid and give the same relative IM3."""
    cell = CellState(VT, 8e-3, 18.0)
    amps = [[0.02], [0.02]]
    shape, converged = rf_grid_shape(amps, cell, 9)
    assert converged
    lo = lo_factor([0.4], cell, 15)
    rf = rf_factor(amps, cell, 9, shape)
    results = []
    for spacing in (10.0, 10e6):
        f1, f2 = 2.0e9, 2.0e9 + spacing
        lines = combine(lo, 1.9e9, 0.0, rf, [f1, f2], [0.0, 0.0], cell.i_ee_a, 15, 9)
        amp = {o: abs(a) for o, a in zip(lines.orders, lines.amp, strict=True)}
        results.append(amp[(-1, 2, -1)] / amp[(-1, 1, 0)])
    assert results[0] == pytest.approx(results[1], rel=1e-12)


def test_grid_grows_with_drive_and_meets_the_alias_tolerance() -> None:
    cell = CellState(VT, 4e-3)
    small, _ = rf_grid_shape([[0.005]], cell, 9)
    large, converged = rf_grid_shape([[0.5]], cell, 9)
    assert large[0] > small[0] and converged
    x = rf_factor([[0.5]], cell, 9)
    doubled = rf_factor([[0.5]], cell, 9, (2 * large[0],))
    np.testing.assert_allclose(x.x, doubled.x, atol=1e-8 * float(np.abs(x.x).max()))


def test_no_lo_and_no_rf() -> None:
    cell = CellState(VT, 4e-3, 0.0, 1e-3, 0.0, 2e-3)
    # LO alone: leakage at the LO and its harmonics (the RF pair's offset unbalances the quad)
    lines = cell_lines(cell, [0.3], 1e9, 0.0, [], [], [])
    assert lines.orders[0] == (1,) and lines.freq_hz[0] == 1e9
    # RF alone: no LO → no commutation; the quad offsets pass some RF straight through
    lines = cell_lines(cell, [], 0.0, 0.0, [[0.01]], [2e9], [0.0])
    assert (0, 1) in set(lines.orders)
    assert all(o[0] == 0 for o in lines.orders)
    # a balanced cell with neither gives nothing
    assert cell_lines(CellState(VT, 4e-3), [], 0.0, 0.0, [], [], []).freq_hz.size == 0
