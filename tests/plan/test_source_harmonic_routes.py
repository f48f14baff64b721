"""Every route a source's harmonic takes to the part's output, and the planner's bound on each.

The frequency plan is m·f_LO + n·f_RF (a line of LO order m and RF order n sits at
|m·f_LO + n·f_RF|). The levels are bounds derived in sweeprig.plan.margins; the switching
bounds are checked here against the Fourier series of the switching waveform, computed with
numpy's FFT, and the whole prediction against the simulated bench's truth
(sweeprig.sim.truth: what the sources' harmonics truly add to each line).
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

from sweeprig.engine.sim_specs import (
    LOWPASS_BAND_RATIO,
    butterworth_rejection_db,
    figures_toml,
    filtered_harmonics_dbc,
    with_sim_figures,
)
from sweeprig.formats.bench import load_bench
from sweeprig.formats.sequence import load_sequence
from sweeprig.plan import iter_points
from sweeprig.plan import margins as mg
from sweeprig.sim.bench import load_sim_bench_description
from sweeprig.sim.truth import Drive, nearest_line, port_lines

ROOT = Path(__file__).resolve().parents[2]
SIM_BENCH = ROOT / "sequences" / "benches" / "sim.toml"
CASES = ROOT / "tests" / "planted" / "cases"

F_LO, F_RF, P_RF, GAIN = 2.1e9, 2.2e9, -18.0, 12.5
ISO_RF_IF = 30.0
TONE = mg.HarmonicTone(F_RF, P_RF, (-20.0, -30.0), "rf")
CLEAN_TONE = mg.HarmonicTone(F_RF, P_RF, (), "rf")


def _at(lines: list[mg.Line], freq_hz: float, label: str = "") -> list[float]:
    return [ln.level_dbm for ln in lines if abs(ln.freq_hz - freq_hz) < 1.0 and label in ln.label]


# -- the switching waveform's Fourier lines (numpy FFT) -----------------------------------------


def _switching_lines(lo_wave: np.ndarray) -> np.ndarray:
    """|Fourier coefficients| of the hard-switched quad's ±1 waveform sign(LO)."""
    return np.abs(np.fft.rfft(np.sign(lo_wave)) / lo_wave.size)


def test_odd_switching_lines_fall_as_one_over_m() -> None:
    # square-wave Fourier series: line m is 1/m of the fundamental (odd m), even lines none
    theta = 2 * np.pi * (np.arange(1 << 16) + 0.5) / (1 << 16)
    c = _switching_lines(np.cos(theta))
    for m in (3, 5, 7):
        assert 20 * math.log10(c[m] / c[1]) == pytest.approx(-20 * math.log10(m), abs=0.01)
        assert mg.lo_order_conversion_db(m, GAIN, -ISO_RF_IF) == pytest.approx(
            GAIN - 20 * math.log10(m))
    assert c[2] / c[1] < 1e-6 and c[0] / c[1] < 1e-6


def test_an_even_lo_harmonic_makes_every_even_line_at_most_its_own_level() -> None:
    # sign(cos θ + a·cos 2θ): the crossings move by up to a, every even line (DC included)
    # up to a times the fundamental: the bound of the route "LO harmonic as an LO"
    theta = 2 * np.pi * (np.arange(1 << 16) + 0.5) / (1 << 16)
    for dbc in (-20.0, -35.0):
        a = 10 ** (dbc / 20)
        for phase in np.linspace(0, np.pi, 7):
            c = _switching_lines(np.cos(theta) + a * np.cos(2 * theta + phase))
            for m in (0, 2, 4, 6):
                assert 20 * math.log10(max(c[m], 1e-300) / c[1]) <= dbc + 0.1
        c = _switching_lines(np.cos(theta) + a * np.cos(2 * theta))
        assert 20 * math.log10(c[0] / c[1]) == pytest.approx(dbc, abs=0.2)  # reached: cos phase


def test_an_asymmetric_quad_makes_all_even_lines_alike() -> None:
    # a switching offset ε: duty cycle 1/2 + ε/π, every even line about as strong as DC (the
    # straight RF feedthrough that the RF->IF isolation states)
    theta = 2 * np.pi * (np.arange(1 << 16) + 0.5) / (1 << 16)
    c = _switching_lines(np.cos(theta) - 0.01)
    for m in (2, 4, 6):
        assert 20 * math.log10(c[m] / c[0]) == pytest.approx(0.0, abs=0.1)
    assert mg.lo_order_conversion_db(2, GAIN, -ISO_RF_IF) == -ISO_RF_IF


# -- the routes ---------------------------------------------------------------------------------


def test_rf_harmonic_with_odd_and_even_lo_orders() -> None:
    lines = mg.source_harmonic_lines(F_LO, (), [TONE], GAIN, -ISO_RF_IF)
    # (m, n) = (1, -2) at |2.1 - 4.4| = 2.3 GHz: P + R_2 + gain
    assert max(_at(lines, 2.3e9, "x lo order 1")) == pytest.approx(P_RF - 20 + GAIN)
    # (3, -2) at 6.3 - 4.4 = 1.9 GHz: P + R_2 + gain - 20·log10 3
    assert max(_at(lines, 1.9e9, "x lo order 3")) == pytest.approx(
        P_RF - 20 + GAIN - 20 * math.log10(3))
    # (2, -2) at 4.4 - 4.2 = 200 MHz through the clean LO's even order: P + R_2 - isolation
    assert max(_at(lines, 0.2e9, "harmonic 2 x lo order 2")) == pytest.approx(
        P_RF - 20 - ISO_RF_IF)
    # (0, 2) straight through: P + R_2 - isolation
    assert max(_at(lines, 4.4e9, "x lo order 0")) == pytest.approx(P_RF - 20 - ISO_RF_IF)
    # no harmonics, no lines
    assert mg.source_harmonic_lines(F_LO, (), [CLEAN_TONE], GAIN, -ISO_RF_IF) == []


def test_even_lo_harmonic_acts_as_an_lo() -> None:
    lines = mg.source_harmonic_lines(F_LO, (-20.0, -30.0), [CLEAN_TONE], GAIN, -ISO_RF_IF)
    wanted = P_RF + GAIN
    # (2, -1) at 4.2 - 2.2 = 2.0 GHz and the RF feedthrough (0, 1) at 2.2 GHz: wanted + L_2
    assert max(_at(lines, 2.0e9, "lo harmonic 2")) == pytest.approx(wanted - 20)
    assert max(_at(lines, 2.2e9, "lo harmonic 2")) == pytest.approx(wanted - 20)
    assert max(_at(lines, 6.2e9, "lo harmonic 2")) == pytest.approx(wanted - 20)  # (4, -1)
    # the odd 3rd harmonic makes no line of its own (it scales the odd-order lines)
    assert not [ln for ln in lines if "lo harmonic 3" in ln.label]
    # with the RF harmonic too: (2, -2) at 200 MHz is wanted + L_2 + R_2
    both = mg.source_harmonic_lines(F_LO, (-20.0,), [TONE], GAIN, -ISO_RF_IF)
    assert max(_at(both, 0.2e9, "lo harmonic 2")) == pytest.approx(wanted - 40)


def test_harmonic_with_its_fundamental_in_the_input_stage() -> None:
    # second-order product of the 2nd harmonic and the fundamental at 3·f: P + R_2 + P - IIP2
    # (Razavi, nonlinearity chapter), converted like the RF: (1, -3) at 6.6 - 2.1 = 4.5 GHz
    lines = mg.source_harmonic_lines(F_LO, (), [TONE], GAIN, -ISO_RF_IF, iip2_dbm=20.0)
    got = _at(lines, 4.5e9, "with its fundamental, x lo order 1")
    assert max(got) == pytest.approx(P_RF - 20 + P_RF - 20.0 + GAIN)


def test_contributions_that_scale_the_parts_own_line() -> None:
    tones = [mg.HarmonicTone(F_RF, -10.0, (-20.0,), "rf")]
    # an odd LO harmonic on an odd LO order: L_h + 20·log10 m
    assert mg.source_harmonic_relative_dbc(3, (-1,), (-60.0, -30.0), []) == pytest.approx(
        -30 + 20 * math.log10(3))
    assert mg.source_harmonic_relative_dbc(2, (-1,), (-60.0, -30.0), []) == -math.inf
    # the 2nd harmonic with the fundamental on RF order ±1: R_2 + P - IIP2
    assert mg.source_harmonic_relative_dbc(2, (-1,), (), tones, iip2_dbm=30.0) == \
        pytest.approx(-20 - 10 - 30)
    assert mg.source_harmonic_relative_dbc(2, (-2,), (), tones) == -math.inf


# -- the planner against the simulated bench's truth --------------------------------------------


def _planned_and_true(case: str) -> list[tuple[object, object]]:
    """Each IF reading of a planted case's first points with the truth at its frequency."""
    folder = CASES / case
    description = load_sim_bench_description(folder / "sim-bench.toml")
    bench = with_sim_figures(load_bench(SIM_BENCH), description)
    sequence = load_sequence(folder / "sequence.toml")
    out = []
    for point in iter_points(sequence, bench):
        # source levels: the DUT-plane powers plus the bench file's path losses
        drive = Drive(lo_freq_hz=point.lo_freq_hz, lo_power_dbm=point.lo_power_dbm + 2.0,
                      rf_freq_hz=point.rf_freq_hz, rf_power_dbm=point.rf_power_dbm + 3.0)
        lines = port_lines(description, drive, "if")
        for reading in point.readings:
            if reading.instrument == "sa" and reading.port == "if" and not reading.rf_retune_hz:
                out.append((reading, nearest_line(lines, reading.freq_hz, 1.0)))
    return out


@pytest.mark.parametrize("case", ["source-harmonic-spurs", "source-harmonic-isolation"])
def test_every_reading_the_harmonics_truly_spoil_carries_the_risk(case: str) -> None:
    checked = 0
    for reading, truth in _planned_and_true(case):
        if truth is None:
            continue
        own = max(truth.part_dbm, truth.leakage_dbm)
        if truth.source_harmonic_dbm > own - 20.0:  # within the distortion margin
            checked += 1
            assert "source_harmonic" in reading.risks, (reading.name, truth)
            # and the planner's level is a bound on the true contribution
            assert reading.predicted.source_harmonic_dbm >= truth.source_harmonic_dbm, (
                reading.name, truth)
    assert checked >= 2


def test_the_lines_that_were_missed_now_carry_the_risk() -> None:
    got = {r.name: r for r, _ in _planned_and_true("source-harmonic-spurs")}
    for name in ("mxn.2x-2", "mxn.2x-1", "mxn.0x1"):  # 75, 30 and 16 dB off on the bench
        assert "source_harmonic" in got[name].risks, name
    for name in ("mxn.1x-1", "mxn.1x1", "mxn.3x-1"):  # the part's own strong lines
        assert "source_harmonic" not in got[name].risks, name


def test_filtered_sources_carry_no_risk() -> None:
    got = [r for r, _ in _planned_and_true("source-harmonic-filtered")]
    assert got and not [r.name for r in got if "source_harmonic" in r.risks]


# -- the written bench file states harmonics after the filters ----------------------------------


def test_filtered_harmonics_follow_the_butterworth_rejection() -> None:
    # 10·log10(1 + (f/f_c)^(2N)) (Pozar, filter design chapter), at corner / 1.25
    corner, order = 2.6e9, 15
    f = corner / LOWPASS_BAND_RATIO
    assert butterworth_rejection_db(corner, corner, order) == pytest.approx(
        10 * math.log10(2.0))
    second, third = filtered_harmonics_dbc((-35.0, -45.0), corner, order)
    expect2 = -35.0 - (10 * math.log10(1 + 1.6 ** 30) - 10 * math.log10(1 + 0.8 ** 30))
    assert second == pytest.approx(expect2)
    assert third < second
    # the band's lowest fundamental is the worst case: higher ones are rejected more
    assert butterworth_rejection_db(2 * corner, corner, order) - butterworth_rejection_db(
        corner, corner, order) > butterworth_rejection_db(2 * f, corner, order)\
        - butterworth_rejection_db(f, corner, order)


def test_the_written_bench_file_states_the_filtered_levels() -> None:
    description = load_sim_bench_description(CASES / "source-harmonic-filtered" /
                                             "sim-bench.toml")
    bench = with_sim_figures(load_bench(SIM_BENCH), description)
    for role in ("rf", "lo"):
        levels, assumed = bench.source_harmonics_dbc(role)
        assert not assumed and levels[0] < -90.0
    assert bench.source_harmonics_dbc("rf2")[0] == (-35.0, -45.0)  # no filter there
    text = figures_toml(description)
    assert "after its low-pass (corner 2.6 GHz, order 15)" in text
    unfiltered = load_sim_bench_description(CASES / "source-harmonic-spurs" / "sim-bench.toml")
    assert with_sim_figures(load_bench(SIM_BENCH), unfiltered).source_harmonics_dbc("lo")[0] \
        == (-20.0, -30.0)
