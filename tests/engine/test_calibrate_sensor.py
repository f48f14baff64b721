"""The power meter in a calibration: zeroing (run, read back), the sensor's calibration factor
(applied and stated), closed-loop levelling and attended calibration (the operator moves the
sensor where the bench's switch has no route), on the simulated bench."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

from sweeprig.engine.calibrate import LEVEL_MAX_ITERATIONS, calibrate_sources
from sweeprig.engine.session import shipped_sequences_dir
from sweeprig.errors import InputError, SweeprigError
from sweeprig.formats.calibration import load_calibration
from sweeprig.formats.sensor import SensorSpec
from sweeprig.sim import bench as sim_bench_module
from sweeprig.sim.instruments.powermeter import sensor_cal_factor_percent

QUICK = shipped_sequences_dir() / "demo" / "quick.toml"
SIM_BENCH = shipped_sequences_dir() / "benches" / "sim.toml"


@pytest.fixture
def started(monkeypatch):
    """The simulated benches a test starts (to look at their instruments afterwards)."""
    benches = []
    real_start = sim_bench_module.start_sim_bench

    def watching(*args, **kwargs):
        sim = real_start(*args, **kwargs)
        benches.append(sim)
        return sim

    monkeypatch.setattr(sim_bench_module, "start_sim_bench", watching)
    return benches


def _bench(tmp_path: Path, old: str, new: str) -> Path:
    text = SIM_BENCH.read_text(encoding="utf-8")
    assert old in text
    path = tmp_path / "bench.toml"
    path.write_text(text.replace(old, new), encoding="utf-8")
    return path


def test_the_cal_factor_table_interpolates_and_never_extrapolates() -> None:
    spec = SensorSpec.model_validate(
        {"cal_factor": {"freq": ["1 GHz", "3 GHz"], "percent": [98.0, 96.0]}})
    # 97 % midway: 10·log10(0.97) dB (the usual definition of a calibration factor)
    assert spec.cal_factor_db(2e9) == pytest.approx(10 * math.log10(0.97))
    with pytest.raises(InputError) as info:
        spec.cal_factor_db(3.5e9)
    assert "outside the sensor's calibration-factor table" in info.value.what
    assert "extrapolated" in (info.value.fix or "")
    assert SensorSpec().cal_factor_db(5e9) == 0.0  # no table: the meter's reading as it is


def test_the_sensor_is_zeroed_and_its_cal_factor_applied(tmp_path, started) -> None:
    with_table = calibrate_sources(QUICK, None, tmp_path / "a.toml", sim=True, repeats=1)
    assert with_table.zeroed and started[0].instruments["pm"].zeroings == 1
    method = load_calibration(with_table.path).model.method
    assert "sensor zeroed first" in method and "calibration factor" in method
    # Without the table the sensor's response stays in the losses: every rf loss is larger
    # by the factor the simulated sensor has (it reads low), so the table matters.
    bench = _bench(tmp_path, "[sensor]\ncal_factor =", "[sensor]\n# cal_factor =")
    without = calibrate_sources(QUICK, bench, tmp_path / "b.toml", sim=True, repeats=1)
    freqs, losses = with_table.tables["rf"]
    _, losses_without = without.tables["rf"]
    # (one row per level of the grid; the factor is the same at every level)
    pairs = [(f, a, b) for row, row_without in zip(losses, losses_without, strict=True)
             for f, a, b in zip(freqs, row, row_without, strict=True)]
    for f, a, b in pairs:
        factor_db = -10 * math.log10(sensor_cal_factor_percent(f) / 100)
        assert factor_db > 0.1
        assert b - a == pytest.approx(factor_db, abs=0.01)


def test_a_sensor_left_unzeroed_is_zeroed_by_the_calibration(tmp_path, started) -> None:
    desc = tmp_path / "desc.toml"
    desc.write_text('part = "kx-2417"\n[power_meter]\nzero_offset = "-35 dBm"\n',
                    encoding="utf-8")
    result = calibrate_sources(QUICK, None, tmp_path / "cal.toml", sim=True, repeats=1,
                               sim_description=desc)
    assert result.zeroed and result.path.exists()
    # A bench file that does not zero: the same sensor is refused, no RF was on.
    bench = _bench(tmp_path, "zero = true", "zero = false")
    with pytest.raises(SweeprigError) as info:
        calibrate_sources(QUICK, bench, tmp_path / "no.toml", sim=True, repeats=1,
                          sim_description=desc)
    assert "not zeroed" in info.value.what and not (tmp_path / "no.toml").exists()
    assert all(not s.instruments[r].output_on for s in started for r in ("rf", "rf2", "lo"))


def test_closed_loop_levelling_reaches_the_target_within_its_bounds(tmp_path) -> None:
    open_loop = calibrate_sources(QUICK, None, tmp_path / "a.toml", sim=True, repeats=1,
                                  sim_description="bench-errors")
    levelled = calibrate_sources(QUICK, None, tmp_path / "b.toml", sim=True, repeats=1,
                                 sim_description="bench-errors", levelling=True)
    counts = [n for per in levelled.level_iterations.values() for n in per]
    assert counts and max(counts) <= LEVEL_MAX_ITERATIONS
    assert max(counts) >= 2  # the errors bench's sources are up to 1 dB off: it had to set again
    assert not open_loop.level_iterations
    assert "levelled in closed loop" in load_calibration(levelled.path).model.method
    # The loss is the same whichever way it was measured (the source level error barely
    # changes over the few tenths of a dB the levelling moves it).
    for connection, (_, losses) in open_loop.tables.items():
        for a, b in zip(np.ravel(losses), np.ravel(levelled.tables[connection][1]),
                        strict=True):
            assert b == pytest.approx(a, abs=0.03)


NO_SENSOR_ROUTES = ("pm_rf = 4, pm_lo = 5, part = 6, thru = 7", "part = 6, thru = 7")


def test_attended_calibration_asks_the_operator_to_move_the_sensor(tmp_path, started) -> None:
    bench = _bench(tmp_path, *NO_SENSOR_ROUTES)
    prompts: list[str] = []

    def operator(prompt: str) -> bool:
        prompts.append(prompt)
        # every RF output is off while the operator moves the cable
        assert all(not started[0].instruments[r].output_on for r in ("rf", "rf2", "lo"))
        switch = started[0].instruments["switch"]
        switch.move_by_hand(5 if "LO input plane" in prompt else 4)
        return True

    steps: list[str] = []
    result = calibrate_sources(QUICK, bench, tmp_path / "cal.toml", sim=True, repeats=1,
                               operator=operator, on_step=steps.append)
    assert "lo" in result.tables and "lo" not in result.skipped
    assert prompts[0].startswith("step 1: every RF output is off")
    assert any("LO input plane" in p for p in prompts)
    assert any("RF input plane" in p for p in prompts)
    assert "put the cables back" in steps[-1]
    # The same as the switch measures it.
    routed = calibrate_sources(QUICK, None, tmp_path / "routed.toml", sim=True, repeats=1)
    for a, b in zip(np.ravel(result.tables["lo"][1]), np.ravel(routed.tables["lo"][1]),
                    strict=True):
        assert a == pytest.approx(b, abs=0.02)


def test_end_of_input_stops_an_attended_calibration_with_rf_off(tmp_path, started) -> None:
    bench = _bench(tmp_path, *NO_SENSOR_ROUTES)
    answers = iter([True])

    def operator(prompt: str) -> bool:
        return next(answers, False)

    with pytest.raises(SweeprigError) as info:
        calibrate_sources(QUICK, bench, tmp_path / "cal.toml", sim=True, repeats=1,
                          operator=operator)
    assert "stopped by the operator" in info.value.what and "step 2" in info.value.what
    assert not (tmp_path / "cal.toml").exists()
    assert all(not s.instruments[r].output_on for s in started for r in ("rf", "rf2", "lo"))


def test_the_attended_command_reads_enter_from_piped_input(tmp_path) -> None:
    from typer.testing import CliRunner

    from sweeprig.cli.main import app

    bench = _bench(tmp_path, *NO_SENSOR_ROUTES)
    out = tmp_path / "cal.toml"
    args = ["calibrate", str(QUICK), "--bench", str(bench), "--sim", "--out", str(out),
            "--repeats", "1", "--attended"]
    stopped = CliRunner().invoke(app, args, input="\n", env={"COLUMNS": "200"})
    assert stopped.exit_code != 0 and "stopped by the operator" in stopped.output
    assert "step 1" in stopped.output and not out.exists()
    # Enter at every step: the simulated sensor stays at the RF plane (nobody moves it), so
    # the LO reading is far from what the setting predicts and is refused, as on a bench
    # where the cable was not moved.
    moved = CliRunner().invoke(app, args, input="\n" * 5, env={"COLUMNS": "200"})
    assert moved.exit_code != 0 and "power meter (role pm), lo" in moved.output
    assert not out.exists()
