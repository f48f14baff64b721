"""The noise-figure reading's automatic attenuation and its place in the duration model."""

from __future__ import annotations

import math
from pathlib import Path

import pytest

from sweeprig.formats.bench import load_bench
from sweeprig.formats.sequence import sequence_from_dict
from sweeprig.plan import estimate_duration, iter_points
from sweeprig.plan import margins as mg
from sweeprig.plan.noise_setup import (
    HOT_COMPRESSION_LIMIT_DB,
    NOISE_OVER_ANALYZER_DB,
    SWITCH_SETTLE_S,
    NoiseSettings,
    plan_noise_attenuation,
)

ROOT = Path(__file__).resolve().parents[2]
SIM_BENCH = ROOT / "sequences" / "benches" / "sim.toml"


def specs(nf_db: float = 14.0, p1db_dbm: float = 3.0) -> mg.AnalyzerSpecs:
    return mg.AnalyzerSpecs(noise_figure_db=nf_db, toi_dbm=15.0, soi_dbm=39.0,
                            p1db_dbm=p1db_dbm, overload_dbm=0.0, phase_noise=())


PART = {"part_nf_db": 10.0, "gain_db": 12.0, "loss_db": 1.5, "enr_db": 15.0}


def hot_wideband_dbm(att_db: float) -> float:
    """The hot source's noise at the first mixer, worked out by hand: kT0·(F·G + ENR·2G)/L
    over 13.6 GHz (Friis; equal signal and image gains), in mW then dBm."""
    kt0_mw = 1.380649e-23 * 290.0 * 1e3  # Boltzmann constant (CODATA 2018) × 290 K, in mW/Hz
    f, g, enr, loss = 10.0, 10 ** 1.2, 10 ** 1.5, 10 ** 0.15
    return 10 * math.log10(kt0_mw * (f * g + enr * 2 * g) / loss * 13.6e9) - att_db


def test_a_quiet_clean_bench_reads_noise_at_0_db() -> None:
    plan = plan_noise_attenuation(NoiseSettings(), specs(), **PART)
    assert plan.settings.attenuation_db == 0.0 and plan.risks == ()
    assert plan.hot_mixer_dbm == pytest.approx(hot_wideband_dbm(0.0), abs=1e-9)
    # the part's cold noise over the analyzer's: kT0·(F·G − 1)/L against kT0·F_sa in 3 MHz
    assert plan.part_cold_dbm - plan.analyzer_dbm > NOISE_OVER_ANALYZER_DB


def test_an_early_compressing_analyzer_gets_the_lowest_attenuation_free_of_compression() -> None:
    plan = plan_noise_attenuation(NoiseSettings(), specs(p1db_dbm=-60.0), **PART)
    att = plan.settings.attenuation_db
    assert att > 0 and att % 2 == 0
    assert mg.compression_db(hot_wideband_dbm(att), -60.0) <= HOT_COMPRESSION_LIMIT_DB
    assert mg.compression_db(hot_wideband_dbm(att - 2.0), -60.0) > HOT_COMPRESSION_LIMIT_DB
    # there the analyzer's own noise stands over the part's: no attenuation satisfies both
    assert plan.risks == ("noise",)
    assert "no attenuation keeps" in plan.reasons[0]


def test_a_noisy_analyzer_is_a_risk_at_0_db() -> None:
    plan = plan_noise_attenuation(NoiseSettings(), specs(nf_db=32.0), **PART)
    assert plan.settings.attenuation_db == 0.0 and plan.risks == ("noise",)


def test_a_stated_attenuation_is_kept_and_its_risks_predicted() -> None:
    plan = plan_noise_attenuation(NoiseSettings(), specs(p1db_dbm=-60.0), attenuation_db=0.0,
                                  **PART)
    assert plan.settings.attenuation_db == 0.0 and not plan.automatic
    assert plan.risks == ("analyzer_compression",)


def test_the_planner_carries_the_noise_settings_and_honours_stated_ones() -> None:
    bench = load_bench(SIM_BENCH)
    seq = sequence_from_dict({
        "part": {"id": "KX-1", "expected_gain": "12 dB", "expected_lo_if_isolation": "30 dB"},
        "mixing": {"if_frequency": "100 MHz"},
        "study": [{"name": "n", "rf_frequency": "2 GHz", "rf_power": -25, "lo_power": 0,
                   "read": ["noise_figure", {"kind": "noise_figure", "name": "nf2",
                                             "analyzer": {"attenuation": "6 dB",
                                                          "averages": 8, "rbw": "1 MHz"}}]}]})
    readings = {r.name: r for r in next(iter_points(seq, bench)).readings}
    auto, stated = readings["noise_figure"].noise, readings["nf2"].noise
    assert auto == NoiseSettings()
    assert (stated.attenuation_db, stated.averages, stated.rbw_hz) == (6.0, 8, 1e6)
    assert readings["noise_figure"].predicted is not None


def _noise_seq(read: list[object], averages: int = 20, points: int = 3) -> object:
    return sequence_from_dict({
        "part": {"id": "KX-1", "expected_gain": "12 dB", "expected_lo_if_isolation": "30 dB"},
        "mixing": {"if_frequency": "100 MHz"},
        "conditions": {"settle": "20 ms"},
        "study": [{"name": "n", "rf_frequency": {"start": "2 GHz", "stop": "2.2 GHz",
                                                 "points": points},
                   "rf_power": -25, "lo_power": 0, "read": read,
                   "analyzer": {"averages": averages}}]})


def test_duration_counts_the_hot_and_cold_sweeps_settling_and_one_calibration() -> None:
    bench = load_bench(SIM_BENCH)
    with_nf = estimate_duration(_noise_seq(["noise_figure"]), bench, command_overhead_s=0.0)
    # per point: cold, hot, and both again 10 dB up (4 readings) of 20 sweeps of 1 ms
    # (span 30 MHz at 3 MHz RBW: 2.5·span/RBW² = 8 µs, the 1 ms floor), two switches of the
    # source; once per run the system calibration: a cold and a hot reading, two switches
    points, read_s = 3, 20 * 1e-3
    assert with_nf.sweep_s == pytest.approx(points * 4 * read_s + 2 * read_s)
    settle = 20e-3  # the sequence's settle per point
    assert with_nf.settle_s == pytest.approx(points * (settle + 2 * SWITCH_SETTLE_S)
                                             + 2 * SWITCH_SETTLE_S)
    fewer = estimate_duration(_noise_seq(["noise_figure"], averages=5), bench,
                              command_overhead_s=0.0)
    assert fewer.sweep_s == pytest.approx(with_nf.sweep_s / 4)  # averaging scales the sweeps


def test_check_reports_the_noise_readings_risk_with_its_assumptions(tmp_path: Path) -> None:
    from sweeprig.plan.risks import survey_risks

    text = SIM_BENCH.read_text(encoding="utf-8").replace('p1db = "3 dBm"', 'p1db = "-60 dBm"')
    path = tmp_path / "bench.toml"
    path.write_text(text, encoding="utf-8")
    part = {"id": "KX-1", "expected_gain": "12 dB", "expected_lo_if_isolation": "30 dB"}
    seq = sequence_from_dict({
        "part": part, "mixing": {"if_frequency": "100 MHz"},
        "study": [{"name": "n", "rf_frequency": "2 GHz", "rf_power": -25, "lo_power": 0,
                   "read": ["noise_figure"]}]})
    survey = survey_risks(seq, load_bench(path))
    (group,) = survey.groups
    assert (group.reading, group.risk) == ("noise_figure", "noise")
    assert "no attenuation keeps" in group.reason
    reasons = next(iter_points(seq, load_bench(path))).readings[0].predicted.reasons
    assert any("part noise figure assumed 15 dB" in r for r in reasons)
    # an unstated LO-IF isolation counts the LO at full level: even 70 dB cannot keep it
    # from compressing this analyzer, and the reasons say what was assumed
    del part["expected_lo_if_isolation"]
    unstated = sequence_from_dict({
        "part": part, "mixing": {"if_frequency": "100 MHz"},
        "study": [{"name": "n", "rf_frequency": "2 GHz", "rf_power": -25, "lo_power": 0,
                   "read": ["noise_figure"]}]})
    reading = next(iter_points(unstated, load_bench(path))).readings[0]
    assert reading.risks == ("analyzer_compression", "noise")
    assert "the highest attenuation" in reading.predicted.reasons[1]
    assert any("LO-IF isolation not stated" in r for r in reading.predicted.reasons)
