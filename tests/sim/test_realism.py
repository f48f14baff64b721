"""The realistic simulated bench: coherent sums, reciprocal mixing, source spurs and filters,
noise figure versus LO drive, a realistic IIP2, seeded leakage phases.

Each physics check names its source beside it; the textbook and paper references marked
"from memory" were not looked up again for this test.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from sweeprig.sim.analyzer_display import (
    GAUSSIAN_ENBW_PER_RBW,
    AnalyzerParams,
    InputSpectrum,
    SweepSettings,
    danl_dbm,
    displayed_noise_dbm,
    first_mixer,
    first_mixer_lines,
    simulate_sweep,
)
from sweeprig.sim.bench import SimBenchDescription, prepare_part
from sweeprig.sim.mixer import OperatingPoint, ToneInput, load_part, reference_figures
from sweeprig.sim.mixer.realism import (
    LeakagePhases,
    LeakPhase,
    lo_drive_noise_factor,
    seeded_leakage_phases,
    switch_overlap_fraction,
)
from sweeprig.sim.mixer.reference import line_power_dbm
from sweeprig.sim.world import LowPassFilter, add_coherent

OP = OperatingPoint(25.0, 3.3)


def _vector_sum_db(a_dbm: float, b_dbm: float, phase_rad: float) -> float:
    """|a + b·e^{jφ}|² in dBm for two coherent lines (vector sum of two phasors)."""
    a, b = 10 ** (a_dbm / 20), 10 ** (b_dbm / 20)
    return 10 * math.log10(a * a + b * b + 2 * a * b * math.cos(phase_rad))


# --- coherent sums ---------------------------------------------------------------------------
def test_two_equal_coherent_lines_in_phase_read_6p02_db_up_and_cancel_in_antiphase() -> None:
    # Vector sum of two coherent signals: |A + A| = 2A → +20·log10(2) = +6.02 dB; |A − A| = 0.
    doubled = add_coherent([(100e6, -30.0)], [(100e6, complex(10 ** (-30 / 20)))])
    assert doubled[0][1] == pytest.approx(-30.0 + 20 * math.log10(2.0), abs=1e-9)
    assert add_coherent([(100e6, -30.0)], [(100e6, -complex(10 ** (-30 / 20)))]) == []
    # in quadrature they add as powers: +3.01 dB
    quad = add_coherent([(100e6, -30.0)], [(100e6, 1j * 10 ** (-30 / 20))])
    assert quad[0][1] == pytest.approx(-30.0 + 10 * math.log10(2.0), abs=1e-9)


def test_analyzer_product_adds_to_an_input_line_as_a_voltage() -> None:
    settings = SweepSettings(60e6, 80e6, rbw_hz=10e3, attenuation_db=0.0)
    params = AnalyzerParams()
    tones = [(70e6, -5.0), (71e6, -5.0)]
    mixer = first_mixer(tones, settings, params)
    (own,) = [p for p in mixer.products if abs(p.freq_hz - 69e6) < 1 and p.kind == "im3"]
    # the analyzer's IM3 at 2f1 − f2: 2·P1 + P2 − 2·TOI = −15 − 30 = −45 dBm (Razavi)
    assert own.power_dbm == pytest.approx(-45.0, abs=1e-9)
    dut = -45.0  # a DUT product of the same level on the same frequency
    lines, _ = first_mixer_lines([*tones, (69e6, dut)], settings, params)
    shown = dict(lines)[69e6]
    # the first mixer compresses every line on the total power of all three
    compression = first_mixer([*tones, (69e6, dut)], settings, params).compression_db
    # vector sum with the product's seeded phase (the DUT line sits at phase 0)
    expected = 20 * math.log10(abs(10 ** ((dut + compression) / 20) + own.amplitude))
    assert shown == pytest.approx(expected, abs=1e-9)
    assert shown != pytest.approx(10 * math.log10(2 * 10 ** (-4.5)), abs=0.05)  # not powers
    incoherent = AnalyzerParams(coherent_products=False)
    lines_p, _ = first_mixer_lines([*tones, (69e6, dut)], settings, incoherent)
    power_sum = 10 * math.log10(10 ** ((dut + compression) / 10) + 10 ** (-4.5))
    assert dict(lines_p)[69e6] == pytest.approx(power_sum, abs=1e-9)


def test_product_phases_are_seeded_and_reproducible() -> None:
    a, b = AnalyzerParams(product_phase_seed=3), AnalyzerParams(product_phase_seed=3)
    c = AnalyzerParams(product_phase_seed=4)
    assert a.product_rotation("im3", 69e6) == b.product_rotation("im3", 69e6)
    assert a.product_rotation("im3", 69e6) != c.product_rotation("im3", 69e6)
    assert seeded_leakage_phases(5, 1e-9) == seeded_leakage_phases(5, 1e-9)
    assert seeded_leakage_phases(5, 1e-9) != seeded_leakage_phases(6, 1e-9)


def test_leakage_phase_turns_with_frequency_so_the_lo_line_at_if_ripples() -> None:
    """LO→IF leakage adds to the core's own LO line as a voltage whose phase φ0 − 2π·f·τ
    turns with the LO frequency: over an LO band the line swings between the vector sum's
    bounds |a| ± |b|, instead of one fixed level."""
    part = load_part("kx-2417")
    delay = 2e-9
    turned = part.with_changes(leakage_phases=LeakagePhases(lo_to_if=LeakPhase(0.3, delay)))
    levels = []
    for f_lo in np.linspace(2.0e9, 2.5e9, 11):
        lo = ToneInput(float(f_lo), 0.0)
        alone = part.with_changes(isolation_lo_if_db=None).evaluate(OP, lo, [])
        core = line_power_dbm(alone.if_port, f_lo)
        leak = 0.0 - 32.0  # LO at 0 dBm through 32 dB of LO→IF isolation
        got = line_power_dbm(turned.evaluate(OP, lo, []).if_port, f_lo)
        a, b = 10 ** (core / 20), 10 ** (leak / 20)
        assert 20 * math.log10(abs(a - b)) - 1e-6 <= got <= 20 * math.log10(a + b) + 1e-6
        levels.append(got)
    assert max(levels) - min(levels) > 1.0  # 2 ns over 500 MHz: a full turn of phase


# --- the analyzer front end -------------------------------------------------------------------
def test_reciprocal_mixing_raises_the_floor_near_a_strong_tone_by_the_stated_amount() -> None:
    # noise = P_line + L(offset) + 10·log10(ENBW) (reciprocal mixing, "Spectrum Analysis
    # Basics", an application note of a test-equipment maker, from memory)
    params = AnalyzerParams()  # default profile: −116 dBc/Hz at 100 kHz
    settings = SweepSettings.centered(100e6, 400e3, rbw_hz=1e3, attenuation_db=10.0)
    tone = InputSpectrum(((100e6, -10.0),))
    quiet = InputSpectrum(((100e6, -200.0),))
    enbw = GAUSSIAN_ENBW_PER_RBW * 1e3
    # the line as displayed: −10 dBm less the first mixer's slight compression (−20 dBm at
    # the mixer, P1dB +3 dBm)
    shown = -10.0 + first_mixer(tone.lines, settings, params).compression_db
    expected_rm = shown - 116.0 + 10 * math.log10(enbw)
    floor = danl_dbm(settings, params)
    expected = 10 * math.log10(10 ** (floor / 10) + 10 ** (expected_rm / 10))
    got = displayed_noise_dbm([100.1e6], tone, settings, params)[0]
    assert got == pytest.approx(expected, abs=1e-6)
    assert got - displayed_noise_dbm([100.1e6], quiet, settings, params)[0] > 20.0
    # log-interpolated between the stated points: halfway in log offset, halfway in dB
    mid = 10 ** 4.5  # between 10 kHz (−106) and 100 kHz (−116): −111 dBc/Hz
    assert params.phase_noise_dbc_per_hz(mid) == pytest.approx(-111.0)
    # without phase noise the floor is the DANL again
    none = AnalyzerParams(phase_noise=())
    assert displayed_noise_dbm([100.1e6], tone, settings, none)[0] == pytest.approx(floor)


def test_a_tones_own_reading_is_not_biased_by_its_phase_noise() -> None:
    settings = SweepSettings.centered(100e6, 200e3, rbw_hz=10e3, attenuation_db=10.0)
    result = simulate_sweep(InputSpectrum(((100e6, -20.0),)), settings, AnalyzerParams(),
                            np.random.default_rng(3))
    assert result.level_at(100e6) == pytest.approx(-20.0, abs=0.01)


def test_spectrum_analyzer_distortion_follows_mixer_level() -> None:
    """Second-order distortion rises 2 dB and third-order 3 dB per dB of mixer level, so
    relative to the tones 1 dB and 2 dB per dB ("Spectrum Analysis Basics", an application
    note of a test-equipment maker, dynamic-range chapter, from memory)."""
    params = AnalyzerParams()

    def products(level_dbm: float) -> dict[str, float]:
        settings = SweepSettings(1e6, 1e9, rbw_hz=1e3, attenuation_db=10.0)
        mixer = first_mixer([(100e6, level_dbm), (101e6, level_dbm)], settings, params)
        return {p.kind: p.power_dbm for p in mixer.products
                if abs(p.freq_hz - {"im2": 1e6, "im3": 99e6}.get(p.kind, -1)) < 1}

    low, high = products(-30.0), products(-20.0)
    assert high["im2"] - low["im2"] == pytest.approx(20.0, abs=1e-9)
    assert high["im3"] - low["im3"] == pytest.approx(30.0, abs=1e-9)


def test_noise_floor_follows_rbw() -> None:
    # noise in a bandwidth B: kT·B, so 10 dB per decade of RBW (Pozar, noise chapter)
    params = AnalyzerParams(phase_noise=())
    a = danl_dbm(SweepSettings(1e9, 1e9 + 1e6, rbw_hz=1e3), params)
    b = danl_dbm(SweepSettings(1e9, 1e9 + 1e6, rbw_hz=1e4), params)
    assert b - a == pytest.approx(10.0, abs=1e-9)


# --- the part ---------------------------------------------------------------------------------
def test_demo_part_iip2_is_realistic() -> None:
    # the datasheet figure: two tones whose difference line falls in the IF band (20 MHz, the
    # IF port's high-pass is at 10 MHz)
    figures = reference_figures(load_part("kx-2417"), OP, 2.1e9, 0.0, 2.2e9, tone_spacing_hz=20e6)
    assert 45.0 <= figures.iip2_dbm <= 60.0
    # without the common-mode path the mismatch alone gives an IIP2 far higher
    ideal_cm = load_part("kx-2417").with_changes(cm_second_order=0.0)
    assert reference_figures(ideal_cm, OP, 2.1e9, 0.0, 2.2e9,
                             tone_spacing_hz=20e6).iip2_dbm > 70.0


def test_iip2_second_order_slope_is_two() -> None:
    # IM2 grows 2 dB per dB of input (Razavi, nonlinearity chapter: a second-order term)
    part = load_part("kx-2417")
    lo = ToneInput(2.1e9, 0.0)

    def im2(p_dbm: float) -> float:
        r = part.evaluate(OP, lo, [ToneInput(2.2e9, p_dbm), ToneInput(2.201e9, p_dbm)])
        return line_power_dbm(r.if_port, 1e6)

    assert im2(-30.0) - im2(-40.0) == pytest.approx(20.0, abs=0.1)


def test_noise_figure_rises_as_lo_drive_falls_and_holds_at_nominal() -> None:
    """A switching pair adds noise while both its transistors conduct, a fraction Δ/T of the
    LO period that grows as the LO amplitude falls (Darabi & Abidi, "Noise in RF-CMOS
    mixers: a simple physical model", IEEE JSSC 35(1), 2000; Terrovitis & Meyer, "Noise in
    current-commutating CMOS mixers", IEEE JSSC 34(6), 1999; both from memory)."""
    part = load_part("kx-2417")
    nf = {p: reference_figures(part, OP, 2.1e9, p, 2.2e9).noise_figure_db
          for p in (-12.0, -6.0, 0.0, 6.0)}
    assert nf[0.0] == pytest.approx(part.noise_figure_db, abs=1e-9)  # the file's figure
    assert nf[-12.0] > nf[-6.0] > nf[0.0] > nf[6.0]
    assert nf[-12.0] - nf[0.0] > 2.0
    # Δ/T = 2·V_x/(π·A) for a sine of peak A (derived): halves when A doubles
    vt = 0.0257
    assert switch_overlap_fraction(0.4, vt) == pytest.approx(
        2 * switch_overlap_fraction(0.8, vt))
    assert lo_drive_noise_factor(4.0, 0.3, 0.1, 0.1, 1.0) == pytest.approx(4.0)
    # the part's noise at the output follows: kT0 + NF + G (definition of the noise figure)
    low = part.evaluate(OP, ToneInput(2.1e9, -12.0), [])
    assert low.notes["noise_figure_db"] == pytest.approx(nf[-12.0])


def test_noise_figure_is_flat_without_a_nominal_lo() -> None:
    part = load_part("kx-5803")
    assert part.noise_lo_nominal_dbm is None
    for p in (3.0, 13.0):
        figures = reference_figures(part, OP, 2.1e9, p, 2.2e9)
        assert figures.noise_figure_db == pytest.approx(part.noise_figure_db)


# --- sources -----------------------------------------------------------------------------------
def test_butterworth_low_pass_rejects_harmonics() -> None:
    # |H|² = 1/(1 + (f/fc)^(2n)) (Butterworth, Pozar filter chapter): −3.01 dB at the corner,
    # 20·n dB per decade above it
    filt = LowPassFilter(3e9, 5)
    assert filt.at(3e9) == pytest.approx(10 * math.log10(2.0))
    assert filt.at(30e9) == pytest.approx(10 * math.log10(1 + 10.0**10))
    assert filt.at(1e9) < 0.001


def test_a_low_pass_filter_removes_the_rf_sources_harmonics_at_the_part() -> None:
    from sweeprig.clock import VirtualClock
    from sweeprig.sim.bench import build_sim_instruments

    def harmonics(lowpass: dict[str, object]) -> tuple[float, ...]:
        desc = SimBenchDescription.model_validate({
            "part": "kx-2417", "sources": {"level_error": False, "lowpass": lowpass}})
        sim = build_sim_instruments(desc, clock=VirtualClock())
        rf = sim.instruments["rf"]
        rf.put_value("freq_hz", 2.2e9)
        rf.put_value("output_on", True)
        (tone,) = sim.world.rf_inputs()
        return tone.harmonics_dbc

    assert harmonics({}) == pytest.approx((-35.0, -45.0))
    filtered = harmonics({"rf": {"corner": "3 GHz", "order": 7}})
    # 2nd harmonic 4.4 GHz: 10·log10(1 + (4.4/3)^14) = 23.3 dB down, fundamental 0.04 dB
    f = LowPassFilter(3e9, 7)
    assert filtered[0] == pytest.approx(-35.0 - (f.at(4.4e9) - f.at(2.2e9)))
    assert filtered[1] == pytest.approx(-45.0 - (f.at(6.6e9) - f.at(2.2e9)))
    assert filtered[1] < -90.0


def test_a_band_stop_buries_one_frequency_of_a_sources_path_and_passes_its_neighbours() -> None:
    """``[sources.notch]``: ``depth`` dB over ``center`` ± ``width``/2 in that source's path
    (before its cable), nothing outside; the tone at the port drops by exactly that."""
    from pydantic import ValidationError

    from sweeprig.clock import VirtualClock
    from sweeprig.sim.bench import build_sim_instruments

    def rf_at_port(freq_hz: float, notch: dict[str, object]) -> float:
        desc = SimBenchDescription.model_validate({
            "part": "kx-2417", "sources": {"level_error": False, "notch": notch}})
        sim = build_sim_instruments(desc, clock=VirtualClock())
        rf = sim.instruments["rf"]
        rf.put_value("freq_hz", freq_hz)
        rf.put_value("output_on", True)
        (tone,) = sim.world.rf_inputs()
        return tone.power_dbm

    notch = {"rf": {"center": "2.2 GHz", "width": "20 MHz", "depth": "110 dB"}}
    for freq_hz, drop_db in ((2.2e9, 110.0), (2.209e9, 110.0), (2.211e9, 0.0), (2.0e9, 0.0)):
        assert rf_at_port(freq_hz, {}) - rf_at_port(freq_hz, notch) == pytest.approx(drop_db)
    assert rf_at_port(2.2e9, {"lo": notch["rf"]}) == rf_at_port(2.2e9, {})  # the LO's path
    for bad in ({"width": "0 Hz"}, {"depth": "-3 dB"}, {"centre": "2 GHz"}):
        with pytest.raises(ValidationError):
            SimBenchDescription.model_validate(
                {"sources": {"notch": {"rf": {**notch["rf"], **bad}}}})


def test_seeded_leakage_phases_come_from_the_bench_seed() -> None:
    one = prepare_part(SimBenchDescription.model_validate({"part": "kx-2417", "seed": 1}))
    two = prepare_part(SimBenchDescription.model_validate({"part": "kx-2417", "seed": 2}))
    off = prepare_part(SimBenchDescription.model_validate(
        {"part": "kx-2417", "dut": {"leakage_phase": False}}))
    assert one.leakage_phases != two.leakage_phases
    assert off.leakage_phases.lo_to_if == LeakPhase()
    assert one.leakage_phases.lo_to_if.delay_s <= 1.5e-9


def test_phase_noise_profile_in_the_description_is_checked(tmp_path) -> None:
    from sweeprig.errors import InputError
    from sweeprig.sim.bench import load_sim_bench_description

    desc = SimBenchDescription.model_validate({"analyzer": {"phase_noise": [
        {"offset": "1 kHz", "level": "-90 dBc/Hz"}, {"offset": "1 MHz", "level": -130}]}})
    assert desc.analyzer_params().phase_noise == ((1e3, -90.0), (1e6, -130.0))
    path = tmp_path / "bench.toml"
    path.write_text('[analyzer]\nphase_noise = [\n  { offset = "1 MHz", level = "-90 dBc/Hz" },'
                    '\n  { offset = "1 kHz", level = -130 },\n]\n', encoding="utf-8")
    with pytest.raises(InputError) as info:
        load_sim_bench_description(path)
    assert "rise" in info.value.what and "bench.toml" in (info.value.where or "")
    path.write_text('[analyzer]\nphase_noise = [{ offset = "1 MHz", level = "-90 dB" }]\n',
                    encoding="utf-8")
    with pytest.raises(InputError) as info:
        load_sim_bench_description(path)
    assert "dBc/Hz" in info.value.what


def test_source_spurs_convert_to_the_output_at_the_parts_gain() -> None:
    from sweeprig.sim import truth

    clean = {"part": "kx-2417", "sources": {"level_error": False, "harmonics": []},
             "dut": {"leakage_phase": False}}
    spur = {**clean, "sources": {**clean["sources"],
                                 "spurious": [{"offset": "7 MHz", "level": "-60 dBc"}]}}
    drive = truth.Drive(lo_freq_hz=2.1e9, lo_power_dbm=2.0, rf_freq_hz=2.2e9,
                        rf_power_dbm=-27.0)
    desc = SimBenchDescription.model_validate(spur)
    line = truth.line_at(desc, drive, "if", 107e6)
    wanted = truth.line_at(desc, drive, "if", 100e6)
    assert line is not None and wanted is not None
    # an RF spur −60 dBc converts like the tone (small-signal gain): −60 dBc of the wanted
    # line, up to the gain's flatness over 7 MHz (mid-band gain used for the spur)
    assert line.total_dbm - wanted.total_dbm == pytest.approx(-60.0, abs=0.1)
    assert line.source_harmonic_dbm == pytest.approx(line.total_dbm, abs=0.01)
    # the LO source's spur moves the converted tone by its offset: |f_rf − (f_lo + 7 MHz)|
    assert truth.line_at(desc, drive, "if", 93e6) is not None
    nothing = truth.line_at(SimBenchDescription.model_validate(
        {**clean, "sources": {**clean["sources"], "spurious": []}}), drive, "if", 107e6)
    assert nothing is None or nothing.total_dbm < line.total_dbm - 40.0
