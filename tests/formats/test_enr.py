"""ENR tables: our TOML format, the plain two-column import, coverage and expiry."""

from __future__ import annotations

from datetime import date
from pathlib import Path

import numpy as np
import pytest

from sweeprig.errors import InputError
from sweeprig.formats.bench import load_bench
from sweeprig.formats.enr import import_two_column, load_enr_file

REPO = Path(__file__).resolve().parents[2]
SHIPPED = REPO / "sequences" / "benches" / "enr" / "ns-0417.toml"


def test_shipped_enr_file_loads_with_identity_and_uncertainty() -> None:
    table = load_enr_file(SHIPPED)
    assert table.serial == "NS-0417-0093"
    assert table.calibrated == date(2026, 6, 12) and table.expires == date(2028, 6, 12)
    assert float(table.enr_at(2.25e9)[()]) == pytest.approx((14.98 + 14.93) / 2)
    np.testing.assert_allclose(table.uncertainty_at([1e9, 2.2e9, 13.6e9]), [0.12, 0.12, 0.20])


def test_two_column_import_with_header_comment_and_unit(tmp_path: Path) -> None:
    path = tmp_path / "ns.csv"
    path.write_text("# from the calibration certificate\nfreq_GHz;ENR_dB\n0.01;15.3\n"
                    "2\t15.0\n4.0 14.8\n", encoding="utf-8")
    table = import_two_column(path, serial="NS-1", calibrated=date(2026, 1, 1),
                              expires=date(2027, 1, 1), frequency_unit="GHz")
    assert table.freq_hz == (1e7, 2e9, 4e9) and table.enr_db == (15.3, 15.0, 14.8)


@pytest.mark.parametrize(("text", "message"), [
    ("", "no points"),
    ("1e9, 15\n3e9, 14\n2e9, 14.5\n", "strictly rising"),
    ("1e9, 15, 3\n", "two are expected"),
    ("1e9, 15\nabc, 3\n", "not two numbers"),
])
def test_two_column_import_refuses_broken_tables(tmp_path: Path, text: str,
                                                 message: str) -> None:
    path = tmp_path / "ns.txt"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(InputError) as info:
        import_two_column(path, serial="NS-1", calibrated=None, expires=None)
    assert message in info.value.what and "ns.txt" in (info.value.where or "")


def test_coverage_and_expiry_are_refused_by_name() -> None:
    table = load_enr_file(SHIPPED)
    table.check_covers([70e6, 2.4e9], where="w", what="the study")
    with pytest.raises(InputError, match=r"covers 10 to 13600 MHz"):
        table.check_covers([5e6], where="w", what="the study")
    table.check_current(date(2028, 6, 12), where="w")
    with pytest.raises(InputError) as info:
        table.check_current(date(2028, 6, 13), where="w")
    assert "expired on 2028-06-12" in info.value.what and "NS-0417-0093" in info.value.what


def test_sim_bench_file_carries_the_noise_source() -> None:
    bench = load_bench(REPO / "sequences" / "benches" / "sim.toml")
    assert bench.noise_source is not None and bench.noise_source.drive_voltage == 28.0
    assert bench.enr_table is not None and bench.enr_table.serial == "NS-0417-0093"
    assert bench.roles.nsdc is not None
