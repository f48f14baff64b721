"""A sequence reading noise_figure runs on the simulated bench end to end: the runner takes
the Y-factor readings, the store keeps them raw, the analysis reduces them to figures with
their budgets; bad set-ups are refused before anything is powered."""

from __future__ import annotations

from datetime import UTC, datetime
from pathlib import Path

import pytest

from sweeprig.analysis.reduce import reduce_run
from sweeprig.engine.session import run_sequence
from sweeprig.errors import InputError
from sweeprig.formats.bench import load_bench
from sweeprig.formats.sequence import load_sequence
from sweeprig.plan.noise_check import check_noise_figure
from sweeprig.sim.bench import prepare_part, resolve_description
from sweeprig.sim.noise_truth import part_noise_figure
from sweeprig.store.sqlite import SqliteRunStore

ROOT = Path(__file__).resolve().parents[2]
SIM_BENCH = ROOT / "sequences" / "benches" / "sim.toml"

SEQUENCE = """format = 1
[about]
title = "noise figure on the simulated bench"
[part]
id = "KX-2417"
expected_gain = "12 dB"
expected_lo_if_isolation = "30 dB"
[mixing]
conversion = "down"
lo_side = "low"
if_frequency = "{if_}"
[conditions]
supply = "3.3 V"
settle = "20 ms"
[[study]]
name = "noise"
rf_frequency = {{ start = "1.8 GHz", stop = "2.6 GHz", step = "400 MHz" }}
rf_power = "-25 dBm"
lo_power = ["-6 dBm", "0 dBm", "6 dBm"]
read = ["wanted", "image", {{ kind = "noise_figure", sideband = "ssb" }}]
[[spec]]
figure = "noise_figure_db"
max = "13 dB"
"""


def _sequence(tmp_path: Path, if_: str = "100 MHz") -> Path:
    path = tmp_path / "noise.toml"
    path.write_text(SEQUENCE.format(if_=if_), encoding="utf-8")
    return path


def test_noise_figure_study_runs_and_matches_the_model(tmp_path: Path) -> None:
    store_path = tmp_path / "runs.sqlite"
    outcome = run_sequence(_sequence(tmp_path), sim=True, store_path=store_path,
                           sim_description="clean")  # judged against the model, uncalibrated
    assert outcome.status == "complete"
    with SqliteRunStore(store_path, create=False) as store:
        run = reduce_run(store, outcome.run_id)
    figures = run.figures_named("noise_figure")
    assert len(figures) == 9
    part = prepare_part(resolve_description("clean"))
    for f in figures:
        c = f.conditions
        assert c["sideband"] == "ssb"
        truth = part_noise_figure(part, temperature_c=23.0, supply_v=3.3,
                                  lo_freq_hz=float(c["rf_freq_hz"]) - 100e6,
                                  lo_power_dbm=float(c["lo_power_dbm"]),
                                  rf_freq_hz=float(c["rf_freq_hz"]))
        # the SSB figure takes the image gain from the same point's image reading
        assert abs(f.value - truth.ssb_db) <= 0.2, (c, f.value, truth.ssb_db)
        assert abs(f.value - truth.ssb_db) <= f.uncertainty_db
        assert f.budget is not None and {"enr", "mismatch_source", "linearity", "hot",
                                         "hot_cal"} <= {t.name for t in f.budget.contributions}
        assert f.flags == ()
    gains = run.figures_named("noise_figure_gain")
    assert len(gains) == 9 and all(14.0 < g.value < 17.0 for g in gains)
    assert run.assessment.verdict == "pass"
    from sweeprig.report.plots import all_plots  # the report's noise-figure section

    plot = next(p for p in all_plots(run) if p.key == "noise_figure")
    assert plot.png.startswith(b"\x89PNG") and "k = 2" in plot.caption


def test_a_bench_without_a_noise_source_is_refused_before_rf(tmp_path: Path) -> None:
    text = SIM_BENCH.read_text(encoding="utf-8")
    start = text.index("[noise_source]")
    end = text.index("[safe_state]")
    bench_path = tmp_path / "bench.toml"
    bench_path.write_text(text[:start] + text[end:], encoding="utf-8")
    with pytest.raises(InputError) as info:
        check_noise_figure(load_sequence(_sequence(tmp_path)), load_bench(bench_path))
    assert "no noise source" in info.value.what and "[noise_source]" in (info.value.fix or "")


def test_an_expired_or_narrow_enr_table_is_refused(tmp_path: Path) -> None:
    bench = load_bench(SIM_BENCH)
    sequence = load_sequence(_sequence(tmp_path))
    with pytest.raises(InputError, match="expired on 2028-06-12"):
        check_noise_figure(sequence, bench, today=datetime(2028, 7, 1, tzinfo=UTC))
    narrow = load_sequence(_sequence(tmp_path, if_="5 MHz"))
    with pytest.raises(InputError, match="covers 10 to 13600 MHz, but the noise_figure"):
        check_noise_figure(narrow, bench, today=datetime(2026, 12, 1, tzinfo=UTC))


def test_a_stated_attenuation_is_read_at_and_calibrated_at(tmp_path: Path) -> None:
    """The readings take the planner's settings (here stated: 4 dB, 10 averages, 1 MHz), and
    the system calibration runs at the same attenuation: the receive path's noise grows by
    those 4 dB, and a calibration at 0 dB under-corrects the second stage (tried: the figure
    then reads 0.87 dB high at 1.8 GHz, far outside the tolerance)."""
    text = SEQUENCE.format(if_="100 MHz").replace(
        '{ kind = "noise_figure", sideband = "ssb" }',
        '{ kind = "noise_figure", analyzer = { attenuation = "4 dB", averages = 10, '
        'rbw = "1 MHz" } }').replace('lo_power = ["-6 dBm", "0 dBm", "6 dBm"]',
                                     'lo_power = "6 dBm"')
    path = tmp_path / "noise.toml"
    path.write_text(text, encoding="utf-8")
    store_path = tmp_path / "runs.sqlite"
    outcome = run_sequence(path, sim=True, store_path=store_path, sim_description="clean")
    assert outcome.status == "complete"
    with SqliteRunStore(store_path, create=False) as store:
        frame = store.readings_frame(outcome.run_id)
        run = reduce_run(store, outcome.run_id)
    noise = frame[frame["kind"] == "noise_figure"]
    assert set(noise["attenuation_db"]) == {4.0} and set(noise["averages"]) == {10}
    assert set(noise["rbw_hz"]) == {1e6}
    part = prepare_part(resolve_description("clean"))
    for f in run.figures_named("noise_figure"):
        c = f.conditions
        truth = part_noise_figure(part, temperature_c=23.0, supply_v=3.3,
                                  lo_freq_hz=float(c["rf_freq_hz"]) - 100e6, lo_power_dbm=6.0,
                                  rf_freq_hz=float(c["rf_freq_hz"]))
        assert abs(f.value - truth.dsb_db) <= 0.3, (c, f.value, truth.dsb_db, f.flags)
