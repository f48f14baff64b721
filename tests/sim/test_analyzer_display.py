"""The analyzer display model: filter shape, noise floor, first-mixer distortion, flags."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import quad

from sweeprig.sim.analyzer_display import (
    GAUSSIAN_ENBW_PER_RBW,
    AnalyzerParams,
    InputSpectrum,
    SweepSettings,
    danl_dbm,
    first_mixer_lines,
    simulate_sweep,
    sweep_time_s,
    total_sweep_time_s,
)

PARAMS = AnalyzerParams(noise_figure_db=14.0, toi_dbm=15.0, shi_dbm=45.0, p1db_dbm=3.0)


def _rng(seed: int = 7) -> np.random.Generator:
    return np.random.default_rng(seed)


def _kt0_dbm_per_hz() -> float:
    # Boltzmann constant exact since 2019 (CODATA); T0 = 290 K (IEEE noise figure definition)
    return 10.0 * math.log10(1.380649e-23 * 290.0 / 1e-3)


def test_tone_reads_its_level_and_filter_is_minus_3db_at_half_rbw() -> None:
    settings = SweepSettings.centered(70e6, 200e3, rbw_hz=10e3, vbw_hz=10e3, attenuation_db=10.0)
    result = simulate_sweep(InputSpectrum(((70e6, -20.0),)), settings, PARAMS, _rng())
    assert result.level_at(70e6) == pytest.approx(-20.0, abs=0.01)
    # Gaussian RBW filter, -3 dB at ±RBW/2 (definition of the 3 dB bandwidth)
    assert result.level_at(70e6 + 5e3) == pytest.approx(-20.0 - 10 * math.log10(2), abs=0.01)
    assert result.level_at(70e6 - 5e3) == pytest.approx(-20.0 - 10 * math.log10(2), abs=0.01)


def test_peak_is_refined_between_trace_points() -> None:
    # 101 points over 1 MHz: 10 kHz per point; the tone sits 3.7 kHz off a point
    settings = SweepSettings.centered(
        100e6, 1e6, points=101, rbw_hz=30e3, vbw_hz=30e3, attenuation_db=10.0
    )
    result = simulate_sweep(InputSpectrum(((100.0037e6, -30.0),)), settings, PARAMS, _rng())
    freq, level = result.peak()
    assert freq == pytest.approx(100.0037e6, abs=50.0)
    assert level == pytest.approx(-30.0, abs=0.01)


@pytest.mark.parametrize(("rbw_hz", "att_db"), [(1e3, 0.0), (10e3, 10.0), (1e6, 20.0)])
def test_averaged_noise_floor_follows_ktb_plus_nf_plus_attenuation(
    rbw_hz: float, att_db: float
) -> None:
    settings = SweepSettings.centered(
        1e9, 100 * rbw_hz, rbw_hz=rbw_hz, vbw_hz=rbw_hz, attenuation_db=att_db, averages=16
    )
    result = simulate_sweep(InputSpectrum(), settings, PARAMS, _rng())
    # Pozar, noise chapter: kTB = -174 dBm/Hz + 10·log10(B); IEEE NF at T0 = 290 K
    expected = -174.0 + 10.0 * math.log10(rbw_hz) + 14.0 + att_db
    assert float(np.mean(result.trace_dbm)) == pytest.approx(expected, abs=0.5)
    assert danl_dbm(settings, PARAMS) == pytest.approx(expected, abs=0.05)


def test_danl_scales_with_rbw() -> None:
    narrow = SweepSettings(1e9, 1.001e9, rbw_hz=1e3, vbw_hz=1e3)
    wide = SweepSettings(1e9, 1.001e9, rbw_hz=100e3, vbw_hz=100e3)
    # DANL scales 10·log10(RBW2/RBW1) (follows from kTB; Pozar)
    assert danl_dbm(wide, PARAMS) - danl_dbm(narrow, PARAMS) == pytest.approx(20.0, abs=1e-9)


def test_single_sweep_noise_spread_and_averaging() -> None:
    single = SweepSettings(1e9, 1.01e9, points=10001, rbw_hz=1e3, vbw_hz=1e3)
    spread_1 = float(np.std(simulate_sweep(InputSpectrum(), single, PARAMS, _rng()).trace_dbm))
    # log-detected Rayleigh noise: std of 10·log10(Exp(1)) = (10/ln10)·pi/sqrt(6) = 5.57 dB
    # (derived from the log of an exponential variate)
    assert spread_1 == pytest.approx(10 / math.log(10) * math.pi / math.sqrt(6), abs=0.3)
    averaged = SweepSettings(1e9, 1.01e9, points=10001, rbw_hz=1e3, vbw_hz=1e3, averages=16)
    spread_16 = float(np.std(simulate_sweep(InputSpectrum(), averaged, PARAMS, _rng()).trace_dbm))
    assert spread_16 == pytest.approx(spread_1 / 4.0, rel=0.15)
    many = SweepSettings(1e9, 1.01e9, points=10001, rbw_hz=1e3, vbw_hz=1e3, averages=400)
    spread_400 = float(np.std(simulate_sweep(InputSpectrum(), many, PARAMS, _rng()).trace_dbm))
    assert spread_400 == pytest.approx(spread_1 / 20.0, rel=0.15)


def test_input_noise_density_adds_over_the_noise_bandwidth() -> None:
    rbw_hz = 10e3
    settings = SweepSettings.centered(
        70e6, 1e6, rbw_hz=rbw_hz, vbw_hz=rbw_hz, attenuation_db=0.0, averages=32
    )
    # -120 dBm/Hz over ENBW = sqrt(pi/(4 ln2))·RBW (Gaussian, derived) is far above the DANL
    result = simulate_sweep(InputSpectrum((), -120.0), settings, PARAMS, _rng())
    enbw = GAUSSIAN_ENBW_PER_RBW * rbw_hz
    # ENBW of the power response 2^-(2·df/RBW)², integrated numerically (definition of ENBW)
    integral, _ = quad(lambda x: 2.0 ** (-((2.0 * x) ** 2)), -np.inf, np.inf)
    assert math.isclose(GAUSSIAN_ENBW_PER_RBW, integral, rel_tol=1e-9)
    own = danl_dbm(settings, PARAMS)
    expected = 10 * math.log10(10 ** ((-120 + 10 * math.log10(enbw)) / 10) + 10 ** (own / 10))
    assert float(np.mean(result.trace_dbm)) == pytest.approx(expected, abs=0.3)


def test_input_noise_density_may_depend_on_frequency() -> None:
    def density(freqs_hz: np.ndarray) -> np.ndarray:
        return np.where(np.abs(freqs_hz - 70e6) < 10e6, -130.0, -200.0)

    settings = SweepSettings(50e6, 90e6, rbw_hz=100e3, vbw_hz=100e3, attenuation_db=0.0)
    result = simulate_sweep(InputSpectrum((), density), settings, PARAMS, _rng())
    inside = result.level_at(70e6)
    outside = result.level_at(52e6)
    assert inside - outside > 20.0


def _two_tone(att_db: float, dut_im3_dbm: float | None) -> tuple[float, float]:
    """Displayed IM3 at 2f1-f2 and the tone at f1 for two -5 dBm tones (70, 71 MHz)."""
    lines = [(70e6, -5.0), (71e6, -5.0)]
    if dut_im3_dbm is not None:
        lines.append((69e6, dut_im3_dbm))
    settings = SweepSettings(
        68e6, 73e6, rbw_hz=1e3, vbw_hz=1e3, attenuation_db=att_db, averages=64
    )
    result = simulate_sweep(InputSpectrum(tuple(lines)), settings, PARAMS, _rng())
    return result.level_at(69e6), result.level_at(70e6)


def test_analyzer_made_im3_drops_20db_with_10db_more_attenuation() -> None:
    # At the mixer: P_IM3 = 2·P1 + P2 - 2·TOI (Razavi, intercept law); referred to the input by
    # adding the attenuation. -5 dBm tones, 10 dB att: 3·(-15) - 30 + 10 = -65 dBm.
    im3_10, tone_10 = _two_tone(10.0, None)
    im3_20, tone_20 = _two_tone(20.0, None)
    assert im3_10 == pytest.approx(3 * (-15.0) - 2 * 15.0 + 10.0, abs=0.2)
    # common practice, no source: an analyzer-made 3rd-order product drops ~20 dB per +10 dB
    assert im3_10 - im3_20 == pytest.approx(20.0, abs=0.5)
    assert tone_10 == pytest.approx(tone_20, abs=0.05)


def test_dut_im3_keeps_its_level_with_more_attenuation() -> None:
    # A DUT product 30 dB above the analyzer's own (-65 dBm) keeps its displayed level
    # (common practice, no source)
    # The analyzer's own product adds to the DUT's as a voltage with its own (seeded) phase:
    # a product r dB below moves the line by 20·log10(1 ± 10^(−r/20)) at most (vector sum of
    # two coherent signals). 30 dB below at 10 dB attenuation: −0.28..+0.27 dB; 50 dB below
    # at 20 dB: ±0.03 dB. The attenuation test sees the DUT's product stay put.
    im3_10, _ = _two_tone(10.0, -35.0)
    im3_20, _ = _two_tone(20.0, -35.0)
    assert -35.0 + 20 * math.log10(1 - 10 ** (-30 / 20)) - 0.01 <= im3_10
    assert im3_10 <= -35.0 + 20 * math.log10(1 + 10 ** (-30 / 20)) + 0.01
    assert im3_20 == pytest.approx(-35.0, abs=0.04)


def test_analyzer_made_second_order_products_drop_10db() -> None:
    lines = (((100e6, -10.0), (130e6, -10.0)))

    def displayed(att_db: float) -> tuple[float, float]:
        settings = SweepSettings(20e6, 300e6, points=2001, rbw_hz=100e3, vbw_hz=100e3,
                                 attenuation_db=att_db, averages=64)
        result = simulate_sweep(InputSpectrum(lines), settings, PARAMS, _rng())
        return result.level_at(230e6), result.level_at(200e6)

    im2_0, h2_0 = displayed(0.0)
    im2_10, h2_10 = displayed(10.0)
    # P_H2 = 2·P - SHI at the mixer; f1+f2 sits 20·log10(2) above it for equal tones (derived
    # from the square-law expansion)
    assert h2_0 == pytest.approx(2 * (-10.0) - 45.0, abs=0.3)
    assert im2_0 == pytest.approx(2 * (-10.0) - 45.0 + 6.02, abs=0.3)
    # common practice, no source: 2nd order drops ~10 dB per +10 dB attenuation
    assert im2_0 - im2_10 == pytest.approx(10.0, abs=0.5)
    assert h2_0 - h2_10 == pytest.approx(10.0, abs=0.5)


def test_first_mixer_compresses_by_1db_at_p1db() -> None:
    settings = SweepSettings(69e6, 71e6, rbw_hz=10e3, vbw_hz=10e3, attenuation_db=10.0)
    lines, mixer_dbm = first_mixer_lines([(70e6, 13.0)], settings, PARAMS)
    assert mixer_dbm == pytest.approx(3.0)
    assert lines[0] == (70e6, pytest.approx(12.0, abs=1e-9))
    small, _ = first_mixer_lines([(70e6, -30.0)], settings, PARAMS)
    assert small[0][1] == pytest.approx(-30.0, abs=0.01)


def test_overload_and_uncalibrated_flags() -> None:
    settings = SweepSettings(
        69e6, 71e6, rbw_hz=10e3, vbw_hz=10e3, attenuation_db=10.0, ref_level_dbm=0.0
    )
    quiet = simulate_sweep(InputSpectrum(((70e6, -20.0),)), settings, PARAMS, _rng())
    assert not quiet.overload and not quiet.uncalibrated
    hot = simulate_sweep(InputSpectrum(((70e6, 15.0),)), settings, PARAMS, _rng())
    assert hot.overload and hot.uncalibrated
    assert hot.mixer_level_dbm == pytest.approx(5.0)
    above_ref = SweepSettings(
        69e6, 71e6, rbw_hz=10e3, vbw_hz=10e3, attenuation_db=10.0, ref_level_dbm=-30.0
    )
    uncal = simulate_sweep(InputSpectrum(((70e6, -20.0),)), above_ref, PARAMS, _rng())
    assert uncal.uncalibrated and not uncal.overload


def test_sweep_time() -> None:
    # common practice, no source: sweep time ≈ k·span/RBW², k ≈ 2-3 (here 2.5)
    settings = SweepSettings(1e9, 1.1e9, rbw_hz=10e3, vbw_hz=10e3, averages=4)
    assert sweep_time_s(settings) == pytest.approx(2.5 * 100e6 / 10e3**2)
    assert total_sweep_time_s(settings) == pytest.approx(4 * 2.5)
    assert sweep_time_s(SweepSettings(1e9, 1.001e9, rbw_hz=1e6, vbw_hz=1e6)) == 1e-3
    zero_span = SweepSettings(1e9, 1e9, points=5001)
    assert sweep_time_s(zero_span) == pytest.approx(5001e-6)
    slow_video = SweepSettings(1e9, 1.1e9, rbw_hz=10e3, vbw_hz=1e3)
    assert sweep_time_s(slow_video) == pytest.approx(10 * 2.5)


def test_zero_span_reads_the_centre_line() -> None:
    settings = SweepSettings(70e6, 70e6, points=201, rbw_hz=10e3, vbw_hz=10e3, averages=1)
    result = simulate_sweep(InputSpectrum(((70e6, -40.0),)), settings, PARAMS, _rng())
    assert float(np.median(result.trace_dbm)) == pytest.approx(-40.0, abs=0.01)
    assert result.level_at(1.0) == pytest.approx(-40.0, abs=0.01)


def test_same_seed_same_trace() -> None:
    settings = SweepSettings(1e9, 1.01e9, rbw_hz=10e3, vbw_hz=10e3)
    spectrum = InputSpectrum(((1.005e9, -50.0),), -150.0)
    a = simulate_sweep(spectrum, settings, PARAMS, _rng(3)).trace_dbm
    b = simulate_sweep(spectrum, settings, PARAMS, _rng(3)).trace_dbm
    c = simulate_sweep(spectrum, settings, PARAMS, _rng(4)).trace_dbm
    np.testing.assert_array_equal(a, b)
    assert not np.array_equal(a, c)


def test_amplitude_error_shifts_everything() -> None:
    params = AnalyzerParams(amplitude_error_db=0.7)
    settings = SweepSettings(69e6, 71e6, rbw_hz=10e3, vbw_hz=10e3, attenuation_db=10.0)
    result = simulate_sweep(InputSpectrum(((70e6, -20.0),)), settings, params, _rng())
    assert result.level_at(70e6) == pytest.approx(-19.3, abs=0.01)


def test_a_reading_on_a_trace_point_is_the_reading_evaluated_there() -> None:
    """A marker exactly on a trace point takes the signal and the noise (without reciprocal
    mixing, which it evaluates at its own frequency) the sweep computed there: the same
    level as evaluating everything at that one frequency (within a rounding of the
    vectorised arithmetic), on and off the lines, with a frequency-dependent input noise
    and a strong line's reciprocal mixing; a reading between points is evaluated there."""
    settings = SweepSettings.centered(70e6, 20e6, points=1001, rbw_hz=100e3, vbw_hz=100e3)

    def density(f: np.ndarray) -> np.ndarray:
        return -165.0 + 2.0 * np.sin(np.asarray(f) / 3e6)

    spectrum = InputSpectrum.from_arrays(np.array([70e6, 70.3e6, 75e6]),
                                         np.array([-5.0, -60.0, -90.0]), density)
    sweep = simulate_sweep(spectrum, settings, PARAMS, _rng())
    for freq in (70e6, 70.3e6, 78.4e6, 61.6e6, 76e6, 60e6, 80e6):
        assert freq in sweep.freqs_hz
        f = np.array([freq])
        offset = float(np.interp(freq, sweep.freqs_hz, sweep._noise_offset_db))
        alone = 10.0 * math.log10(float((sweep._signal_mw(f) + sweep._noise_mw(f)
                                         * 10.0 ** (offset / 10.0))[0]))
        assert sweep.level_at(freq) == pytest.approx(alone, rel=1e-12, abs=1e-9)
    between = 70.01e6 + 1.0  # not a trace point: evaluated at its frequency
    assert between not in sweep.freqs_hz
    assert math.isfinite(sweep.level_at(between))
    # the lines' arrays and their tuples are the same numbers
    assert spectrum.lines == ((70e6, -5.0), (70.3e6, -60.0), (75e6, -90.0))
    assert simulate_sweep(InputSpectrum(spectrum.lines, density), settings, PARAMS,
                          _rng()).trace_dbm.tolist() == sweep.trace_dbm.tolist()


# --- the sweep's fast paths against the plain forms they replace (the same numbers, bit for
# bit: the simulated bench's readings must not move) -------------------------------------

def _busy_spectrum() -> tuple[InputSpectrum, SweepSettings]:
    """Lines in and around the span (a strong one with reciprocal mixing), a
    frequency-dependent input noise: every part of a sweep has work to do."""
    settings = SweepSettings.centered(70e6, 20e6, points=1001, rbw_hz=1e6, vbw_hz=1e6,
                                      attenuation_db=14.0)

    def density(f: np.ndarray) -> np.ndarray:
        return -160.0 + 3.0 * np.sin(np.asarray(f) / 2e6)

    freqs = np.array([59.8e6, 69.8e6, 79.8e6, 140e6, 2.3e9, 2.37e9])
    levels = np.array([-75.4, -9.4, -90.8, -60.0, -40.0, -30.0])
    return InputSpectrum.from_arrays(freqs, levels, density), settings


def test_the_trace_grid_is_linspace_made_once_and_read_only() -> None:
    settings = SweepSettings.centered(70e6, 20e6, points=1001)
    grid = settings.freqs_hz()
    assert np.array_equal(grid, np.linspace(settings.start_hz, settings.stop_hz, 1001))
    assert grid is SweepSettings.centered(70e6, 20e6, points=1001).freqs_hz()
    assert not grid.flags.writeable
    assert SweepSettings(70e6, 70e6, points=101).freqs_hz().tolist() == [70e6] * 101


def test_the_signal_on_a_grid_known_ascending_is_the_checked_path() -> None:
    from sweeprig.sim.analyzer_display import _displayed_arrays, _signal_mw_fn

    spectrum, settings = _busy_spectrum()
    line_f, line_dbm, _ = _displayed_arrays(spectrum.lines, settings, PARAMS,
                                            spectrum._line_arrays)
    signal = _signal_mw_fn(line_f, line_dbm, settings.rbw_hz, 0.0)
    grid = settings.freqs_hz()
    fast = signal(grid, ascending=True)
    assert fast.tolist() == signal(grid).tolist() == signal(np.array(grid)).tolist()
    assert fast.max() > 0.0


def test_one_sweeps_noise_offsets_are_the_mean_of_one_row_and_draw_the_same() -> None:
    from sweeprig.sim.analyzer_display import LOG_DETECTOR_BIAS_DB, _noise_offsets_db

    settings = SweepSettings.centered(70e6, 20e6, points=1001)
    fast_rng, plain_rng = _rng(11), _rng(11)
    fast = _noise_offsets_db(settings, fast_rng)
    plain = np.mean(10.0 * np.log10(plain_rng.standard_exponential((1, 1001))),
                    axis=0) + LOG_DETECTOR_BIAS_DB
    assert fast.tolist() == plain.tolist()
    assert fast_rng.random() == plain_rng.random()  # the same draws, in the same order


def test_the_reciprocal_mixings_decimation_is_the_plain_index_set() -> None:
    from sweeprig.sim.analyzer_display import _decimation

    for points, step in ((1001, 25), (1001, 2), (10001, 7), (101, 100), (65, 64)):
        plain = np.unique(np.append(np.arange(0, points, step), points - 1))
        assert _decimation(points, step).tolist() == plain.tolist()


def test_the_noise_base_skips_only_factors_of_one() -> None:
    """Without an amplitude error and an uncompressed input, the base noise is the plain
    product with both factors of one; with them, the factors apply."""
    from sweeprig.sim.analyzer_display import (
        KT0_DBM_PER_HZ,
        _noise_parts_mw_fn,
    )

    spectrum, settings = _busy_spectrum()
    grid = settings.freqs_hz()
    enbw_hz = GAUSSIAN_ENBW_PER_RBW * settings.rbw_hz
    for error_db, gain in ((0.0, 1.0), (0.3, 1.0), (0.0, 0.8), (-0.2, 0.5)):
        params = AnalyzerParams(amplitude_error_db=error_db)
        base, _ = _noise_parts_mw_fn(spectrum, settings, params, input_gain=gain)
        own_mw = 10.0 ** (danl_dbm(settings, params) / 10.0)
        density_mw = 10.0 ** (spectrum.noise_at(grid) / 10.0)
        plain = own_mw + (np.maximum(density_mw - 10.0 ** (KT0_DBM_PER_HZ / 10.0), 0.0)
                          * enbw_hz * 10.0 ** (error_db / 10.0) * gain)
        assert base(grid).tolist() == plain.tolist()


def test_the_first_mixer_on_valid_arrays_is_the_first_mixer_on_the_lines() -> None:
    from sweeprig.sim.analyzer_display import first_mixer

    spectrum, settings = _busy_spectrum()
    for arrays in (spectrum._line_arrays,
                   (np.array([70e6, 0.0, 75e6]), np.array([-5.0, -20.0, -math.inf]))):
        assert arrays is not None
        lines = tuple(zip(arrays[0].tolist(), arrays[1].tolist(), strict=True))
        fast = first_mixer(lines, settings, PARAMS, arrays=arrays)
        plain = first_mixer(lines, settings, PARAMS)
        for name in ("line_freq_hz", "line_dbm", "product_freq_hz", "product_amp",
                     "product_kind"):
            assert getattr(fast, name).tolist() == getattr(plain, name).tolist(), name
        assert (fast.total_dbm, fast.compression_db) == (plain.total_dbm, plain.compression_db)


def test_a_sweep_of_lines_and_noise_gives_the_same_trace_and_readings_each_time() -> None:
    """Two sweeps with the same seed agree bit for bit (the kept grid, the known-ascending
    signal and the one-row offsets change no number); the display's dB conversion raises
    no warning at zero power."""
    import warnings

    from sweeprig.sim.analyzer_display import _mw_to_dbm

    spectrum, settings = _busy_spectrum()
    first = simulate_sweep(spectrum, settings, PARAMS, _rng(5))
    again = simulate_sweep(InputSpectrum(spectrum.lines, spectrum.noise_dbm_per_hz),
                           settings, PARAMS, _rng(5))
    assert first.trace_dbm.tolist() == again.trace_dbm.tolist()
    assert [first.level_at(f) for f in (70e6, 69.8e6, 61.6e6)] == \
        [again.level_at(f) for f in (70e6, 69.8e6, 61.6e6)]
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert _mw_to_dbm(np.array([0.0, 1.0])).tolist() == [-3000.0, 0.0]


def test_a_reading_on_a_trace_point_takes_the_offset_np_interp_gives_there() -> None:
    """On a trace point (every one of them, the ends included) the reading takes that
    point's noise offset, which is what interpolating the offsets there gives, bit for bit;
    on a grid whose frequencies repeat (a span of a few hertz at 10 GHz) it interpolates."""
    spectrum, settings = _busy_spectrum()
    sweep = simulate_sweep(spectrum, settings, PARAMS, _rng(9))
    assert sweep._signal_grid_mw is not None and sweep._noise_base_grid_mw is not None
    assert sweep._reciprocal_mw is not None
    for k, freq in enumerate(sweep.freqs_hz.tolist()):
        offset = float(np.interp(freq, sweep.freqs_hz, sweep._noise_offset_db))
        assert offset == float(sweep._noise_offset_db[k])
        noise = np.array([sweep._noise_base_grid_mw[k]]) + sweep._reciprocal_mw(np.array([freq]))
        plain = np.array([sweep._signal_grid_mw[k]]) + noise * 10.0 ** (offset / 10.0)
        assert sweep.level_at(freq) == float(10.0 * np.log10(np.maximum(plain, 1e-300))[0])
    tiny = SweepSettings(10e9, 10e9 + 2e-6, points=101, rbw_hz=1.0, vbw_hz=1.0)
    repeated = simulate_sweep(InputSpectrum(((10e9, -30.0),)), tiny, PARAMS, _rng(9))
    assert np.unique(repeated.freqs_hz).size < repeated.freqs_hz.size
    for freq in np.unique(repeated.freqs_hz).tolist():
        assert math.isfinite(repeated.level_at(freq))
