"""Source calibration over frequency AND level: the grid of levels a sequence needs, the
source's level error versus its setting measured into the table, and points outside the
grid refused before any instrument is touched."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from sweeprig.engine.calibrate import (
    LEVEL_STEP_DB,
    calibrate_sources,
    level_grid,
    needed_levels,
)
from sweeprig.engine.session import load_run_files, shipped_sequences_dir
from sweeprig.errors import InputError
from sweeprig.formats.bench import load_bench
from sweeprig.formats.sequence import load_sequence
from sweeprig.sim.bench import resolve_description
from sweeprig.sim.instruments.source import linearity_error_db

QUICK = shipped_sequences_dir() / "demo" / "quick.toml"
DEMO = shipped_sequences_dir() / "demo" / "kx2417-characterisation.toml"
SIM_BENCH = shipped_sequences_dir() / "benches" / "sim.toml"


def test_the_grid_spans_the_levels_the_sequence_needs() -> None:
    bench = load_bench(SIM_BENCH)
    needed = needed_levels(load_sequence(DEMO), bench)
    assert needed["rf"][0] == -40.0 and needed["rf"][-1] == 5.0
    assert needed["lo"][0] == -12.0 and needed["lo"][-1] == 6.0
    assert needed["rf2"] == [-40.0 + 2.5 * k for k in range(11)]
    grid = level_grid(needed["rf"], cap_dbm=10.0)
    assert grid[0] == -40.0 and grid[-1] == 5.0
    assert max(np.diff(grid)) <= LEVEL_STEP_DB and len(grid) == 10
    assert level_grid([-12.0, 6.0], cap_dbm=10.0) == pytest.approx(
        [-12.0, -7.5, -3.0, 1.5, 6.0])
    assert level_grid([-20.0, 15.0], cap_dbm=10.0)[-1] == 10.0  # never above the cap
    assert level_grid([7.0], cap_dbm=10.0) == [7.0]


def test_the_table_holds_the_sources_level_error_versus_its_setting(tmp_path: Path) -> None:
    result = calibrate_sources(QUICK, None, tmp_path / "cal.toml", sim=True, repeats=1,
                               sim_description="bench-errors")
    assert result.levels["rf"] == [-25.0, -20.0]
    freqs, rows = result.tables["rf"]
    low, high = np.asarray(rows[0]), np.asarray(rows[1])
    # loss = setting − plane level = cables − the source's errors, so between two levels the
    # loss moves by the change of the source's level error with its setting (the simulated
    # source's own shape, sweeprig.sim.instruments.source.linearity_error_db).
    peak = resolve_description("bench-errors").sources.level_linearity
    expected = [linearity_error_db(-20.0 + h, peak) - linearity_error_db(-25.0 + lo, peak)
                for lo, h in zip(low, high, strict=True)]
    np.testing.assert_allclose(low - high, expected, atol=0.01)
    assert min(abs(v) for v in expected) > 0.05  # larger than the gain tolerance
    assert len(freqs) == low.size


def test_points_outside_the_calibrated_levels_are_refused_and_named(tmp_path: Path) -> None:
    cal = calibrate_sources(QUICK, None, tmp_path / "cal.toml", sim=True, repeats=1,
                            levels={"rf": [-20.0], "rf2": [-20.0]})
    assert cal.levels == {"rf": [-20.0], "rf2": [-20.0], "lo": [7.0]}  # lo: the sequence's
    with pytest.raises(InputError) as info:
        load_run_files(QUICK, None, sim=True, calibration=cal.path)
    what = info.value.what
    assert "outside the calibrated grid" in what and "-20 dBm at the DUT plane" in what
    assert "point 0" in what or "point 3" in what
    assert "calibrate again" in (info.value.fix or "")


def test_a_level_grid_above_the_sensors_range_is_refused(tmp_path: Path) -> None:
    with pytest.raises(InputError) as info:
        calibrate_sources(QUICK, None, tmp_path / "cal.toml", sim=True,
                          levels={"lo": [-20.0, 15.0]})
    assert "lo reaches 15 dBm, above 10 dBm" in info.value.what and "--levels" in str(info.value)
    assert not (tmp_path / "cal.toml").exists()


def test_check_and_plan_name_the_points_outside_the_calibrated_levels() -> None:
    from typer.testing import CliRunner

    from sweeprig.cli.main import app

    narrow = (Path(__file__).resolve().parents[1] / "corpus" / "calibrations"
              / "level-grid-too-narrow.toml")
    for command in (["check", str(QUICK)], ["plan", str(QUICK)]):
        result = CliRunner().invoke(app, [*command, "--calibration", str(narrow)])
        assert result.exit_code == 2, result.output
        text = " ".join(result.output.split())
        if command[0] == "check":  # the calibration's status first
            assert "rf (2 levels, -22 to -20 dBm)" in text
        assert "1 of 2 point(s) need the rf source outside the calibrated grid" in text
        assert "point 3 (study 'two-tone'" in text and "at -25 dBm" in text
