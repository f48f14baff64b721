"""The last-step guard: a command that sets a level beyond the limits never reaches the wire,
whatever produced it (issue: a value map sent ``;:SOUR:POW 19`` past a 15 dBm limit)."""

from __future__ import annotations

from pathlib import Path

import pytest

from sweeprig.errors import InputError, SafetyLimitError
from sweeprig.instruments import load_profile, make_driver
from sweeprig.instruments.driver import Driver
from sweeprig.instruments.guard import GuardedTransport, level_rules
from sweeprig.instruments.profile import Operation, Profile, parse_profile
from sweeprig.transport.fake import FakeTransport

SOURCE_TOML = """\
[profile]
name = "tw-sg6"
kind = "source"
description = "a fictional Tarnwick Labs source"
idn_pattern = '^Tarnwick Labs,TW-SG6,'

[ops.frequency]
command = "SOUR:FREQ:CW {value}"
[ops.power]
command = "SOUR:POW:LEV:IMM:AMPL {value}"
min = "-130 dBm"
max = "20 dBm"
[ops.output]
command = "OUTP:STAT {value}"
map = { on = "ON", off = "OFF" }
"""


def _fake() -> FakeTransport:
    return FakeTransport(lambda cmd: "1" if cmd.endswith("?") else None)


def _driver(profile: str | Profile, role: str, op: str, high: float) -> tuple[Driver,
                                                                             FakeTransport]:
    fake = _fake()
    driver = make_driver(load_profile(profile) if isinstance(profile, str) else profile, role,
                         fake)
    driver.tighten_limit(op, max_value=high)
    return driver, fake


def _smuggled(profile: Profile) -> Profile:
    """``profile`` with the issue's value map, put in past the loader (which refuses it)."""
    output = profile.ops["output"]
    bad = Operation(**{**output.__dict__, "map": {"on": "ON;:SOUR:POW 19", "off": "OFF"}})
    return Profile(**{**profile.__dict__, "ops": {**profile.ops, "output": bad}})


def test_the_issue_case_is_refused_when_the_profile_loads(tmp_path: Path) -> None:
    path = tmp_path / "tw-sg6.toml"
    path.write_text(SOURCE_TOML.replace('on = "ON"', 'on = "ON;:SOUR:POW 19"'),
                    encoding="utf-8")
    with pytest.raises(InputError) as caught:
        load_profile(path)
    message = caught.value.message()
    assert "tw-sg6.toml:15: ops.output.map.on" in message
    assert "';'" in message and "fix:" in message


def test_the_issue_case_is_refused_by_the_guard_if_it_reaches_the_driver() -> None:
    profile = _smuggled(parse_profile(SOURCE_TOML))
    driver, fake = _driver(profile, "rf", "power", 15.0)
    driver.set_power(-20.0)
    with pytest.raises(SafetyLimitError) as caught:
        driver.set_output(True)
    error = caught.value
    assert error.exit_code == 3
    assert "role 'rf'" in error.message() and ":SOUR:POW 19" in error.message()
    assert "15 dBm" in error.message() and "nothing was sent" in error.message()
    assert fake.sent == ["SOUR:POW:LEV:IMM:AMPL -20"]  # the refused message is not on the wire
    assert "output" not in driver.state()


@pytest.mark.parametrize("message", [
    ":SOUR:POW 19", "SOUR1:POW:LEV:IMM:AMPL 19", "sour:pow:lev 19", "POWer 19", "POW 19 DBM",
    "POW 40 MW", "POW -11 DBW", "OUTP ON;:SOUR:POW 19", "SOUR:FREQ 1E9;POW 19",
    "OUTP ON\nPOW 19", "LEV 19", "AMPL 19", "SOUR2:POW 19", "POW 15.01",
    "DISP:TEXT 'x;POW 19'",  # an instrument that reads quotes otherwise would see POW 19
    "POW MAX", "POW DEF", "POW UP", "POW 19 DBUV", "POW #H13", "POW 1e400",
    "POW:OFFS -10", "POW:REF 10", "SOUR:POW:LEV:IMM:AMPL:STEP 5", "UNIT:POW W",
    "POW:STAR -10;STOP 25", "POW:MODE SWE", "LIST:POW 10,19", "LIST:POW 19", "*RCL 3",
    "*DMC 'UP',#0POW 19", "*DDT #0POW 19",
])
def test_level_commands_beyond_or_unreadable_are_refused(message: str) -> None:
    driver, fake = _driver("scpi-source", "rf", "power", 15.0)
    with pytest.raises(SafetyLimitError):
        driver.write(message)
    assert fake.sent == []


@pytest.mark.parametrize("message", [
    "SOUR:POW:LEV:IMM:AMPL 15", ":SOUR:POW -20", "POW 10 MW", "OUTP ON", "SOUR:FREQ:CW 2E9",
    "POW:ALC ON", "UNIT:POW DBM", "POW? MAX", "*RST", "DISP:TEXT 'POW 19'", "POW:MODE FIX",
    "LIST:POW 10", "*RCL?",
])
def test_commands_within_the_limits_pass(message: str) -> None:
    driver, fake = _driver("scpi-source", "rf", "power", 15.0)
    driver.write(message)
    assert fake.sent == [message]


@pytest.mark.parametrize(("message", "ok"), [
    ("SOUR:VOLT:LEV:IMM:AMPL 3.3", True), ("VOLT 3300 MV", True), ("VOLT 5", False),
    ("VOLT 3.31", False), ("APPL 3,0.1", False),  # another dialect's level command
    ("CURR 0.1", True), ("CURR 0.2", False), ("CURR 100 MA", False),  # MA: milli or mega
    ("MEAS:VOLT?", True), ("OUTP ON", True),
])
def test_supply_voltage_and_current(message: str, ok: bool) -> None:
    driver, fake = _driver("scpi-supply", "dc", "voltage", 3.3)
    driver.tighten_limit("current_limit", max_value=0.15)
    if ok:
        driver.write(message)
        assert fake.sent == [message]
    else:
        with pytest.raises(SafetyLimitError):
            driver.write(message)
        assert fake.sent == []


@pytest.mark.parametrize(("message", "ok"), [
    ("THER:SETP 25", True), ("THER:SETP 100", False), ("SETP 100", False),
    ("THER:RAMP 5;SETP 120", False), ("TEMP 150", False), ("THER:SETP 400 K", False),
    ("THER:SETP 300 K", True), ("THER:SETP -50", False), ("THER:SETP MIN", False),
])
def test_chamber_setpoint(message: str, ok: bool) -> None:
    driver, fake = _driver("thermal-chamber", "chamber", "setpoint", 85.0)
    driver.tighten_limit("setpoint", min_value=-40.0)
    if ok:
        driver.write(message)
    else:
        with pytest.raises(SafetyLimitError):
            driver.write(message)
    assert fake.sent == ([message] if ok else [])


def test_a_dialect_with_other_spelling_is_guarded_by_its_own_template(tmp_path: Path) -> None:
    text = SOURCE_TOML.replace("SOUR:POW:LEV:IMM:AMPL {value}", "LEVEL {value} DBM")
    driver, fake = _driver(parse_profile(text), "lo", "power", 10.0)
    assert [r.header for r in level_rules(driver.profile)] == [("LEV",)]
    driver.set_power(10.0)
    assert fake.sent == ["LEVEL 10 DBM"]
    for message in ("LEVEL 11 DBM", "LEV 11 DBM", "SOUR:LEV 11 DBM", "POW 0"):
        with pytest.raises(SafetyLimitError):
            driver.write(message)
    driver.write("CW 1E9")  # not a level command of this dialect
    assert fake.sent == ["LEVEL 10 DBM", "CW 1E9"]


def test_the_guard_reads_the_limits_in_force_and_names_them() -> None:
    driver, _fake_transport = _driver("scpi-source", "rf", "power", 15.0)
    with pytest.raises(SafetyLimitError) as caught:
        driver.write("POW 16")
    assert "bench" in caught.value.message()
    fresh = make_driver("scpi-source", "rf", _fake())
    with pytest.raises(SafetyLimitError) as caught:
        fresh.write("POW 21")
    assert "scpi-source" in caught.value.message()  # the profile's own 20 dBm
    fresh.write("POW 20")


def test_queries_and_binary_queries_are_guarded_too() -> None:
    driver, fake = _driver("scpi-source", "rf", "power", 15.0)
    with pytest.raises(SafetyLimitError):
        driver.query("POW 19;*OPC?")
    with pytest.raises(SafetyLimitError):
        driver.transport.query_binary_floats("POW 19;TRAC?")
    assert fake.sent == []


def test_posted_queries_are_guarded_and_bare_queries_pass_unparsed() -> None:
    driver, fake = _driver("scpi-source", "rf", "power", 15.0)
    with pytest.raises(SafetyLimitError):
        driver.post_query("POW 19;*OPC?")
    with pytest.raises(SafetyLimitError):
        driver.query("*ESR?;POW 19")  # one unit that sets: the whole message is parsed
    with pytest.raises(SafetyLimitError):
        driver.query("POW 19?")  # a parameter: not a bare query
    assert fake.sent == []
    assert driver.collect(driver.post_query(":STAT:QUES:COND?;*ESR?")) == "1"
    assert driver.transport.guard.checked == 0  # nothing that sets a level went out


def test_unguarded_kinds_keep_their_transport_and_guards_do_not_stack() -> None:
    fake = _fake()
    analyzer = make_driver("scpi-analyzer", "sa", fake)
    assert analyzer.transport is fake
    source = make_driver("scpi-source", "rf", fake)
    assert isinstance(source.transport, GuardedTransport)
    again = make_driver("scpi-source", "rf2", source.transport)
    assert isinstance(again.transport, GuardedTransport) and again.transport.inner is fake
    assert again.transport.resource == fake.resource
    source.transport.on_transaction = None
    assert source.transport.log is fake.log  # anything else is the wrapped transport's
