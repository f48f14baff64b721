"""The run's live line at 80 and 120 columns (and narrower): what it keeps, what it drops."""

from __future__ import annotations

import io
import re
from pathlib import Path

import pytest
from rich.console import Console
from typer.testing import CliRunner

from sweeprig.cli.main import app
from sweeprig.formats.sequence import load_sequence
from sweeprig.plan.expand import Point
from sweeprig.report.live_line import LiveLine, swept_fields

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "sequences" / "demo" / "kx2417-characterisation.toml"


def _point(**changes) -> Point:
    values = dict(index=17, study="compression", temperature_c=85.0, supply_v=3.3,
                  lo_freq_hz=2.38e9, lo_power_dbm=7.0, rf_freq_hz=2.45e9, rf_power_dbm=-20.0,
                  rf2_freq_hz=None, rf2_power_dbm=None, readings=(), if_freq_hz=70e6)
    values.update(changes)
    return Point(**values)


def _shown(line: LiveLine, width: int) -> str:
    console = Console(width=width, record=True, force_terminal=False, file=io.StringIO())
    console.print(line)
    return console.export_text().rstrip("\n")


def _line(swept=frozenset({"rf_power", "temperature"}), **changes) -> LiveLine:
    line = LiveLine(264, {"compression": frozenset(swept), "band": frozenset({"rf_freq"})})
    for _ in range(17):
        line.point(_point(**changes), 12.4, "1:05:00")
    return line


def test_at_120_columns_every_value_shows():
    shown = _shown(_line(), 120)
    assert shown == ("compression  17/264  RF 2.45 GHz -20 dBm  LO 2.38 GHz 7 dBm  3.3 V  85 °C  "
                     "gain +12.40 dB  eta 1:05:00")


@pytest.mark.parametrize("width", [80, 60, 40, 30])
def test_narrower_lines_drop_constant_values_first_and_keep_count_and_eta(width):
    shown = _shown(_line(), width)
    assert len(shown) <= width
    assert "17/264" in shown and shown.endswith("eta 1:05:00")
    assert "…" not in shown
    if width >= 40:
        assert "-20 dBm" in shown and "85 °C" in shown  # what the study sweeps stays longest


def test_at_80_columns_the_line_keeps_the_sweep_the_conditions_and_the_gain():
    shown = _shown(_line(), 80)
    assert shown == "compression  17/264  RF -20 dBm  3.3 V  85 °C  gain +12.40 dB  eta 1:05:00"
    band = _shown(_line(study="band", temperature_c=25.0), 80)
    assert band == ("band  17/264  RF 2.45 GHz -20 dBm  3.3 V  25 °C  gain +12.40 dB  "
                    "eta 1:05:00")


def test_even_at_20_columns_the_count_and_eta_are_whole():
    assert _shown(_line(), 20) == "17/264  eta 1:05:00"


def test_frequencies_take_the_unit_that_fits():
    shown = _shown(_line(rf_freq_hz=70e6, lo_freq_hz=5.73e9, study="band"), 120)
    assert "RF 70 MHz" in shown and "LO 5.73 GHz" in shown
    assert "0.07 GHz" not in shown


def test_a_wait_shows_what_the_run_waits_for_and_is_cut_not_the_count():
    line = _line()
    line.waiting("chamber to 85 °C (probe 84.2 °C, soak 10 min left)", "0:55:00")
    assert _shown(line, 120) == ("waiting: chamber to 85 °C (probe 84.2 °C, soak 10 min left)  "
                                 "17/264  eta 0:55:00")
    narrow = _shown(line, 40)
    assert narrow.endswith("…  17/264  eta 0:55:00") and len(narrow) <= 40


def test_swept_fields_of_the_demo():
    swept = swept_fields(load_sequence(DEMO))
    assert "rf_freq" in swept["band"] and "temperature" in swept["band"]
    assert "supply" not in swept["band"]  # one supply voltage


def test_the_run_command_ends_on_a_whole_line_at_80_columns(tmp_path):
    result = CliRunner().invoke(app, ["run", str(ROOT / "sequences" / "demo" / "quick.toml"),
                                      "--sim", "--store", str(tmp_path / "r.sqlite"),
                                      "--no-report"], env={"COLUMNS": "80"})
    assert result.exit_code == 0, result.output
    live = next(ln for ln in result.output.splitlines() if re.search(r"\b5/5\b", ln))
    assert len(live) <= 80 and live.endswith("eta 0:00:00"), live
    assert "gain +" in live and "two-tone" in live and "dBm" in live
