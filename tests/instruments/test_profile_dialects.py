"""Dialects as data: a profile extends another, states its connection (terminations, byte
order, serial line), scales values, and waits for completion its own way."""

from __future__ import annotations

from pathlib import Path

import pytest

from sweeprig.clock import VirtualClock
from sweeprig.errors import InputError
from sweeprig.instruments import make_driver
from sweeprig.instruments.profile import load_profile
from sweeprig.transport import FakeTransport

DRIVERS = Path(__file__).resolve().parents[2] / "drivers"

CHILD = """\
[profile]
name = "tw-sa9"
extends = "scpi-analyzer"
description = "Fictional Tarnwick Labs TW-SA9: kHz bandwidths, little-endian traces"
idn_pattern = '^Tarnwick Labs,TW-SA9,'

[connection]
byte_order = "little"
read_termination = "\\r\\n"

[ops.rbw]
command = "BAND {value}"
query = "BAND?"
unit = "kHz"
max = "3 MHz"

[ops.sweep]
command = "INIT"
complete = { method = "event", timeout_s = 20 }
"""


def _write(folder: Path, name: str, text: str) -> Path:
    path = folder / f"{name}.toml"
    path.write_text(text, encoding="utf-8")
    return path


def test_extends_overrides_only_what_differs(tmp_path: Path) -> None:
    profile = load_profile(_write(tmp_path, "tw-sa9", CHILD))
    base = load_profile("scpi-analyzer")
    assert profile.extends == ("scpi-analyzer",)
    assert profile.kind == "analyzer" and not profile.generic  # generic is not inherited
    assert profile.op("rbw").commands == ("BAND {value}",)
    assert profile.op("rbw").max == 3e6 and profile.op("rbw").min == base.op("rbw").min
    centre, base_centre = profile.op("centre"), base.op("centre")
    assert (centre.commands, centre.queries, centre.min, centre.max) == (
        base_centre.commands, base_centre.queries, base_centre.min, base_centre.max)
    assert profile.connection.byte_order == "little"
    assert profile.connection.read_termination == "\r\n"
    assert profile.connection.write_termination == "\n"


def test_inherited_limit_names_the_file_it_comes_from(tmp_path: Path) -> None:
    profile = load_profile(_write(tmp_path, "tw-sa9", CHILD))
    assert profile.op("rbw").min_place is not None
    # the line of [ops.rbw]'s min in the base profile
    lines = (DRIVERS / "scpi-analyzer.toml").read_text(encoding="utf-8").splitlines()
    start = lines.index("[ops.rbw]")
    line = next(k for k in range(start, len(lines)) if lines[k].startswith("min = ")) + 1
    assert profile.op("rbw").min_place.endswith(f"scpi-analyzer.toml:{line}")
    assert profile.op("rbw").max_line == 15 and profile.op("rbw").max_place is None


def test_scaled_value_is_sent_and_read_back_in_khz(tmp_path: Path) -> None:
    profile = load_profile(_write(tmp_path, "tw-sa9", CHILD))
    fake = FakeTransport(lambda cmd: "10" if cmd == "BAND?" else None)
    sa = make_driver(profile, "sa", fake)
    sa.set_value("rbw", 10e3)
    assert fake.sent == ["BAND 10"]
    assert sa.read_back("rbw") == 10e3


def test_event_completion_polls_the_opc_bit(tmp_path: Path) -> None:
    # IEEE 488.2-1992, 10.18 (*OPC sets the OPC bit when pending operations finish) and
    # 11.5.1 (bit 0 of the standard event status register is OPC), from memory
    profile = load_profile(_write(tmp_path, "tw-sa9", CHILD))
    replies = iter(["0", "0", "1"])
    fake = FakeTransport(lambda cmd: next(replies) if cmd == "*ESR?" else None)
    sa = make_driver(profile, "sa", fake, clock=VirtualClock())
    sa.do("sweep")
    assert fake.sent == ["INIT", "*OPC", "*ESR?", "*ESR?", "*ESR?"]


def test_fixed_wait(tmp_path: Path) -> None:
    text = CHILD.replace('complete = { method = "event", timeout_s = 20 }',
                         'complete = { method = "wait", wait_s = 2.5 }')
    clock = VirtualClock()
    fake = FakeTransport(lambda cmd: None)
    sa = make_driver(load_profile(_write(tmp_path, "tw-sa9", text)), "sa", fake, clock=clock)
    start = clock.now()
    sa.do("sweep")
    assert fake.sent == ["INIT"] and clock.now() - start == pytest.approx(2.5)


def test_extends_chain_and_cycle(tmp_path: Path) -> None:
    _write(tmp_path, "tw-sa9", CHILD)
    grandchild = CHILD.replace('name = "tw-sa9"', 'name = "tw-sa9b"').replace(
        'extends = "scpi-analyzer"', 'extends = "tw-sa9"')
    profile = load_profile(_write(tmp_path, "tw-sa9b", grandchild))
    assert profile.extends == ("tw-sa9", "scpi-analyzer")
    # now make tw-sa9 extend tw-sa9b: a cycle, shown with its chain
    _write(tmp_path, "tw-sa9", CHILD.replace('extends = "scpi-analyzer"', 'extends = "tw-sa9b"'))
    with pytest.raises(InputError) as info:
        load_profile(tmp_path / "tw-sa9b.toml")
    text = str(info.value)
    assert "tw-sa9b → tw-sa9 → tw-sa9b" in text and "tw-sa9.toml:3: profile.extends" in text


def test_unknown_parent_suggests_a_name(tmp_path: Path) -> None:
    with pytest.raises(InputError) as info:
        load_profile(_write(tmp_path, "tw-sa9", CHILD.replace("scpi-analyzer", "scpi-analyser")))
    assert "tw-sa9.toml:3: profile.extends" in str(info.value)
    assert "did you mean 'scpi-analyzer'" in str(info.value)


def test_error_in_an_inherited_key_points_at_the_child(tmp_path: Path) -> None:
    with pytest.raises(InputError) as info:
        load_profile(_write(tmp_path, "tw-sa9", CHILD.replace('unit = "kHz"', 'unit = "dBm"')))
    assert "tw-sa9.toml:14: ops.rbw.unit" in str(info.value)


@pytest.mark.parametrize(
    ("replace", "where", "fragment"),
    [
        ('byte_order = "little"', 'byte_order = "middle"', "connection.byte_order"),
        ('read_termination = "\\r\\n"', 'read_termination = ";"', "connection.read_termination"),
        ("[ops.rbw]", "[connection.serial]\nbaud_rate = 0\n[ops.rbw]", "connection.serial"),
        ("[ops.rbw]", "[connection.serial]\nstop_bits = 1.5\n[ops.rbw]", "1.5 goes with 5"),
        ("[ops.rbw]", "[connection.serial]\nparity = \"strange\"\n[ops.rbw]", "parity"),
    ],
)
def test_bad_connection_settings(tmp_path: Path, replace: str, where: str, fragment: str) -> None:
    with pytest.raises(InputError) as info:
        load_profile(_write(tmp_path, "tw-sa9", CHILD.replace(replace, where)))
    assert fragment in str(info.value) and "tw-sa9.toml:" in str(info.value)


def test_serial_settings_load(tmp_path: Path) -> None:
    text = CHILD + ('[connection.serial]\nbaud_rate = 19200\ndata_bits = 7\nparity = "even"\n'
                    'stop_bits = 2\nflow_control = "rts_cts"\n')
    serial = load_profile(_write(tmp_path, "tw-sa9", text)).connection.serial
    assert serial is not None
    assert (serial.baud_rate, serial.data_bits, serial.parity, serial.stop_bits,
            serial.flow_control) == (19200, 7, "even", 2.0, "rts_cts")


def test_scaling_a_safety_level_is_refused(tmp_path: Path) -> None:
    text = load_profile("scpi-source").path.read_text(encoding="utf-8")  # type: ignore[union-attr]
    text = text.replace('name = "scpi-source"', 'name = "lab-src"').replace(
        'max = "20 dBm"', 'max = "20 dBm"\nunit = "dBW"')
    with pytest.raises(InputError) as info:
        load_profile(_write(tmp_path, "lab-src", text))
    assert "ops.power.unit" in str(info.value) and "last-step guard" in str(info.value)


def _doc_block(marker: str) -> str:
    docs = Path(__file__).parents[2] / "docs" / "driver-profiles.md"
    for block in docs.read_text(encoding="utf-8").split("```toml\n")[1:]:
        body = block.split("```", 1)[0]
        if marker in body:
            return body
    raise AssertionError(f"no toml block with {marker!r} in the docs")


def test_documented_examples_load(tmp_path: Path) -> None:
    # the extends example, the [connection] example and each completion method of the docs
    extends = _doc_block('name = "tw-sa9"')
    profile = load_profile(_write(tmp_path, "tw-sa9", extends))
    assert profile.op("rbw").scale == 1e3 and profile.op("sweep").completion.method == "event"
    connection = _doc_block("[connection.serial]")
    with_connection = extends.replace('[connection]\nbyte_order = "little"\n', connection)
    serial = load_profile(_write(tmp_path, "tw-sa9", with_connection)).connection.serial
    assert serial is not None and serial.baud_rate == 19200
    completions = [line for line in _doc_block('command = "INIT:IMM"').splitlines()
                   if line.startswith("complete = ")]
    assert len(completions) == 4
    for line in completions:
        text = extends.replace('complete = { method = "event", timeout_s = 20 }', line)
        assert load_profile(_write(tmp_path, "tw-sa9", text)).op("sweep").completion


def test_profile_text_cannot_extend() -> None:
    from sweeprig.instruments.profile import parse_profile

    with pytest.raises(InputError) as info:
        parse_profile(CHILD, "text.toml")
    assert "text.toml:3: profile.extends" in str(info.value)


def test_earlier_key_names_get_their_new_name(tmp_path: Path) -> None:
    with pytest.raises(InputError) as info:
        load_profile(_write(tmp_path, "tw-sa9", CHILD.replace('command = "BAND', 'set = "BAND')))
    assert "tw-sa9.toml:12: ops.rbw.set" in str(info.value)
    assert "rename it to 'command'" in str(info.value)
