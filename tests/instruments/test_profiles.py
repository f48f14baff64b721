"""Driver profiles: the shipped ones load, render the SCPI of docs/instruments.md, and
broken files are refused with file:line: key."""

from __future__ import annotations

from pathlib import Path

import pytest

from sweeprig.errors import InputError
from sweeprig.instruments import make_driver
from sweeprig.instruments.ops import KIND_OPS, KINDS
from sweeprig.instruments.profile import (
    DEFAULT_PROFILE_FOR_KIND,
    available_profiles,
    key_line,
    load_profile,
    matching_profiles,
)
from sweeprig.transport import FakeTransport

SHIPPED = sorted(DEFAULT_PROFILE_FOR_KIND.values())


def test_every_shipped_profile_loads():
    names = available_profiles()
    for name in SHIPPED:
        assert name in names
        profile = load_profile(name)
        assert profile.name == name
        assert profile.path is not None and profile.path.stem == name
    assert {load_profile(n).kind for n in SHIPPED} == set(KINDS)


def test_every_required_operation_is_there():
    for kind, name in DEFAULT_PROFILE_FOR_KIND.items():
        profile = load_profile(name)
        for op, spec in KIND_OPS[kind].items():
            if spec.required:
                assert profile.has(op), (name, op)
        for common in ("identify", "reset", "clear", "next_error", "event_status"):
            assert profile.has(common)


def _driver(kind: str, replies: dict[str, str] | None = None):
    replies = {"*OPC?": "1", **(replies or {})}
    transport = FakeTransport(lambda cmd: replies.get(cmd, "0" if cmd.endswith("?") else None))
    driver = make_driver(kind, kind[:2], transport)
    driver.single_units = True  # pins each operation's own text (joined: test_compound)
    return driver, transport


# Each expected command below is a short form of a header in docs/instruments.md.
def test_source_scpi():
    src, t = _driver("source")
    src.set_frequency(2.4e9)
    src.set_power(-10.0)
    src.set_output(True)
    assert t.sent == ["SOUR:FREQ:CW 2400000000", "SOUR:POW:LEV:IMM:AMPL -10", "OUTP:STAT ON"]


def test_analyzer_scpi():
    sa, t = _driver("analyzer", {"CALC:MARK1:Y?": "-20.5", "CALC:MARK1:X?": "7.0E+07",
                                 "STAT:QUES:COND?": "8"})
    sa.configure(centre_hz=70e6, span_hz=1e6, rbw_hz=10e3, vbw_hz=10e3, ref_level_dbm=0,
                 attenuation_db=10, averages=4, points=1001)
    assert t.sent == [
        "DISP:WIND:TRAC:Y:SCAL:RLEV 0",
        "INP:ATT:AUTO OFF",
        "INP:ATT 10",
        "SENS:FREQ:CENT 70000000",
        "SENS:FREQ:SPAN 1000000",
        "SENS:BAND:RES:AUTO OFF",
        "SENS:BAND:RES 10000",
        "SENS:BAND:VID 10000",
        "SENS:SWE:POIN 1001",
        "SENS:AVER:COUN 4",
        "SENS:AVER:STAT ON",
    ]
    t.clear_log()
    sa.single_sweep_mode()
    sa.sweep()
    assert sa.marker_level_dbm(70e6) == -20.5
    assert sa.peak() == (70e6, -20.5)
    assert sa.sweep_flags()[0] is True
    assert t.sent == [
        "INIT:CONT OFF", "INIT:IMM", "*OPC?", "CALC:MARK1:X 70000000", "CALC:MARK1:Y?",
        "CALC:MARK1:MAX", "CALC:MARK1:X?", "CALC:MARK1:Y?", "STAT:QUES:COND?",
    ]


def test_analyzer_trace_formats():
    sa, t = _driver("analyzer", {"TRAC:DATA? TRACE1": "-1.5,-2.5"})
    assert list(sa.trace(binary=False)) == [-1.5, -2.5]
    assert t.sent == ["FORM:DATA ASC", "TRAC:DATA? TRACE1"]


def test_other_kinds_scpi():
    pm, t = _driver("powermeter", {"MEAS:POW?": "-12.25"})
    pm.prepare()
    pm.set_frequency(1e9)
    assert pm.read_power_dbm() == -12.25
    assert t.sent == ["UNIT:POW DBM", "SENS:FREQ 1000000000", "MEAS:POW?"]

    dc, t = _driver("supply", {"MEAS:CURR:DC?": "0.0425"})
    dc.set_current_limit(0.2)
    dc.set_voltage(5.0)
    dc.set_output(True)
    assert dc.measure_current_a() == 0.0425
    assert t.sent == ["SOUR:CURR:LEV:IMM:AMPL 0.2", "SOUR:VOLT:LEV:IMM:AMPL 5", "OUTP:STAT ON",
                      "MEAS:CURR:DC?"]

    ch, t = _driver("chamber", {"THER:PROB?": "24.5", "THER:AIR?": "30"})
    ch.set_setpoint_c(85)
    ch.set_control(True)
    assert ch.probe_temperature_c() == 24.5
    assert ch.air_temperature_c() == 30.0
    assert t.sent == ["THER:SETP 85", "THER:CONT ON", "THER:PROB?", "THER:AIR?"]

    sw, t = _driver("switch", {"ROUT:CLOS? (@2)": "1"})
    sw.select(2)
    assert sw.is_closed(2) is True
    assert t.sent == ["ROUT:CLOS (@2)", "ROUT:CLOS? (@2)"]

    sim, t = _driver("simctl", {"SIM:TIME?": "12.5", "SIM:MODE?": "VIRT"})
    assert sim.time_s() == 12.5
    sim.advance(60)
    assert sim.mode() == "VIRT"
    assert t.sent == ["SIM:TIME?", "SIM:TIME:ADV 60", "SIM:MODE?"]


def test_common_operations():
    src, t = _driver("source", {"*ESR?": "32"})
    src.reset()
    src.clear()
    assert src.event_status() == 32
    assert t.sent == ["*RST", "*OPC?", "*CLS", "*ESR?"]


def test_scan_suggestions():
    profiles = [load_profile(n) for n in SHIPPED]

    def names(idn: str) -> list[str]:
        return [p.name for p in matching_profiles(idn, profiles)]

    assert names("Tarnwick Labs,TW-SG6,SG6-1,1.0") == ["scpi-source"]
    assert names("Tarnwick Labs,TW-SA13,SA13-1,1.0") == ["scpi-analyzer"]
    assert names("Tarnwick Labs,TW-PM18,PM18-1,1.0") == ["scpi-powermeter"]
    assert names("Tarnwick Labs,TW-PS30,PS30-1,1.0") == ["scpi-supply"]
    assert names("Kelderhall Thermal,KT-C70,C70-1,1.0") == ["thermal-chamber"]
    assert names("Tarnwick Labs,TW-RS2,RS2-1,1.0") == ["scpi-switch"]
    assert names("Tarnwick Labs,TW-SIMCTL,SIMCTL-1,1.0") == ["sim-control"]


# -- broken profiles -------------------------------------------------------------------------

GOOD = """\
[profile]
name = "lab-source"
kind = "source"
idn_pattern = '^Tarnwick Labs,TW-SG6,'

[ops.frequency]
command = "FREQ {value}"

[ops.power]
command = "POW {value}"
max = "10 dBm"

[ops.output]
command = "OUTP {value}"
"""


def _error(text: str, tmp_path: Path) -> str:
    path = tmp_path / "lab-source.toml"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(InputError) as err:
        load_profile(path)
    return str(err.value)


def test_good_user_profile_by_path_and_folder(tmp_path):
    path = tmp_path / "lab-source.toml"
    path.write_text(GOOD, encoding="utf-8")
    assert load_profile(path).op("power").max == 10.0
    assert load_profile("lab-source", search_dirs=[tmp_path]).name == "lab-source"
    assert "lab-source" in available_profiles([tmp_path])


@pytest.mark.parametrize(
    ("change", "expected"),
    [
        (("max = \"10 dBm\"", "maxx = 10"), "lab-source.toml:11: ops.power.maxx"),
        (("max = \"10 dBm\"", "max = \"10 GHz\""), "lab-source.toml:11: ops.power.max"),
        (("command = \"POW {value}\"", "command = \"POW {val}\""),
         "lab-source.toml:10: ops.power.command"),
        (("command = \"OUTP {value}\"", "command = \"OUTP\""),
         "lab-source.toml:14: ops.output.command"),
        (("[ops.output]\ncommand = \"OUTP {value}\"\n", ""), "lab-source.toml:6: ops"),
        (("kind = \"source\"", "kind = \"laser\""), "lab-source.toml:3: profile.kind"),
        (("idn_pattern = '^Tarnwick Labs,TW-SG6,'", "idn_pattern = '(('"),
         "lab-source.toml:4: profile.idn_pattern"),
        (("[ops.output]", "[ops.sweep]\ncommand = \"X\"\n[ops.output]"),
         "lab-source.toml:13: ops.sweep"),
        (("name = \"lab-source\"", "name = \"other\""), "lab-source.toml:2: profile.name"),
        (("command = \"FREQ {value}\"", "command = \"FREQ {value}"), "lab-source.toml:7"),
        (("kind = \"source\"\n", ""), "lab-source.toml:1: profile.kind"),
    ],
)
def test_broken_profile_names_file_line_key(tmp_path, change, expected):
    old, new = change
    assert old in GOOD
    message = _error(GOOD.replace(old, new, 1), tmp_path)
    assert expected in message
    assert "fix:" in message


def test_unknown_profile_name_lists_known():
    with pytest.raises(InputError) as err:
        load_profile("no-such-profile")
    assert "scpi-source" in str(err.value)


def test_key_line():
    text = "[profile]\nname = 'x'\n\n[ops.power]\ncommand = 'P'\nmax = 3\n"
    assert key_line(text, ("ops", "power", "max")) == 6
    assert key_line(text, ("ops", "power")) == 4
    assert key_line(text, ("ops", "power", "missing")) == 4
    assert key_line(text, ("profile", "name")) == 2


def test_worked_example_in_the_docs_loads(tmp_path):
    docs = Path(__file__).resolve().parents[2] / "docs" / "driver-profiles.md"
    text = docs.read_text(encoding="utf-8")
    start = text.index("```toml\n   [profile]\n   name = \"tw-sg2\"")
    block = text[start + len("```toml\n") : text.index("```", start + 8)]
    toml = "\n".join(line[3:] if line.startswith("   ") else line for line in block.splitlines())
    path = tmp_path / "tw-sg2.toml"
    path.write_text(toml, encoding="utf-8")
    profile = load_profile(path)
    assert profile.op("frequency").commands == ("CW {value} HZ",)
    replies = iter(["1", "0"])
    t = FakeTransport(lambda cmd: next(replies) if cmd == "BUSY?" else
                      ("TARNWICK LABS,TW-SG2,77,2.1" if cmd == "*IDN?" else None))
    src = make_driver(profile, "lo", t)
    src.identify()
    src.reset()
    src.set_frequency(1e9)
    src.set_output(True)
    assert t.sent == ["*IDN?", "*RST", "BUSY?", "BUSY?", "CW 1000000000 HZ", "RF 1"]


# -- every string that reaches the wire ------------------------------------------------------

WIRED = GOOD + """query = "OUTP?"
map = { on = "ON", off = "OFF" }

[ops.reset]
command = "*RST"
complete = { method = "poll", query = "BUSY?", until = "0" }
"""


@pytest.mark.parametrize(
    ("change", "expected", "what"),
    [
        # the case: a value map that adds a command past the limits
        ('on = "ON"', "lab-source.toml:16: ops.output.map.on", "';'"),
        ('off = "OFF"', "lab-source.toml:16: ops.output.map.off", "line break"),
        ('on = "ON"', "lab-source.toml:16: ops.output.map.on", "control character"),
        ('on = "ON"', "lab-source.toml:16: ops.output.map.on", "unclosed"),
        ('on = "ON"', "lab-source.toml:16: ops.output.map.on", "empty"),
        ('query = "OUTP?"', "lab-source.toml:15: ops.output.query", "';'"),
        ('query = "BUSY?"', "lab-source.toml:20: ops.reset.complete.query", "line break"),
        ('command = "POW {value}"', "lab-source.toml:10: ops.power.command", "';'"),
        ('command = "*RST"', "lab-source.toml:19: ops.reset.command", "control character"),
    ],
)
def test_strings_that_reach_the_wire_cannot_end_or_add_a_command(tmp_path, change, expected,
                                                                   what):
    bad = {
        "';'": {'on = "ON"': 'on = "ON;:SOUR:POW 19"', 'query = "OUTP?"': 'query = "OUTP?;:POW 19"',
                'command = "POW {value}"': 'command = "POW {value};:OUTP ON"'},
        "line break": {'off = "OFF"': 'off = "OFF\\n:SOUR:POW 19"',
                       'query = "BUSY?"': 'query = "BUSY?\\r\\nPOW 19"'},
        "control character": {'on = "ON"': 'on = "ON\\u001b[2J"',
                              'command = "*RST"': 'command = "*RST\\u0000"'},
        "unclosed": {'on = "ON"': "on = \"'ON\""},
        "empty": {'on = "ON"': 'on = " "'},
    }[what]
    old, new = change, bad[change]
    assert old in WIRED
    message = _error(WIRED.replace(old, new, 1), tmp_path)
    assert expected in message, message
    assert what in message and "fix:" in message


def test_a_quoted_semicolon_is_data(tmp_path):
    path = tmp_path / "lab-source.toml"
    path.write_text(WIRED.replace('command = "*RST"', "command = [\"*RST\", \"DISP:TEXT 'a;b'\"]"),
                    encoding="utf-8")
    assert load_profile(path).op("reset").commands == ("*RST", "DISP:TEXT 'a;b'")
