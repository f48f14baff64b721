"""The generic driver base: never re-send, error-queue draining, IDN check, limits first."""

from __future__ import annotations

import pytest

from sweeprig.clock import VirtualClock
from sweeprig.errors import InputError, InstrumentError, SafetyLimitError
from sweeprig.instruments import make_driver
from sweeprig.instruments.profile import parse_profile
from sweeprig.transport import FakeTransport


class Queue:
    """A fake instrument with an error queue and an identity."""

    def __init__(self, idn: str = "Tarnwick Labs,TW-SG6,SG6-7,1.0") -> None:
        self.idn = idn
        self.errors: list[str] = []

    def __call__(self, cmd: str) -> str | None:
        if cmd == "*IDN?":
            return self.idn
        if cmd == "*OPC?":
            return "1"
        if cmd == "SYST:ERR?":
            return self.errors.pop(0) if self.errors else '0,"No error"'
        if cmd.endswith("?"):
            return "0"
        return None


@pytest.fixture
def source():
    queue = Queue()
    transport = FakeTransport(queue)
    src = make_driver("scpi-source", "rf", transport)
    src.single_units = True  # pins each operation's own text (joined: test_compound)
    return src, transport, queue


def test_unchanged_setting_is_not_resent(source):
    src, t, _ = source
    assert src.set_frequency(2.4e9) is True
    assert src.set_frequency(2.4e9) is False
    assert src.set_frequency(2.4e9 + 1e-6) is False  # same command text (12 significant digits)
    assert src.set_frequency(2.5e9) is True
    assert t.sent == ["SOUR:FREQ:CW 2400000000", "SOUR:FREQ:CW 2500000000"]
    assert src.settings_skipped == 2
    assert src.transactions == 2


def test_forget_state_and_reset_resend(source):
    src, t, _ = source
    src.set_power(-10)
    src.forget_state()
    src.set_power(-10)
    src.reset()
    src.set_power(-10)
    assert t.sent.count("SOUR:POW:LEV:IMM:AMPL -10") == 3


def test_state_and_apply_state(source):
    src, t, _ = source
    src.set_frequency(1e9)
    src.set_power(-20)
    src.set_output(True)
    state = src.state()
    assert state == {"frequency": 1e9, "power": -20.0, "output": True}
    src.forget_state()
    t.clear_log()
    src.apply_state(state)
    assert t.sent == ["SOUR:FREQ:CW 1000000000", "SOUR:POW:LEV:IMM:AMPL -20", "OUTP:STAT ON"]


def test_safe_is_always_sent(source):
    src, t, _ = source
    src.set_output(False)
    src.safe()
    src.safe()
    assert t.sent == ["OUTP:STAT OFF"] * 3


def test_check_errors_drains_and_names_the_block(source):
    src, t, queue = source
    src.set_frequency(7e9 / 2)
    src.set_power(-5)
    queue.errors = ['-222,"Data out of range"', '-113,"Undefined header"']
    with pytest.raises(InstrumentError) as err:
        src.check_errors()
    message = str(err.value)
    assert "role 'rf'" in message and "FAKE::INSTR" in message
    assert '-222,"Data out of range"' in message and '-113,"Undefined header"' in message
    assert "SOUR:FREQ:CW 3500000000" in message and "SOUR:POW:LEV:IMM:AMPL -5" in message
    assert t.sent[-3:] == ["SYST:ERR?"] * 3
    # the refused settings are forgotten, so they will be sent again
    assert src.state() == {}
    src.check_errors()  # queue empty now: no error, block cleared


def test_error_queue_that_never_ends(source):
    src, _, queue = source
    queue.errors = ['-350,"Queue overflow"'] * 100
    with pytest.raises(InstrumentError, match="did not empty"):
        src.check_errors()


def test_identify_accepts_and_refuses():
    queue = Queue("Tarnwick Labs,TW-SG6,SG6-7,1.0")
    profile = parse_profile(
        "[profile]\nname='x'\nkind='source'\nidn_pattern='^Tarnwick Labs,TW-SG6,'\n"
        "[ops.frequency]\ncommand='F {value}'\n[ops.power]\ncommand='P {value}'\n"
        "[ops.output]\ncommand='O {value}'\n"
    )
    resource = "TCPIP0::lab-sg6::5025::SOCKET"
    src = make_driver(profile, "lo", FakeTransport(queue, resource=resource))
    assert src.identify() == queue.idn
    assert src.idn == queue.idn
    queue.idn = "Tarnwick Labs,TW-SA13,SA13-1,1.0"
    with pytest.raises(InstrumentError) as err:
        src.identify()
    message = str(err.value)
    for part in ("role 'lo'", resource, "TW-SA13", "^Tarnwick Labs,TW-SG6,", "sweeprig scan"):
        assert part in message


def test_power_limit_refused_before_sending(source):
    src, t, _ = source
    with pytest.raises(SafetyLimitError) as err:
        src.set_power(25.0)
    assert t.sent == []
    message = str(err.value)
    assert "25 dBm" in message and "20 dBm" in message and "caution" in message


def test_tightened_limit_and_instrument_range(source):
    src, t, _ = source
    src.tighten_limit("power", max_value=0.0)
    src.tighten_limit("power", max_value=10.0)  # cannot loosen
    with pytest.raises(SafetyLimitError, match="bench"):
        src.set_power(5.0)
    with pytest.raises(InputError) as err:
        src.set_frequency(7e9)  # frequency: not a safety limit
    assert not isinstance(err.value, SafetyLimitError)
    assert t.sent == []
    assert src.limits("power") == (-130.0, 0.0)


@pytest.mark.parametrize("bad", [float("nan"), float("inf"), "1 GHz", None, True])
def test_bad_values_refused(source, bad):
    src, t, _ = source
    with pytest.raises(InputError):
        src.set_frequency(bad)
    assert t.sent == []


def test_supply_voltage_limit_is_safety():
    dc = make_driver("supply", "dc", FakeTransport(Queue()))
    with pytest.raises(SafetyLimitError):
        dc.set_voltage(31.0)
    dc.tighten_limit("voltage", max_value=5.5)
    with pytest.raises(SafetyLimitError):
        dc.set_voltage(6.0)


def test_profile_of_wrong_kind_refused():
    from sweeprig.instruments import SourceDriver
    from sweeprig.instruments.profile import load_profile

    with pytest.raises(InputError):
        SourceDriver("rf", FakeTransport(Queue()), load_profile("scpi-analyzer"))


def test_poll_completion_with_virtual_clock():
    profile = parse_profile(
        "[profile]\nname='x'\nkind='simctl'\nidn_pattern='.'\n"
        "[ops.time]\nquery='T?'\n"
        "[ops.advance]\ncommand='ADV {value}'\n"
        "complete={method='poll', query='STAT:OPER:COND?', until_bits_clear=8, interval_s=0.5,"
        " timeout_s=10}\n"
    )
    replies = iter(["8", "8", "0"])
    clock = VirtualClock()
    t = FakeTransport(lambda cmd: next(replies) if cmd.startswith("STAT") else None)
    sim = make_driver(profile, "simctl", t, clock=clock)
    sim.advance(5)
    assert t.sent == ["ADV 5"] + ["STAT:OPER:COND?"] * 3
    assert clock.now() == 1.0

    t2 = FakeTransport(lambda cmd: "8" if cmd.startswith("STAT") else None)
    slow = make_driver(profile, "simctl", t2, clock=VirtualClock())
    with pytest.raises(InstrumentError, match="did not complete"):
        slow.advance(5)


def test_opc_must_answer_one():
    # the profile joins the sweep's command with its *OPC? (one message)
    t = FakeTransport(lambda cmd: "0" if cmd.endswith("*OPC?") else None)
    sa = make_driver("analyzer", "sa", t)
    with pytest.raises(InstrumentError, match="instead of 1"):
        sa.sweep()
    assert t.timeouts_s[-1] == 300  # the profile's completion timeout


def test_long_block_is_shortened_in_the_message(source):
    src, _, queue = source
    for step in range(40):
        src.set_frequency(1e9 + step * 1e6)
    queue.errors = ['-222,"Data out of range"']
    with pytest.raises(InstrumentError) as err:
        src.check_errors()
    message = str(err.value)
    assert "(28 earlier) ..." in message and "SOUR:FREQ:CW 1039000000" in message
