"""The planner predicts, then chooses or records the risk: attenuation, RBW and the automatic
attenuation check from the stated margins; explicit settings kept, their risks reported.

The relations behind the predictions are checked in test_margins.py (Keysight application
note 150, "Spectrum Analysis Basics", dynamic range; from memory).
"""

from __future__ import annotations

import math
from pathlib import Path

import pytest

from sweeprig.errors import InputError
from sweeprig.formats.bench import ASSUMED, Bench, load_bench
from sweeprig.formats.sequence import sequence_from_dict
from sweeprig.plan import iter_points
from sweeprig.plan import margins as mg
from sweeprig.plan.preflight import check_limits, preflight
from sweeprig.plan.risks import survey_risks

ROOT = Path(__file__).resolve().parents[2]
SIM_BENCH = ROOT / "sequences" / "benches" / "sim.toml"


@pytest.fixture(scope="module")
def bench() -> Bench:
    return load_bench(SIM_BENCH)


def seq(studies: list[dict], part: dict | None = None, **top: object):
    data = {
        "part": {"id": "KX-1", "expected_gain": "10 dB", "expected_lo_if_isolation": "30 dB",
                 "expected_rf_if_isolation": "30 dB", "expected_lo_rf_isolation": "30 dB",
                 **(part or {})},
        "mixing": {"if_frequency": "100 MHz"},
        "conditions": {"supply": "3.3 V"},
        "study": studies,
        **top,
    }
    return sequence_from_dict(data, max_points=10**6)


TWO_TONE = {"name": "tt", "rf_frequency": "2.2 GHz", "tone_spacing": "1 MHz",
            "rf_power": "-10 dBm", "lo_power": "0 dBm", "read": ["wanted", "im3"]}


def readings(s, bench: Bench) -> dict[str, object]:
    (p,) = list(iter_points(s, bench))
    return {r.name: r for r in p.readings}


def test_auto_attenuation_keeps_the_analyzers_im3_below_the_margin(bench: Bench) -> None:
    got = readings(seq([TWO_TONE]), bench)
    im3 = got["im3.lower"]
    pred = im3.predicted
    assert pred is not None and pred.target_dbm is not None  # unknown level: judged at target
    assert pred.analyzer_distortion_dbm <= pred.target_dbm - 20.0
    assert "analyzer_distortion" not in im3.risks and "im3.lower.att10" not in got
    # more than the mixer-level rule alone would give (2·(-10+10-1.5) ... about 4 dB)
    wanted = got["wanted"]
    assert im3.analyzer.attenuation_db > wanted.analyzer.attenuation_db


def test_explicit_attenuation_is_kept_and_its_risk_triggers_the_check(bench: Bench) -> None:
    s = seq([{**TWO_TONE, "analyzer": {"attenuation": "0 dB"}}])
    got = readings(s, bench)
    im3 = got["im3.lower"]
    assert im3.analyzer.attenuation_db == 0.0
    assert "analyzer_distortion" in im3.risks
    # the automatic attenuation check: a +10 dB repeat of the reading at risk
    repeat = got["im3.lower.att10"]
    assert repeat.attenuation_check and repeat.repeat_of == "im3.lower"
    assert repeat.analyzer.attenuation_db == 10.0
    # 10 dB more attenuation: the analyzer's third-order product 20 dB lower (AN 150)
    assert im3.predicted.analyzer_distortion_dbm - repeat.predicted.analyzer_distortion_dbm \
        == pytest.approx(20.0, abs=0.01)


def test_check_turned_off_keeps_the_risk(bench: Bench) -> None:
    s = seq([{**TWO_TONE, "analyzer": {"attenuation": "0 dB"}, "attenuation_check": False}])
    got = readings(s, bench)
    assert "im3.lower.att10" not in got
    assert "analyzer_distortion" in got["im3.lower"].risks


def test_hot_if_at_zero_attenuation_compresses_the_analyzer(bench: Bench) -> None:
    s = seq([{"name": "hot", "rf_frequency": "2.2 GHz", "rf_power": "5 dBm", "lo_power": "0 dBm",
              "analyzer": {"attenuation": "0 dB"}, "read": ["wanted"]}])
    wanted = readings(s, bench)["wanted"]
    assert "analyzer_compression" in wanted.risks
    # the sum-frequency line counts: total = wanted + other sideband + leakage
    assert wanted.predicted.mixer_level_dbm > 5.0 + 10.0 - 1.5
    auto = readings(seq([{"name": "hot", "rf_frequency": "2.2 GHz", "rf_power": "5 dBm",
                          "lo_power": "0 dBm", "read": ["wanted"]}]), bench)["wanted"]
    assert "analyzer_compression" not in auto.risks


def test_source_harmonics_contaminate_spurs_the_part_does_not_make(bench: Bench) -> None:
    s = seq([{"name": "spurs", "rf_frequency": "2.2 GHz", "rf_power": "-10 dBm",
              "lo_power": "0 dBm", "read": [{"kind": "mxn", "order": 3}]}])
    got = readings(s, bench)
    # |2·RF − LO| = 2.3 GHz: the RF source's 2nd harmonic (-35 dBc on the sim bench) converted
    # by the LO at the part's gain: -10 - 35 + 10 - 1.5 = -36.5 dBm
    two_rf = got["mxn.1x-2"]
    assert two_rf.freq_hz == pytest.approx(2.3e9)
    assert "source_harmonic" in two_rf.risks
    assert two_rf.predicted.source_harmonic_dbm == pytest.approx(-36.5, abs=0.01)
    for name in ("mxn.1x-1", "mxn.1x1"):  # the part's own strong odd-order products
        assert "source_harmonic" not in got[name].risks
    # the LO's -35 dBc 2nd harmonic acting as an LO: every even LO order, the RF feedthrough
    # (0, 1) among them, can be as strong as the wanted product - 35 dB (routes in
    # test_source_harmonic_routes.py): -10 + 10 - 1.5 - 35 = -36.5 dBm
    for name in ("mxn.0x1", "mxn.2x-1"):
        assert "source_harmonic" in got[name].risks
        assert got[name].predicted.source_harmonic_dbm >= -36.5 - 0.01


def test_wide_explicit_rbw_merges_the_two_tones(bench: Bench) -> None:
    s = seq([{**TWO_TONE, "analyzer": {"rbw": "1 MHz", "span": "5 MHz"}}])
    got = readings(s, bench)
    assert "rbw_merged" in got["wanted"].risks
    assert "rbw_merged" not in readings(seq([TWO_TONE]), bench)["wanted"].risks


def test_noise_limited_when_the_time_budget_stops_the_rbw(bench: Bench) -> None:
    # a weak product at -40 dBm RF with a 10 ms sweep budget: the RBW cannot go narrow enough
    tight = seq([{**TWO_TONE, "rf_power": "-40 dBm"}],
                analyzer={"max_sweep_time": "10 ms"})
    im3 = readings(tight, bench)["im3.lower"]
    assert "noise" in im3.risks
    assert im3.analyzer.sweep_time_s <= 0.01 + 1e-12
    assert "noise" not in readings(seq([{**TWO_TONE, "rf_power": "-40 dBm"}]),
                                   bench)["im3.lower"].risks


def test_part_noise_counts_in_the_noise(bench: Bench) -> None:
    quiet = readings(seq([TWO_TONE]), bench)["wanted"].predicted
    noisy = readings(seq([TWO_TONE], part={"expected_noise_figure": "40 dB"}),
                     bench)["wanted"].predicted
    assert noisy.noise_dbm > quiet.noise_dbm + 5.0


def test_margins_are_configurable(bench: Bench) -> None:
    strict = seq([TWO_TONE], analyzer={"distortion_margin": "40 dB"})
    loose = readings(seq([TWO_TONE]), bench)["im3.lower"]
    tight = readings(strict, bench)["im3.lower"]
    assert tight.analyzer.attenuation_db > loose.analyzer.attenuation_db


def test_every_risk_is_from_the_vocabulary_and_sorted(bench: Bench) -> None:
    s = seq([{**TWO_TONE, "analyzer": {"attenuation": "0 dB", "rbw": "1 MHz"}}])
    for r in readings(s, bench).values():
        assert set(r.risks) <= set(mg.RISKS)
        assert list(r.risks) == sorted(r.risks)


def test_survey_counts_and_names_assumptions(bench: Bench) -> None:
    s = seq([{**TWO_TONE, "analyzer": {"attenuation": "0 dB"}}],
            conditions={"supply": "3.3 V", "temperature": [25, 85]})
    survey = survey_risks(s, bench)
    groups = {(g.reading, g.risk): g.count for g in survey.groups}
    assert groups[("im3.lower", "analyzer_distortion")] == 2  # one per temperature
    assert any("phase noise" in a and ASSUMED in a for a in survey.assumptions)
    assert any("part noise figure 15 dB" in a for a in survey.assumptions)
    bare = Bench.model_validate({"bench": {"name": "b"}})
    texts = " ".join(survey_risks(s, bare).assumptions)
    for key in ("toi", "soi", "p1db", "overload", "noise_figure", "harmonics"):
        assert key in texts


def test_policy_refuse_stops_before_the_run(bench: Bench) -> None:
    s = seq([{**TWO_TONE, "analyzer": {"attenuation": "0 dB"}}], analyzer={"on_risk": "refuse"})
    with pytest.raises(InputError) as err:
        preflight(s, bench)
    text = err.value.message()
    assert "cannot be trusted" in text and "analyzer_distortion" in text
    assert "study[0].read" in text and 'on_risk = "warn"' in text
    warn = seq([{**TWO_TONE, "analyzer": {"attenuation": "0 dB"}}])
    report = check_limits(warn, bench)
    assert any("cannot be trusted" in w for w in report.warnings)


def test_no_risk_readings_have_empty_risks_and_finite_predictions(bench: Bench) -> None:
    wanted = readings(seq([TWO_TONE]), bench)["wanted"]
    assert wanted.risks == ()
    d = wanted.predicted.as_dict()
    assert d["product_dbm"] == pytest.approx(-10 + 10 - 1.5)
    assert all(v is None or math.isfinite(v) for v in d.values())


def test_demo_every_reading_short_of_a_margin_carries_its_risk() -> None:
    # The figure: 0 readings planned with less than the stated noise and distortion
    # margins unless flagged. Recomputed here from each reading's own predicted numbers.
    from sweeprig.cli.check_cmd import _load_bench_or_sim
    from sweeprig.formats.sequence import load_sequence

    demo = load_sequence(ROOT / "sequences" / "demo" / "kx2417-characterisation.toml")
    sim_bench, _ = _load_bench_or_sim(None)
    noise_m, dist_m = demo.analyzer.noise_margin, demo.analyzer.distortion_margin
    checked = 0
    for p in iter_points(demo, sim_bench):
        if p.temperature_c != -40.0:
            continue  # readings do not depend on the temperature
        for r in p.readings:
            if r.instrument != "sa":
                continue
            d = r.predicted.as_dict()
            level = d["product_dbm"] if d["product_dbm"] is not None else d["target_dbm"]
            checked += 1
            if d["noise_dbm"] > level - noise_m:
                assert "noise" in r.risks, (p.index, r.name)
            for key, risk in (("analyzer_distortion_dbm", "analyzer_distortion"),
                              ("source_harmonic_dbm", "source_harmonic")):
                if d[key] is not None and d[key] > level - dist_m:
                    assert risk in r.risks, (p.index, r.name, risk)
            if d["reciprocal_dbm"] is not None and d["reciprocal_dbm"] > level - noise_m:
                assert "reciprocal_mixing" in r.risks, (p.index, r.name)
            if d["compression_db"] > mg.COMPRESSION_RISK_DB:
                assert "analyzer_compression" in r.risks, (p.index, r.name)
    # plus the noise-figure study's wanted and image readings (15 points; its noise_figure
    # readings take the noise source and are not planned analyzer readings)
    assert checked == 909 // 3 + 15 * 2


def test_a_loss_table_needs_to_cover_only_what_is_read(tmp_path):
    """The planner's predicted lines beyond the table (a source's 3rd harmonic at 6.7 GHz
    leaking to the IF port) take the table's nearest loss as an estimate: only a reading's own
    frequency (here up to the RF leak at 2.5 GHz) must lie inside a loss table."""
    from sweeprig.engine.session import load_run_files, shipped_sequences_dir

    shipped = shipped_sequences_dir()
    bench_text = (shipped / "benches" / "sim.toml").read_text(encoding="utf-8")
    assert 'if = "1.5 dB"' in bench_text
    (tmp_path / "if-band.csv").write_text("freq_hz,loss_db\n10e6,1.4\n3e9,2.1\n",
                                          encoding="utf-8")
    bench = tmp_path / "bench.toml"
    bench.write_text(bench_text.replace('if = "1.5 dB"', 'if = { csv = "if-band.csv" }'),
                     encoding="utf-8")
    files = load_run_files(shipped / "demo" / "quick.toml", bench, sim=False)
    assert files.report.ok


def test_the_pre_flight_plans_each_point_of_a_pass_once(bench: Bench, monkeypatch) -> None:
    """The settings check and the risk survey read the same points: planned once (the
    planner is most of a large pre-flight), and the survey is the one a fresh planner makes."""
    from sweeprig.plan.expand import PointBuilder

    s = seq([{"name": "g", "rf_frequency": {"start": "2.1 GHz", "stop": "2.3 GHz",
                                            "points": 5},
              "rf_power": "-20 dBm", "lo_power": "0 dBm", "read": ["wanted", "lo_at_if"]},
             {**TWO_TONE, "analyzer": {"attenuation": "0 dB"}}],
            conditions={"supply": "3.3 V", "temperature": [25, 85]})
    built: list[int] = []
    build = PointBuilder._build

    def counted(self: PointBuilder, index: int):  # type: ignore[no-untyped-def]
        built.append(index)
        return build(self, index)

    monkeypatch.setattr(PointBuilder, "_build", counted)
    report = check_limits(s, bench)
    assert sorted(built) == list(range(6))  # one pass: 5 + 1 points, each planned once
    monkeypatch.undo()
    assert report.risks == survey_risks(s, bench)
    assert report.risks.groups  # the two-tone study's distortion risk is found


def test_a_reference_level_set_under_the_input_is_a_risk_and_auto_never_is(bench: Bench
                                                                          ) -> None:
    """A reference level set by hand under the predicted input: the analyzer may call the
    reading uncalibrated (the run then flags it), so check says so before any RF; the
    automatic reference level sits at least 3 dB above the input, so never."""
    study = {"name": "g", "rf_frequency": "2.2 GHz", "rf_power": "-25 dBm",
             "lo_power": "0 dBm"}
    low = readings(seq([{**study, "read": [
        {"kind": "wanted", "analyzer": {"reference_level": "-30 dBm"}}]}]), bench)
    assert "above_reference" in low["wanted"].risks
    auto = readings(seq([{**study, "read": ["wanted"]}]), bench)
    assert "above_reference" not in auto["wanted"].risks
