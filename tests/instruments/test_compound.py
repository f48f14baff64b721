"""Compound messages (IEEE 488.2 program messages of several units joined by ``;``): a
profile says whether its instrument takes them (``compound_messages``, false unless stated,
never inherited), the driver then holds settings and joins them with the next message, and
reads the error queue only when the event status register's error bits say it holds
something. Narrow tests on a function-backed transport that answers each unit as a 488.2
device would (joined queries answered in one reply, joined by ``;``)."""

from __future__ import annotations

from pathlib import Path

import pytest

from sweeprig.errors import InstrumentError
from sweeprig.instruments import make_driver
from sweeprig.instruments.profile import load_profile
from sweeprig.transport.fake import FakeTransport


class Device:
    """Answers each unit of a message: *OPC? 1, *ESR? the register (then cleared), SYST:ERR?
    the queue, CALC:MARK1:Y? a level, STAT:QUES:COND? ``ques`` (0); commands are kept."""

    def __init__(self) -> None:
        self.esr = 0
        self.ques = 0
        self.errors: list[str] = []
        self.units: list[str] = []

    def __call__(self, message: str) -> str | None:
        replies = []
        for unit in message.split(";"):
            self.units.append(unit)
            if unit == "*OPC?":
                replies.append("1")
            elif unit == "*ESR?":
                replies.append(str(self.esr))
                self.esr = 0
            elif unit == "SYST:ERR?":
                replies.append(self.errors.pop(0) if self.errors else '0,"No error"')
            elif unit.endswith("CALC:MARK1:Y?"):
                replies.append("-20.5")
            elif unit.endswith("STAT:QUES:COND?"):
                replies.append(str(self.ques))
            elif unit.endswith("?"):
                replies.append("0")
        return ";".join(replies) if replies else None


def _source() -> tuple[object, FakeTransport, Device]:
    device = Device()
    link = FakeTransport(device)
    return make_driver("scpi-source", "rf", link), link, device


def test_settings_are_joined_with_the_completion_query_in_one_message():
    src, link, _ = _source()
    with src.joined():
        src.set_power(-10.0)
        src.set_frequency(2.4e9)
        assert link.sent == []  # held
        src.sync()
    # each header absolute: after a ';' a header is read relative to the previous one's path
    assert link.sent == [":SOUR:POW:LEV:IMM:AMPL -10;:SOUR:FREQ:CW 2400000000;*OPC?"]
    assert src.transactions == 1
    assert src.set_frequency(2.4e9) is False  # unchanged: skipped
    assert src.state() == {"power": -10.0, "frequency": 2.4e9}


def test_the_error_queue_is_read_only_when_the_status_says_it_holds_something():
    src, link, device = _source()
    with src.joined():
        src.set_frequency(1e9)
        src.check_errors()
    assert link.sent == [":SOUR:FREQ:CW 1000000000;*ESR?"]  # no error bit: no queue read
    src.check_errors()
    assert len(link.sent) == 1  # nothing sent since the status was read: nothing to ask
    device.esr = 16  # execution error (IEEE 488.2 ESR bit 4)
    device.errors = ['-222,"Data out of range"']
    with pytest.raises(InstrumentError, match=r"-222.*SOUR:FREQ:CW 5900000000"), \
            src.joined():
        src.set_frequency(5.9e9)
        src.check_errors()
    assert link.sent[1:] == [":SOUR:FREQ:CW 5900000000;*ESR?", "SYST:ERR?", "SYST:ERR?"]
    assert "frequency" not in src.state()  # the refused setting is sent again next time


def test_point_status_reads_once_per_point_and_keeps_the_power_on_bit():
    src, link, device = _source()
    device.esr = 128  # power on
    assert src.point_status() == 128
    assert src.point_status() == 0 and len(link.sent) == 1  # read already, nothing sent since
    src.expire_status()  # a new point: read again
    assert src.point_status() == 0 and len(link.sent) == 2


def test_the_safe_state_goes_out_at_once_and_nothing_is_held_past_a_block():
    src, link, _ = _source()
    with src.joined():
        src.set_frequency(1e9)
        src.safe()
        assert link.sent == [":SOUR:FREQ:CW 1000000000;:OUTP:STAT OFF"]
        src.set_power(-30.0)
    assert link.sent[-1] == "SOUR:POW:LEV:IMM:AMPL -30"  # sent as the block ended
    src.set_frequency(2e9)  # outside a block: at once
    assert link.sent[-1] == "SOUR:FREQ:CW 2000000000"


def test_a_block_cut_short_drops_what_it_held_and_forgets_the_settings():
    src, link, _ = _source()
    with pytest.raises(RuntimeError), src.joined():
        src.set_power(5.0)
        raise RuntimeError("cut short")
    assert link.sent == [] and src.state() == {}
    assert src.set_power(5.0) is True  # sent again


def test_sweep_markers_overload_and_status_in_one_message():
    device = Device()
    link = FakeTransport(device)
    sa = make_driver("scpi-analyzer", "sa", link)
    level, noise, overload = sa.sweep_and_read(0.01, 70e6, (71e6,))
    assert link.sent == [":INIT:IMM;*WAI;:CALC:MARK1:X 70000000;:CALC:MARK1:Y?;"
                         ":CALC:MARK1:X 71000000;:CALC:MARK1:Y?;:STAT:QUES:COND?;*ESR?"]
    assert (level, noise, overload) == (-20.5, (-20.5,), False)
    assert sa.point_status() == 0 and len(link.sent) == 1


def test_a_reply_with_the_wrong_number_of_answers_is_refused():
    link = FakeTransport(lambda message: "-20.5")  # answers only one query of the message
    sa = make_driver("scpi-analyzer", "sa", link)
    with pytest.raises(InstrumentError, match="compound_messages = false"):
        sa.marker_reading(70e6)


def test_compound_messages_are_off_unless_a_profile_says_so_and_never_inherited(tmp_path: Path):
    assert load_profile("scpi-source").compound_messages
    path = tmp_path / "lab-source.toml"
    path.write_text('[profile]\nname = "lab-source"\nextends = "scpi-source"\n'
                    "idn_pattern = '^Lab,'\n", encoding="utf-8")
    profile = load_profile(path)
    assert not profile.compound_messages
    device = Device()
    link = FakeTransport(device)
    src = make_driver(profile, "rf", link)
    src.set_frequency(1e9)
    src.sync()
    assert link.sent == ["SOUR:FREQ:CW 1000000000", 'SYST:ERR?']


def test_a_posted_completion_query_is_read_later_and_a_refusal_raises():
    src, link, device = _source()
    with src.joined():
        src.set_frequency(2.4e9)
        pending = src.post_sync()
    assert pending is not None and pending.message == ":SOUR:FREQ:CW 2400000000;*OPC?"
    src.finish_sync(pending)
    assert link.sent == [":SOUR:FREQ:CW 2400000000;*OPC?"]
    refusing = FakeTransport(lambda message: "0")
    bad = make_driver("scpi-source", "rf", refusing)
    with pytest.raises(InstrumentError, match="instead of 1"):
        bad.finish_sync(bad.post_sync())
    assert device.units[-1] == "*OPC?"


def test_a_posted_status_read_is_the_points_status_and_nothing_more_is_sent():
    src, link, device = _source()
    device.esr = 128
    src.finish_status(src.post_status())
    assert src.post_status() is None  # read already, nothing sent since
    # (a source's status read asks its level state too: its unleveled flag, status_seen)
    assert src.point_status() == 128 and link.sent == ["*ESR?;:STAT:QUES:COND?;:OUTP:PROT:TRIP?"]
    src.expire_status()
    device.esr = 16
    device.errors = ['-222,"Data out of range"']
    src.finish_status(src.post_status())
    with pytest.raises(InstrumentError, match="-222"):
        src.point_status()


def test_a_posted_status_read_serves_a_profile_without_compound_messages_too():
    device = Device()
    link = FakeTransport(device)
    chamber = make_driver("thermal-chamber", "chamber", link)
    assert not chamber.compound
    device.esr = 128
    chamber.finish_status(chamber.post_status())
    assert chamber.point_status() == 128 and link.sent == ["*ESR?"]
    chamber.expire_status()
    assert chamber.point_status() == 0 and link.sent == ["*ESR?", "*ESR?"]


def test_a_plain_query_can_be_posted_behind_the_status_and_both_replies_are_taken():
    device = Device()
    link = FakeTransport(lambda m: "24.5" if m == "THER:PROB?" else device(m))
    chamber = make_driver("thermal-chamber", "chamber", link)
    device.esr = 128
    status = chamber.post_status()
    probe = chamber.post_ask("probe")
    assert probe is not None and chamber.post_ask("setpoint") is None  # takes a value
    chamber.finish_status(status)
    assert chamber.finish_ask("probe", probe) == pytest.approx(24.5)
    assert chamber.point_status() == 128  # taken from the posted read: nothing more sent
    assert link.sent == ["*ESR?", "THER:PROB?"]


def test_an_error_shown_by_a_leading_status_read_is_laid_on_the_commands_before_it():
    """A point's error found by the ``*ESR?`` that leads the next point's settings: the
    message names the commands sent before that read as the cause, and the settings sent
    after it apart (they ran after the read; an error of theirs would be listed too)."""
    src, _, device = _source()
    with src.joined():
        src.set_frequency(5.9e9)
        src.finish_sync(src.post_sync())
    device.esr = 16  # the point's setting failed (IEEE 488.2 ESR bit 4: execution error)
    device.errors = ['-222,"Data out of range"']
    with src.joined():
        src.set_frequency(2.4e9)  # the next point's
        src.set_power(-12.0)
        pending = src.post_sync(status_first=True)
    assert pending is not None
    assert pending.message == ("*ESR?;:STAT:QUES:COND?;:OUTP:PROT:TRIP?;"
                               ":SOUR:FREQ:CW 2400000000;"
                               ":SOUR:POW:LEV:IMM:AMPL -12;*OPC?")
    src.finish_sync(pending)
    with pytest.raises(InstrumentError) as raised:
        src.taken_status()
    text = str(raised.value)
    cause, _, later = text.partition("SOUR:FREQ:CW 2400000000")
    assert "-222" in cause and "SOUR:FREQ:CW 5900000000" in cause
    assert "before these later commands ran" in cause
    assert "AMPL -12" in later and "5900000000" not in later
    assert "frequency" not in src.state() and "power" not in src.state()  # sent again
    # the next error check names only what came after it
    device.esr = 16
    device.errors = ['-221,"Settings conflict"']
    with pytest.raises(InstrumentError) as raised, src.joined():
        src.set_power(-11.0)
        src.check_errors()
    assert "before these later commands" not in str(raised.value)
    assert "5900000000" not in str(raised.value)


def test_a_sources_level_state_rides_with_the_status_read_that_leads_its_settings():
    """The held point's status read that leads the next settings asks the source's level
    state and its reference's lock too (SCPI-99 questionable POWer, bit 3, and FREQuency,
    bit 5: one register, asked once), before the settings run: it tells of the point before
    them. The flags land in status_seen; a read that does not lead (a plain sync) leaves no
    older answer behind."""
    src, link, device = _source()
    device.ques = 8 | 32
    with src.joined():
        src.set_frequency(2.4e9)
        src.finish_sync(src.post_sync(status_first=True))
    assert link.sent == ["*ESR?;:STAT:QUES:COND?;:OUTP:PROT:TRIP?;:SOUR:FREQ:CW 2400000000;"
                         "*OPC?"]
    assert src.status_seen == {"unleveled": True, "reference_unlocked": True,
                               "output_tripped": False}
    device.ques = 32
    with src.joined():
        src.set_frequency(2.5e9)
        src.finish_sync(src.post_sync(status_first=True))
    assert src.status_seen == {"unleveled": False, "reference_unlocked": True,
                               "output_tripped": False}  # by bit
    device.ques = 8
    src.finish_status(src.post_status())
    assert src.status_seen == {"unleveled": True, "reference_unlocked": False,
                               "output_tripped": False}
    with src.joined():
        src.set_frequency(2.6e9)
        pending = src.post_sync(status_first=True)
        assert src.status_seen == {}  # emptied when sent: never an older read's answer
        src.finish_sync(pending)


def test_a_source_that_takes_no_compound_messages_is_asked_its_level_state_apart():
    """A profile without compound messages (fr-sg8) cannot join the level state to its
    status read: it is asked in a message of its own after it (one exchange more), with the
    mask the profile inherits (POWer, bit 3), and its reference lock from the same answer
    with its own mask (bit 9)."""
    device = Device()
    link = FakeTransport(device)
    src = make_driver("fr-sg8", "lo", link)
    assert not src.compound and src.asks_companions
    device.ques = 8  # POWer; its reference-unlocked flag is its own bit 9
    src.finish_status(src.post_status())
    # both flags: one query (and its output protection's, a query of its own)
    assert link.sent == ["*ESR?", "STAT:QUES:COND?", "OUTP:PROT:TRIP?"]
    assert src.status_seen == {"unleveled": True, "reference_unlocked": False,
                               "output_tripped": False}
    device.ques = 512
    src.expire_status()
    src.finish_status(src.post_status())
    assert src.status_seen == {"unleveled": False, "reference_unlocked": True,
                               "output_tripped": False}


def test_the_analyzers_reference_lock_is_read_from_its_overload_query():
    """The analyzer's reference lock (FREQuency, bit 5) and its overload flag (POWer, bit 3)
    are one register: the marker reading's message asks it once and reads both flags from
    the answer (no byte more on the bus)."""
    device = Device()
    link = FakeTransport(device)
    sa = make_driver("scpi-analyzer", "sa", link)
    device.ques = 32
    _level, _noise, overload = sa.sweep_and_read(0.01, 70e6)
    assert link.sent == [":INIT:IMM;*WAI;:CALC:MARK1:X 70000000;:CALC:MARK1:Y?;"
                         ":STAT:QUES:COND?;*ESR?"]
    assert overload is False and sa.reference_unlocked_seen is True
    device.ques = 8
    _level, _noise, overload = sa.sweep_and_read(0.01, 70e6)
    assert overload is True and sa.reference_unlocked_seen is False


def test_an_analyzer_without_compound_messages_asks_the_shared_register_once():
    """One at a time (fr-sa20 takes no compound messages), the overload flag and the
    reference lock still read one answer of the questionable register: no exchange more."""
    device = Device()
    link = FakeTransport(device)
    sa = make_driver("fr-sa20", "sa", link)
    assert not sa.compound
    device.ques = 1024  # its overload bit 10
    _level, _noise, overload = sa.marker_reading(70e6)
    assert [m for m in link.sent if "QUES" in m] == ["STAT:QUES:COND?"]
    assert overload is True and sa.reference_unlocked_seen is False
