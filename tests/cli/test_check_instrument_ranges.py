"""``sweeprig check`` refuses what the run would refuse: settings beyond an instrument's own
range (its driver profile), even where the bench file's limits are wider, and a profile of the
wrong kind for a role; each message names the true origin of the limit (profile file and line,
bench file line, or part rating)."""

from __future__ import annotations

from pathlib import Path

import pytest
from typer.testing import CliRunner

from sweeprig.cli.main import app

#: Every limit wider than the shipped profiles' ranges, so that only the instrument's own
#: range (its profile) can refuse. All fictional.
WIDE_BENCH = """\
format = 1

[bench]
name = "Wide-limit bench (fictional)"

[roles]
rf      = { resource = "sim", profile = "scpi-source" }
rf2     = { resource = "sim", profile = "scpi-source" }
lo      = { resource = "sim", profile = "scpi-source" }
sa      = { resource = "sim", profile = "scpi-analyzer" }
pm      = { resource = "sim", profile = "scpi-powermeter" }
dc      = { resource = "sim", profile = "scpi-supply" }
chamber = { resource = "sim", profile = "thermal-chamber" }
switch  = { resource = "sim", profile = "scpi-switch", channels = { if = 1, rf = 2, lo = 3 } }

[path_loss]
rf = "3 dB"
lo = "2 dB"
if = "1.5 dB"

[limits]
source_max_power = { rf = "25 dBm", rf2 = "25 dBm", lo = "25 dBm" }
analyzer_max_input = "30 dBm"
supply_max_voltage = "40 V"
supply_max_current = "200 mA"
chamber_min = "-100 degC"
chamber_max = "200 degC"

[limits.part]
rf_input_max = "25 dBm"
lo_input_max = "25 dBm"
supply_max = "40 V"
"""

SEQUENCE = """\
[part]
id = "KX-0001 (fictional)"
expected_gain = "-7 dB"
expected_lo_if_isolation = "30 dB"
expected_lo_rf_isolation = "30 dB"
expected_rf_if_isolation = "30 dB"

[mixing]
if_frequency = "70 MHz"

[conditions]
temperature = "25 degC"
supply = "3.3 V"
soak = "1 s"

[[study]]
name = "s"
rf_frequency = "2.4 GHz"
rf_power = "-20 dBm"
lo_power = "7 dBm"
read = ["wanted"]
"""


def _line_of(text: str, fragment: str) -> int:
    return next(n for n, line in enumerate(text.splitlines(), 1) if fragment in line)


def check(tmp_path: Path, sequence: str = SEQUENCE, bench: str = WIDE_BENCH):
    seq_file, bench_file = tmp_path / "seq.toml", tmp_path / "bench.toml"
    seq_file.write_text(sequence, encoding="utf-8")
    bench_file.write_text(bench, encoding="utf-8")
    result = CliRunner().invoke(app, ["check", str(seq_file), "--bench", str(bench_file)],
                                env={"COLUMNS": "200"})
    assert result.exception is None or isinstance(result.exception, SystemExit), \
        result.exception  # never a traceback
    return result


def test_the_wide_bench_passes_a_plan_inside_every_range(tmp_path: Path) -> None:
    result = check(tmp_path)
    assert result.exit_code == 0, result.output


@pytest.mark.parametrize(("temperature", "key", "bound"), [
    ("190 degC", "ops.setpoint.max", "at most 180 degC"),
    ("-80 degC", "ops.setpoint.min", "at least -70 degC"),
])
def test_temperature_beyond_the_chambers_profile(tmp_path: Path, temperature: str, key: str,
                                                 bound: str) -> None:
    result = check(tmp_path, SEQUENCE.replace('"25 degC"', f'"{temperature}"'))
    assert result.exit_code == 3, result.output
    out = result.output
    assert "chamber set point" in out and "the chamber's profile 'thermal-chamber'" in out
    assert f"drivers/thermal-chamber.toml:{_profile_line('thermal-chamber', key)}: {key}" in out
    assert bound in out and "the bench file (" not in out


def test_supply_voltage_beyond_the_supplys_profile(tmp_path: Path) -> None:
    result = check(tmp_path, SEQUENCE.replace('"3.3 V"', '"35 V"'))
    assert result.exit_code == 3, result.output
    line = _profile_line("scpi-supply", "ops.voltage.max")
    assert f"drivers/scpi-supply.toml:{line}: ops.voltage.max" in result.output
    assert "the dc supply's profile 'scpi-supply'" in result.output
    assert "at most 30 V" in result.output


def test_source_level_beyond_the_sources_profile(tmp_path: Path) -> None:
    # 19 dBm at the DUT + 3 dB of cable = 22 dBm at the source: under the bench's 25 dBm,
    # above the instrument's own 20 dBm
    result = check(tmp_path, SEQUENCE.replace('rf_power = "-20 dBm"', 'rf_power = "19 dBm"'))
    assert result.exit_code == 3, result.output
    out = result.output
    assert "rf source setting would be 22.00 dBm" in out
    line = _profile_line("scpi-source", "ops.power.max")
    assert f"the rf source's profile 'scpi-source' (drivers/scpi-source.toml:{line}: " \
           "ops.power.max) allows at most 20 dBm" in out
    assert "Caution" in out


def test_source_level_below_the_sources_range(tmp_path: Path) -> None:
    result = check(tmp_path, SEQUENCE.replace('rf_power = "-20 dBm"', 'rf_power = "-140 dBm"'))
    assert result.exit_code == 3, result.output
    assert "ops.power.min" in result.output and "at least -130 dBm" in result.output


def test_bench_limit_named_where_it_is_the_tighter(tmp_path: Path) -> None:
    bench = WIDE_BENCH.replace('rf = "25 dBm", rf2', 'rf = "10 dBm", rf2')
    result = check(tmp_path, SEQUENCE.replace('rf_power = "-20 dBm"', 'rf_power = "8 dBm"'),
                   bench)
    assert result.exit_code == 3, result.output
    line = _line_of(bench, "source_max_power")
    assert f"the bench file (bench.toml:{line}: limits.source_max_power.rf) allows at most " \
           "10 dBm" in result.output.replace(str(tmp_path) + "/", "")


def test_frequency_beyond_the_sources_profile(tmp_path: Path) -> None:
    result = check(tmp_path, SEQUENCE.replace('"2.4 GHz"', '"6.5 GHz"'))
    assert result.exit_code == 2, result.output
    out = result.output
    assert "rf source frequency would be 6.5 GHz" in out
    assert "ops.frequency.max) allows at most 6 GHz" in out.replace("6e+09 Hz", "6 GHz")
    assert "point 0" in out


def test_lo_frequency_below_the_sources_profile(tmp_path: Path) -> None:
    # the LO follows the RF 70 MHz below: an RF of 70.005 MHz puts it at 5 kHz
    result = check(tmp_path, SEQUENCE.replace('"2.4 GHz"', '"70.005 MHz"'))
    assert result.exit_code == 2, result.output
    assert "lo source frequency would be 5 kHz" in result.output
    assert "ops.frequency.min" in result.output


def test_switch_channel_beyond_the_switchs_profile(tmp_path: Path) -> None:
    bench = WIDE_BENCH.replace("rf = 2, lo = 3", "rf = 70, lo = 3")
    sequence = SEQUENCE.replace('read = ["wanted"]', 'read = ["wanted", "lo_at_rf"]')
    result = check(tmp_path, sequence, bench)
    assert result.exit_code == 2, result.output
    out = result.output
    assert f"bench.toml:{_line_of(bench, 'switch  =')}: roles.switch.channels.rf" in out
    assert "the RF port's switch channel 70 is above the maximum" in out
    assert "the switch's profile 'scpi-switch'" in out and "allows at most 64" in out


def test_analyzer_centre_beyond_the_analyzers_profile(tmp_path: Path) -> None:
    # 5.9 GHz RF, LO 70 MHz below: the 2×LO + RF product sits near 17.6 GHz, above 13.6 GHz
    sequence = SEQUENCE.replace('"2.4 GHz"', '"5.9 GHz"').replace(
        'read = ["wanted"]', 'read = ["wanted", { kind = "mxn", order = 3 }]')
    result = check(tmp_path, sequence)
    assert result.exit_code == 2, result.output
    assert "analyzer centre frequency would be" in result.output
    assert "the analyzer's profile 'scpi-analyzer'" in result.output
    assert "ops.centre.max) allows at most 13.6 GHz" in result.output


def test_analyzer_averages_beyond_the_analyzers_profile(tmp_path: Path) -> None:
    sequence = SEQUENCE.replace("[[study]]", "[analyzer]\naverages = 20000\n\n[[study]]")
    result = check(tmp_path, sequence)
    assert result.exit_code == 2, result.output
    assert "analyzer averages would be 20000" in result.output
    assert "ops.averages.max" in result.output


@pytest.mark.parametrize(("role", "profile", "kind", "wanted"), [
    ("sa", "scpi-source", "a source", "an analyzer"),
    ("rf", "scpi-analyzer", "an analyzer", "a source"),
    ("dc", "thermal-chamber", "a chamber", "a supply"),
])
def test_profile_of_the_wrong_kind_for_a_role(tmp_path: Path, role: str, profile: str,
                                              kind: str, wanted: str) -> None:
    head = f"{role:<7} = {{"
    lines = WIDE_BENCH.splitlines(keepends=True)
    number = next(n for n, line in enumerate(lines) if line.startswith(head))
    lines[number] = f'{role:<7} = {{ resource = "sim", profile = "{profile}" }}\n'
    bench = "".join(lines)
    result = check(tmp_path, bench=bench)
    assert result.exit_code == 2, result.output
    out = result.output
    assert f"bench.toml:{number + 1}: roles.{role}.profile" in out
    assert f"drives {kind}" in out and f"takes {wanted} profile" in out
    assert "AttributeError" not in out and "internal error" not in out


def test_safe_state_chamber_beyond_the_chambers_profile(tmp_path: Path) -> None:
    bench = WIDE_BENCH + '\n[safe_state]\nchamber = "190 degC"\n'
    result = check(tmp_path, bench=bench)
    assert result.exit_code == 3, result.output
    line = _line_of(bench, '"190 degC"')
    assert f"bench.toml:{line}: safe_state.chamber" in result.output
    assert "ops.setpoint.max" in result.output


def test_current_limit_beyond_the_supplys_profile(tmp_path: Path) -> None:
    bench = WIDE_BENCH.replace('"200 mA"', '"5 A"')
    result = check(tmp_path, bench=bench)
    assert result.exit_code == 3, result.output
    assert "limits.supply_max_current" in result.output
    assert "ops.current_limit.max) allows at most 3 A" in result.output


def _profile_line(name: str, key: str) -> int:
    """Line of ``ops.<op>.<side>`` in a shipped profile."""
    from sweeprig.instruments.profile import builtin_profile_dirs, key_line

    path = next(d / f"{name}.toml" for d in builtin_profile_dirs() if (d / f"{name}.toml")
                .is_file())
    return key_line(path.read_text(encoding="utf-8"), tuple(key.split(".")))
