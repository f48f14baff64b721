"""A calibration's loss over frequency AND level: bilinear interpolation checked against
scipy's ``RegularGridInterpolator`` (method "linear": the reference for interpolation on a
rectangular grid), no extrapolation, and the calibration file's level axis."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta
from pathlib import Path

import numpy as np
import pytest
from scipy.interpolate import RegularGridInterpolator

from sweeprig.errors import InputError
from sweeprig.formats.calibration import calibration_text, load_calibration
from sweeprig.formats.level_grid import LevelGridLoss
from sweeprig.formats.pathloss import ConstantLoss, TableLoss

FREQ = np.array([1.0e9, 1.5e9, 2.0e9, 3.0e9])
LEVEL = np.array([-40.0, -30.0, -25.0, 0.0])


def _grid() -> LevelGridLoss:
    rng = np.random.default_rng(7)
    table = 3.0 + rng.uniform(-0.5, 0.5, size=(LEVEL.size, FREQ.size))
    return LevelGridLoss(FREQ, LEVEL, table, file="cal.toml", where="cal.toml:20: loss.rf")


def test_bilinear_interpolation_matches_scipys_regular_grid_interpolator() -> None:
    grid = _grid()
    reference = RegularGridInterpolator((LEVEL, FREQ), grid.loss_table_db, method="linear")
    rng = np.random.default_rng(11)
    f = rng.uniform(FREQ[0], FREQ[-1], 500)
    p = rng.uniform(LEVEL[0], LEVEL[-1], 500)
    np.testing.assert_allclose(grid.loss_db(f, p), reference(np.column_stack([p, f])),
                               atol=1e-12)
    # on the grid's own points: the table itself
    assert grid.at(2.0e9, -25.0) == pytest.approx(grid.loss_table_db[2, 2])
    assert grid.at(3.0e9, 0.0) == pytest.approx(grid.loss_table_db[3, 3])
    # a scalar level broadcasts over frequencies
    np.testing.assert_allclose(grid.loss_db(FREQ, -30.0), grid.loss_table_db[1])


def test_a_point_outside_the_grid_is_refused_never_extrapolated() -> None:
    grid = _grid()
    for f, p in ((2e9, -41.0), (2e9, 0.5), (0.9e9, -30.0), (3.1e9, -30.0)):
        with pytest.raises(InputError) as info:
            grid.at(f, p)
        assert "outside the calibrated grid" in info.value.what
        assert "-40 to 0 dBm" in info.value.what and info.value.where == "cal.toml:20: loss.rf"
    with pytest.raises(InputError):
        grid.at(2e9)  # a grid needs the level
    mask = grid.outside([2e9, 2e9, 2e9], [-45.0, -20.0, 3.0])
    assert mask.tolist() == [True, False, True]
    assert grid.estimate_at(2e9, 10.0) == pytest.approx(grid.at(2e9, 0.0))


def test_flat_losses_take_a_level_and_ignore_it() -> None:
    assert ConstantLoss(3.0).at(2e9, -20.0) == 3.0
    assert ConstantLoss(3.0).loss_db(FREQ, np.full(FREQ.size, -5.0)).tolist() == [3.0] * 4
    table = TableLoss(FREQ, np.array([1.0, 2.0, 3.0, 4.0]))
    assert table.at(2.5e9, -30.0) == pytest.approx(3.5)


def _write(path: Path, **levels: tuple[list[float], list[list[float]]]) -> Path:
    now = datetime.now(UTC)
    band = [1e9, 3e9]
    path.write_text(calibration_text(
        created=now, expires=now + timedelta(days=1), temperature_c=23.0, bench="b",
        method="test", instruments={}, tables={"rf": (band, []), "if": (band, [1.5, 1.5])},
        levels=levels), encoding="utf-8")
    return path


def test_a_calibration_file_carries_the_level_axis(tmp_path: Path) -> None:
    path = _write(tmp_path / "cal.toml", rf=([-30.0, -10.0], [[3.1, 3.3], [3.0, 3.2]]))
    cal = load_calibration(path)
    rf = cal.table("rf")
    assert isinstance(rf, LevelGridLoss)
    assert rf.at(2e9, -20.0) == pytest.approx((3.2 + 3.1) / 2)
    assert isinstance(cal.table("if"), TableLoss)
    assert "rf (2 levels, -30 to -10 dBm)" in cal.describe()


@pytest.mark.parametrize(("levels", "rows", "message"), [
    ([-10.0, -30.0], [[3.0, 3.0], [3.0, 3.0]], "strictly ascending"),
    ([-30.0, -10.0], [[3.0, 3.0]], "one row of losses per level"),
    ([-30.0, -10.0], [[3.0, 3.0], [3.0]], "one row of losses per level"),
])
def test_a_damaged_level_axis_is_refused(tmp_path: Path, levels: list[float],
                                         rows: list[list[float]], message: str) -> None:
    path = _write(tmp_path / "cal.toml", rf=(levels, rows))
    with pytest.raises(InputError) as info:
        load_calibration(path)
    assert message in info.value.what and "loss.rf" in str(info.value)
