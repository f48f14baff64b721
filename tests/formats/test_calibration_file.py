"""Calibration files: written with their checksum, read back, refused when damaged,
expired or made with other instruments."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta
from pathlib import Path

import numpy as np
import pytest

from sweeprig.errors import InputError
from sweeprig.formats.calibration import (
    calibration_text,
    check_calibration_age,
    check_calibration_instruments,
    identity,
    load_calibration,
    text_sha256,
)

MADE = datetime(2026, 11, 30, 9, 0, tzinfo=UTC)
IDNS = {"rf": "Fictional Labs,SG-1,SN100,1.0", "pm": "Fictional Labs,PM-1,SN200,2.1"}


def write(tmp_path: Path, **changes: object) -> Path:
    args: dict[str, object] = dict(
        created=MADE, expires=MADE + timedelta(days=30), temperature_c=23.5, bench="Bench 7",
        method="power meter at the DUT RF port", instruments=IDNS,
        tables={"rf": ([2.0e9, 2.2e9, 2.4e9], [3.02, 3.05, 3.11]),
                "if": ([50e6, 100e6], [1.5, 1.52])},
        repeatability_db=0.012)
    args.update(changes)
    path = tmp_path / "cal.toml"
    path.write_text(calibration_text(**args), encoding="utf-8")  # type: ignore[arg-type]
    return path


def test_a_written_calibration_reads_back(tmp_path: Path) -> None:
    cal = load_calibration(write(tmp_path))
    m = cal.model
    assert m.created == MADE and m.temperature == 23.5 and m.repeatability == pytest.approx(0.012)
    assert m.instruments == IDNS
    assert cal.input_calibrated and cal.output_calibrated
    table = cal.table("rf")
    assert table.at(2.1e9) == pytest.approx((3.02 + 3.05) / 2)  # linear in frequency
    np.testing.assert_allclose(table.loss_db([2.0e9, 2.4e9]), [3.02, 3.11])
    with pytest.raises(InputError, match="calibrate again"):
        table.at(2.5e9)  # never extrapolated
    assert "cal.toml" in cal.describe() and "if, rf" in cal.describe()


def test_the_checksum_guards_every_character(tmp_path: Path) -> None:
    path = write(tmp_path)
    text = path.read_text(encoding="utf-8")
    assert text_sha256(text) in text
    path.write_text(text.replace("3.05", "3.04"), encoding="utf-8")
    with pytest.raises(InputError) as info:
        load_calibration(path)
    assert "cal.toml:" in str(info.value) and "sha256" in str(info.value)
    assert "checksum does not match" in info.value.what


def test_expiry_is_refused_unless_accepted(tmp_path: Path) -> None:
    cal = load_calibration(write(tmp_path))
    assert check_calibration_age(cal, MADE + timedelta(days=29)) is None
    with pytest.raises(InputError) as info:
        check_calibration_age(cal, MADE + timedelta(days=31))
    assert "expired on 2026-12-30" in info.value.what and "expires" in str(info.value)
    assert "--accept-calibration" in (info.value.fix or "")
    warning = check_calibration_age(cal, MADE + timedelta(days=31), accept=True)
    assert warning is not None and "accepted" in warning


def test_other_instruments_are_refused_by_maker_model_and_serial(tmp_path: Path) -> None:
    cal = load_calibration(write(tmp_path))
    # Firmware may change (IEEE 488.2 *IDN? field 4); the instrument is the same.
    assert check_calibration_instruments(
        cal, {"rf": "Fictional Labs,SG-1,SN100,1.1", "pm": IDNS["pm"], "sa": "x,y,z,1"}) is None
    with pytest.raises(InputError) as info:
        check_calibration_instruments(cal, {"rf": "Fictional Labs,SG-1,SN101,1.0"})
    assert "rf: calibrated with" in info.value.what and "SN101" in info.value.what
    assert "instruments" in str(info.value)
    assert check_calibration_instruments(cal, {"rf": "Fictional Labs,SG-1,SN101,1.0"},
                                         accept=True) is not None
    assert identity("A, B ,C") == ("A", "B", "C")


@pytest.mark.parametrize(("tables", "words"), [
    ({"rf": ([2.0e9, 2.0e9], [3.0, 3.1])}, "strictly ascending"),
    ({"rf": ([2.0e9], [3.0, 3.1])}, "1 frequencies and 2 losses"),
    ({"bogus": ([2.0e9], [3.0])}, "not a bench connection"),
])
def test_malformed_tables_are_refused_where_they_are(tmp_path: Path, tables: dict,
                                                     words: str) -> None:
    with pytest.raises(InputError) as info:
        load_calibration(write(tmp_path, tables=tables))
    assert words in info.value.what and "cal.toml:" in str(info.value)


def test_a_calibration_that_expires_before_it_was_made_is_refused(tmp_path: Path) -> None:
    with pytest.raises(InputError, match="expires before it was made"):
        load_calibration(write(tmp_path, expires=MADE - timedelta(days=1)))


def test_non_finite_numbers_are_never_written() -> None:
    with pytest.raises(ValueError, match="not a finite number"):
        calibration_text(created=MADE, expires=MADE + timedelta(days=1), temperature_c=23.0,
                         bench="b", method="m", instruments={},
                         tables={"rf": ([2e9], [float("nan")])})
