"""The simulated noise source, the part's noise conversion and the RMS detector."""

from __future__ import annotations

import math

import numpy as np
import pytest

from sweeprig.sim.analyzer_display import (
    BOLTZMANN_J_PER_K,
    T0_K,
    AnalyzerParams,
    InputSpectrum,
    SweepSettings,
    simulate_sweep,
)
from sweeprig.sim.mixer import load_part
from sweeprig.sim.mixer.core import thermal_voltage_v
from sweeprig.sim.noise_source import (
    NoiseSourceModel,
    density_mw_per_hz,
    mixer_output_density_mw,
    noise_factors,
)
from sweeprig.sim.noise_truth import part_noise_figure


def test_square_wave_folding_gives_the_commutating_floor() -> None:
    # Field notes (Razavi; Lee): a ±1 square wave has Fourier terms (4/π)·cos(nωt)/n, n odd.
    # Each band n·f_LO ± f_IF converts with power weight (2/(π·n))²; both sidebands of all
    # odd n sum to 1 (Σ 1/n² over odd n = π²/8), the signal band alone is 4/π².
    n = np.arange(1, 200001, 2, dtype=float)
    total = 2.0 * np.sum((2.0 / (math.pi * n)) ** 2)
    assert total == pytest.approx(1.0, abs=1e-5)
    floor_db = 10.0 * math.log10(total / (4.0 / math.pi**2))
    assert floor_db == pytest.approx(3.92, abs=0.01)


def test_ideal_part_is_at_or_above_the_physical_floor() -> None:
    part = load_part("ideal")
    # Gray & Meyer: g_m = I_C/VT per transistor; each adds 2kT/g_m of input voltage noise
    # (shot noise 2qI_C referred through g_m²), so the pair's R_n = 1/g_m (derived).
    gm = (part.tail_current_a / 2.0) / thermal_voltage_v(part.reference_temperature_c)
    bound_db = 10.0 * math.log10(math.pi**2 / 4.0 * (1.0 + (1.0 / gm) / 100.0))
    assert part.noise_figure_db >= bound_db
    assert part.noise_figure_db - bound_db < 0.5  # "ideal": close to the bound


def test_y_factor_of_the_model_recovers_its_dsb_noise_figure() -> None:
    # Y = N_hot/N_cold and F = (ENR − Y·(Tc/T0 − 1))/(Y − 1) (field notes, Y-factor).
    part_mw, g_s, g_i = 10 ** ((-174.0 + 10.0 + 12.0) / 10.0), 10 ** 1.2, 10 ** 1.18
    enr_db, t_cold = 15.0, 296.15
    t_hot = T0_K * (1.0 + 10 ** (enr_db / 10.0))
    n_hot = mixer_output_density_mw(part_mw, t_hot, t_hot, g_s, g_i)
    n_cold = mixer_output_density_mw(part_mw, t_cold, t_cold, g_s, g_i)
    y = float(n_hot / n_cold)
    enr = 10 ** (enr_db / 10.0)
    f = (enr - y * (t_cold / T0_K - 1.0)) / (y - 1.0)
    f_ssb, f_dsb = noise_factors(part_mw, g_s, g_i)
    assert f == pytest.approx(f_dsb, rel=1e-9)
    assert 10 * math.log10(f_ssb / f_dsb) == pytest.approx(10 * math.log10(1 + g_i / g_s))


def test_noise_source_temperatures() -> None:
    ns = NoiseSourceModel(enr_points=((1e9, 15.0), (3e9, 14.0)), ambient_c=23.0)
    assert float(ns.temperature_k(2e9, on=True)[()]) == pytest.approx(
        T0_K * (1 + 10 ** 1.45))
    assert float(ns.temperature_k(2e9, on=False)[()]) == pytest.approx(296.15)
    assert ns.is_on(28.0) and not ns.is_on(12.0)
    # kT0 = -173.98 dBm/Hz (field notes; Pozar)
    assert 10 * math.log10(float(density_mw_per_hz(T0_K))) == pytest.approx(-173.98, abs=0.01)
    assert BOLTZMANN_J_PER_K == 1.380649e-23


def test_noise_figure_rises_as_lo_drive_falls() -> None:
    part = load_part("kx-2417")
    nf = [part_noise_figure(part, temperature_c=25.0, supply_v=3.3, lo_freq_hz=2.33e9,
                            lo_power_dbm=p, rf_freq_hz=2.4e9).dsb_db for p in (6.0, 0.0, -6.0)]
    assert nf[0] < nf[1] < nf[2]
    truth = part_noise_figure(part, temperature_c=25.0, supply_v=3.3, lo_freq_hz=2.33e9,
                              lo_power_dbm=0.0, rf_freq_hz=2.4e9)
    assert truth.ssb_db - truth.dsb_db == pytest.approx(
        10 * math.log10(1 + 10 ** (truth.image_to_signal_db / 10)), abs=1e-9)


def test_rms_detector_reads_mean_power_and_log_detector_does_not_jitter_more() -> None:
    params = AnalyzerParams(noise_figure_db=14.0, phase_noise=())
    spectrum = InputSpectrum((), -150.0)
    rng = np.random.default_rng(3)
    rms = SweepSettings(70e6, 70e6, points=1001, rbw_hz=3e6, attenuation_db=0.0, averages=20,
                        detector="rms")
    means = []
    for _ in range(20):
        trace = simulate_sweep(spectrum, rms, params, rng).trace_dbm
        means.append(10 * math.log10(np.mean(10 ** (trace / 10))))
    expected = simulate_sweep(spectrum, rms, params, rng)._noise_mw(np.array([70e6]))[0]
    assert np.mean(means) == pytest.approx(10 * math.log10(expected), abs=0.02)
    assert np.std(means) < 0.03  # about 1/sqrt(64,000 samples): 0.017 dB
