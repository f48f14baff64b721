"""Calibration on the simulated bench: the power meter at the DUT RF and LO planes measures
each source connection, and through the calibration thru the analyzer against the power meter
measures each output path; a run with the result gets the part's true gain."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from sweeprig.analysis.reduce import RunFigures, reduce_run
from sweeprig.engine.calibrate import calibrate_sources, calibration_level_dbm
from sweeprig.engine.session import run_sequence, shipped_sequences_dir
from sweeprig.errors import InputError, SweeprigError
from sweeprig.formats.bench import load_bench
from sweeprig.formats.calibration import load_calibration
from sweeprig.sim.mixer import OperatingPoint, load_part, reference_figures
from sweeprig.sim.mixer.reference import line_power_dbm, output_freq_hz
from sweeprig.sim.mixer.types import ToneInput
from sweeprig.store.sqlite import SqliteRunStore

QUICK = shipped_sequences_dir() / "demo" / "quick.toml"
SIM_BENCH = shipped_sequences_dir() / "benches" / "sim.toml"


@pytest.fixture(scope="module")
def calibrated(tmp_path_factory):
    folder = tmp_path_factory.mktemp("cal")
    # the clean bench: its small, known errors are pinned below (the default bench's, up to
    # 1 dB, by tests/engine/test_calibrated_figures.py)
    result = calibrate_sources(QUICK, None, folder / "cal.toml", sim=True, repeats=3,
                               sim_description="clean")
    return folder, result


def _reduced(store_path: Path, run_id: int) -> RunFigures:
    with SqliteRunStore(store_path, create=False) as store:
        return reduce_run(store, run_id)


def _gain_errors(run: RunFigures) -> list[tuple[float, float]]:
    """(measured − model truth, stated U) of every conversion gain figure. The truth is the
    part's own gain at the drive it gets (its output line over its input tone, evaluated on
    the model directly): at −20 dBm the part is already 0.04 dB into compression, which the
    small-signal figure of :func:`reference_figures` leaves out."""
    part = load_part("kx-2417")
    out = []
    for figure in run.figures_named("conversion_gain"):
        row = run.captures[run.captures["point"] == figure.points[0]].iloc[0]
        op = OperatingPoint(float(row["probe_temperature_c"]), float(row["supply_v"]))
        lo = ToneInput(float(row["lo_freq_hz"]), float(row["lo_power_dbm"]))
        f_rf, p_rf = float(row["rf_freq_hz"]), float(row["rf_power_dbm"])
        response = part.evaluate(op, lo, [ToneInput(f_rf, p_rf)])
        truth = line_power_dbm(response.if_port, output_freq_hz(part, f_rf, lo.freq_hz)) - p_rf
        small = reference_figures(part, op, lo.freq_hz, lo.power_dbm, f_rf)
        assert -0.06 < truth - small.conversion_gain_db < 0  # the compression named above
        out.append((figure.value - truth, figure.uncertainty_db))
    return out


def test_the_calibration_file_holds_what_was_measured(calibrated):
    _, result = calibrated
    cal = load_calibration(result.path)
    # The sources at their DUT planes, and the IF path (every line quick.toml reads is at the
    # IF port), routed by the switch: nothing is left to typed losses.
    assert set(cal.model.loss) == {"rf", "rf2", "lo", "if"}
    assert result.skipped == {}
    assert "through a calibration thru" in cal.model.method
    # The simulated IF cable is 1.5 dB flat; the analyzer reads the thru's tone within 0.02.
    assert all(abs(loss - 1.5) <= 0.02 for loss in result.tables["if"][1])
    assert all(abs(loss - 2.0) <= 0.2 for loss in np.ravel(result.tables["lo"][1]))
    # Each source over the levels quick.toml gives it (dBm at the DUT plane).
    assert result.levels == {"rf": [-25.0, -20.0], "rf2": [-25.0, -20.0], "lo": [7.0]}
    assert cal.model.loss["rf"].level == (-25.0, -20.0) and cal.model.loss["if"].level is None
    assert cal.model.instruments["pm"].startswith("Tarnwick Labs,TW-PM18")
    assert cal.model.temperature == pytest.approx(23.0, abs=1.0)  # the chamber's probe
    # The simulated cabling is rf 2.5 dB + combiner 0.5 dB; the source's own level error
    # (a ripple within ±0.15 dB) is in the measured loss too.
    assert all(abs(loss - 3.0) <= 0.2 for loss in np.ravel(result.tables["rf"][1]))
    # The figures: repeatable within ±0.02 dB, done within 15 min of bench time.
    assert result.repeatability_db is not None and result.repeatability_db <= 0.02
    assert max(result.spread_db.values()) <= 0.02
    assert result.duration_s <= 15 * 60
    assert result.safe is not None and result.safe.ok
    assert calibration_level_dbm(load_bench(SIM_BENCH)) == -10.0


def test_a_calibrated_run_gets_the_parts_gain_and_states_an_honest_uncertainty(calibrated):
    folder, result = calibrated
    store = folder / "runs.sqlite"
    plain = run_sequence(QUICK, sim=True, store_path=store, sim_description="clean")
    fixed = run_sequence(QUICK, sim=True, store_path=store, calibration=result.path,
                         sim_description="clean")
    before = _gain_errors(_reduced(store, plain.run_id))
    after = _gain_errors(_reduced(store, fixed.run_id))
    # The source's level ripple (up to ±0.15 dB) is gone, and so is the output path's
    # error: the issue's ±0.05 dB for a calibrated gain.
    spread = [max(e for e, _ in errors) - min(e for e, _ in errors) for errors in (before, after)]
    assert spread[1] <= 0.01 < spread[0]
    assert max(abs(e) for e, _ in after) <= 0.05
    assert max(abs(e) for e, _ in after) < max(abs(e) for e, _ in before)
    assert all(abs(e) <= u for e, u in after + before)  # U (k = 2) covers the error


def test_a_bench_without_a_power_meter_is_refused(tmp_path):
    text = SIM_BENCH.read_text(encoding="utf-8").replace(
        'pm      = { resource = "sim", profile = "scpi-powermeter" }\n', "")
    bench = tmp_path / "bench.toml"
    bench.write_text(text, encoding="utf-8")
    with pytest.raises(InputError) as info:
        calibrate_sources(QUICK, bench, tmp_path / "cal.toml", sim=True)
    assert "no power meter" in info.value.what and "roles.pm" in (info.value.fix or "")
    assert not (tmp_path / "cal.toml").exists()


def test_a_nonsense_reading_ends_the_calibration_with_rf_off(tmp_path, monkeypatch):
    from sweeprig.instruments.powermeter import PowerMeterDriver
    from sweeprig.sim import bench as sim_bench_module

    started = []
    real_start = sim_bench_module.start_sim_bench

    def watching(*args, **kwargs):
        sim = real_start(*args, **kwargs)
        started.append(sim)
        return sim

    monkeypatch.setattr(sim_bench_module, "start_sim_bench", watching)
    monkeypatch.setattr(PowerMeterDriver, "read_power_dbm", lambda self: float("nan"))
    with pytest.raises(SweeprigError) as info:
        calibrate_sources(QUICK, None, tmp_path / "cal.toml", sim=True)
    assert "not a number" in info.value.what and "power meter (role pm)" in str(info.value)
    assert "zeroed" in (info.value.fix or "")
    assert not (tmp_path / "cal.toml").exists()
    assert started and all(not s.instruments[r].output_on for s in started
                           for r in ("rf", "rf2", "lo"))


def test_a_reading_far_from_the_prediction_ends_the_calibration(tmp_path, monkeypatch):
    # a sensor reading 25 dB high (a meter's display offset that the connect check cannot
    # see, say): far outside what the settings and the typed losses predict, refused
    from sweeprig.instruments.powermeter import PowerMeterDriver

    real = PowerMeterDriver.read_power_dbm
    monkeypatch.setattr(PowerMeterDriver, "read_power_dbm", lambda self: real(self) + 25.0)
    with pytest.raises(SweeprigError) as info:
        calibrate_sources(QUICK, None, tmp_path / "cal.toml", sim=True)
    text = str(info.value)
    assert "power meter (role pm), rf at" in text and "typed loss" in text, text
    assert not (tmp_path / "cal.toml").exists()
