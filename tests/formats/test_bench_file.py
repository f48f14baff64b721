"""Bench files: roles, path losses from files, limits, safe state, located errors."""

import warnings
from pathlib import Path

import numpy as np
import pytest

from sweeprig.errors import InputError
from sweeprig.formats.bench import load_bench
from sweeprig.formats.pathloss import ConstantLoss, TableLoss
from sweeprig.formats.schema import json_schema

ROOT = Path(__file__).resolve().parents[2]

BENCH = """\
[bench]
name = "Bench 7 (fictional)"
location = "Lab B"

[roles]
rf = { resource = "TCPIP0::192.0.2.10::5025::SOCKET", profile = "scpi-source" }
lo = { resource = "GPIB0::19::INSTR", profile = "scpi-source" }
sa = { resource = "TCPIP0::192.0.2.12::5025::SOCKET", profile = "scpi-analyzer" }

[path_loss]
rf = "6.2 dB"
if = 1.5

[limits]
source_max_power = { rf = "10 dBm", lo = "16 dBm" }
analyzer_max_input = "25 dBm"
"""


def write(tmp_path: Path, text: str, name: str = "bench.toml") -> Path:
    path = tmp_path / name
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(text, encoding="utf-8")
    return path


def test_sim_bench_loads() -> None:
    bench = load_bench(ROOT / "sequences" / "benches" / "sim.toml")
    assert bench.is_simulated()
    assert bench.loss("rf").at(2.4e9) == 3.0
    assert bench.loss("rf2").at(2.4e9) == 9.0
    assert bench.switch_channel("rf") == 2
    assert bench.safe_state.supply == "off"
    assert bench.safe_state.chamber == 25.0
    assert bench.limits.supply_max_current == pytest.approx(0.2)


def test_defaults_and_constant_losses(tmp_path: Path) -> None:
    bench = load_bench(write(tmp_path, BENCH))
    assert bench.bench.visa_library == "@py"
    assert bench.bench.timeout == 5.0
    assert isinstance(bench.loss("rf"), ConstantLoss)
    assert bench.loss("rf").at(1e9) == 6.2
    assert bench.loss("if").at(70e6) == 1.5
    assert bench.loss("lo").at(1e9) == 0.0  # left out: 0 dB
    assert bench.analyzer_noise_figure_db() == 24.0
    assert not bench.is_simulated()


def test_loss_tables_relative_to_bench_file(tmp_path: Path) -> None:
    write(tmp_path, "freq_hz,loss_db\n1e9,2\n3e9,4\n", "cal/rf.csv")
    import skrf

    freq = skrf.Frequency(1.0, 3.0, 3, unit="GHz")
    s = np.full((3, 2, 2), 0.05 + 0.0j)
    s[:, 1, 0] = s[:, 0, 1] = 0.5
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        skrf.Network(frequency=freq, s=s).write_touchstone(str(tmp_path / "cal" / "if"))
    text = BENCH.replace('rf = "6.2 dB"', 'rf = { csv = "cal/rf.csv" }').replace(
        "if = 1.5", 'if = { touchstone = "cal/if.s2p" }')
    bench = load_bench(write(tmp_path, text))
    assert isinstance(bench.loss("rf"), TableLoss)
    assert bench.loss("rf").at(2e9) == pytest.approx(3.0)
    assert bench.loss("if").at(2e9) == pytest.approx(-20 * np.log10(0.5))


def test_missing_loss_file_is_located(tmp_path: Path) -> None:
    text = BENCH.replace('rf = "6.2 dB"', 'rf = { csv = "cal/none.csv" }')
    with pytest.raises(InputError) as info:
        load_bench(write(tmp_path, text))
    assert info.value.where.endswith(":11: path_loss.rf")
    assert "does not exist" in info.value.what


def test_bad_resource_string(tmp_path: Path) -> None:
    text = BENCH.replace('"GPIB0::19::INSTR"', '"192.0.2.11"')
    with pytest.raises(InputError) as info:
        load_bench(write(tmp_path, text))
    assert info.value.where.endswith(":7: roles.lo.resource")
    assert "VISA resource" in info.value.what


def test_profile_checked_against_known_names(tmp_path: Path) -> None:
    path = write(tmp_path, BENCH.replace('profile = "scpi-analyzer"', 'profile = "scpi-analyser"'))
    with pytest.raises(InputError) as info:
        load_bench(path, known_profiles={"scpi-source", "scpi-analyzer"})
    assert info.value.where.endswith(":8: roles.sa.profile")
    assert "did you mean 'scpi-analyzer'?" in (info.value.fix or "")
    load_bench(path)  # without a list of known profiles, any well-formed name passes


def test_profile_name_pattern(tmp_path: Path) -> None:
    with pytest.raises(InputError) as info:
        load_bench(write(tmp_path, BENCH.replace('"scpi-analyzer"', '"SCPI Analyzer"')))
    assert "roles.sa.profile" in info.value.where


def test_unknown_role_suggests(tmp_path: Path) -> None:
    text = BENCH.replace("sa = {", "sa2 = {")
    with pytest.raises(InputError) as info:
        load_bench(write(tmp_path, text))
    assert "unknown key 'sa2'" in info.value.what
    assert "did you mean" in (info.value.fix or "")


def test_role_specific_options(tmp_path: Path) -> None:
    text = BENCH.replace('profile = "scpi-source" }\nlo', 'profile = "scpi-source", '
                         'noise_figure = "20 dB" }\nlo')
    with pytest.raises(InputError, match="only to the sa role"):
        load_bench(write(tmp_path, text))


def test_safe_state_voltage_over_limit(tmp_path: Path) -> None:
    text = BENCH + 'supply_max_voltage = "5 V"\n[safe_state]\nsupply = "6 V"\n'
    with pytest.raises(InputError, match="safe-state supply"):
        load_bench(write(tmp_path, text))


def test_bench_schema() -> None:
    schema = json_schema("bench")
    assert "if" in schema["$defs"]["PathLosses"]["properties"]
    assert schema["title"] == "sweeprig bench file"


@pytest.mark.parametrize(("resource", "ok"), [
    ("ASRL1::INSTR", True), ("ASRL/dev/ttyUSB0::INSTR", True), ("ASRLCOM3::INSTR", True),
    ("ASRL/dev/serial/by-id/usb-Tarnwick_SG6-if00::INSTR", True),
    ("ASRL/etc/passwd::INSTR", False), ("ASRL/dev/../etc/passwd::INSTR", False),
    ("ASRL/dev/watchdog::INSTR", False), ("ASRL/dev/sda::INSTR", False),
])
def test_a_serial_resource_names_a_serial_port_only(tmp_path: Path, resource: str,
                                                    ok: bool) -> None:
    text = BENCH.replace('"GPIB0::19::INSTR"', f'"{resource}"')
    if ok:
        assert load_bench(write(tmp_path, text)).roles.lo.resource == resource
        return
    with pytest.raises(InputError) as err:
        load_bench(write(tmp_path, text))
    assert "bench.toml:7: roles.lo.resource" in err.value.message()
    assert "serial port" in err.value.message()


@pytest.mark.parametrize("library", ["/opt/lib/libvisa.so", "@sim", "libvisa.so@ivi", ""])
def test_visa_library_is_a_named_backend(tmp_path: Path, library: str) -> None:
    text = BENCH.replace('location = "Lab B"\n',
                         f'location = "Lab B"\nvisa_library = "{library}"\n')
    with pytest.raises(InputError) as err:
        load_bench(write(tmp_path, text))
    assert "bench.toml:4: bench.visa_library" in err.value.message()
    ivi = BENCH.replace('location = "Lab B"\n', 'location = "Lab B"\nvisa_library = "@ivi"\n')
    assert load_bench(write(tmp_path, ivi)).bench.visa_library == "@ivi"


def test_uncertainty_table_is_read_with_its_distributions(tmp_path: Path) -> None:
    text = BENCH + """
[uncertainty]
analyzer_absolute = { value = "0.4 dB", shape = "normal-k2" }
analyzer_linearity = "0.07 dB"
part_match = 0.3
guard_band = true
"""
    bench = load_bench(write(tmp_path, text))
    table = bench.uncertainty
    assert table.analyzer_absolute.value == 0.4
    assert table.analyzer_absolute.shape == "normal-k2"
    assert table.analyzer_linearity == pytest.approx(0.07)
    assert table.part_match == 0.3 and table.bench_match is None
    assert table.guard_band is True
    assert load_bench(write(tmp_path, BENCH, "plain.toml")).uncertainty.guard_band is False


@pytest.mark.parametrize(("line", "key", "words"), [
    ('bench_match = 1.0', "uncertainty.bench_match", "below 1"),
    ('part_match = -0.1', "uncertainty.part_match", "at least 0"),
    ('power_meter = "-0.1 dB"', "uncertainty.power_meter", "negative"),
    ('analyzer_absolute = { value = "0.4 dB", shape = "gaussian" }',
     "uncertainty.analyzer_absolute", "normal-k2"),
])
def test_impossible_uncertainty_specs_are_refused(tmp_path: Path, line: str, key: str,
                                                  words: str) -> None:
    path = write(tmp_path, BENCH + "\n[uncertainty]\n" + line + "\n")
    with pytest.raises(InputError) as info:
        load_bench(path)
    message = str(info.value)
    assert "bench.toml:" in message and key in message and words in message
