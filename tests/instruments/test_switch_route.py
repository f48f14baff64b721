"""A route a measurement depends on (the part or the calibration thru in the DUT position) is
checked: sent even when the driver remembers it, and read back (``ROUT:CLOS?``, SCPI-99's
route query). A narrow unit test on an in-process fake; the engine's use of it runs on the
simulated bench in tests/engine/test_recovery_state.py."""

from __future__ import annotations

import pytest

from sweeprig.errors import InstrumentError
from sweeprig.instruments import make_driver
from sweeprig.instruments.switch import SwitchDriver
from sweeprig.transport import FakeTransport


def _switch(lose: str | None = None) -> tuple[SwitchDriver, list[str]]:
    """A one-section switch on a fake: ``lose`` names a command that never arrives."""
    closed = {"channel": 6}
    sent: list[str] = []

    def reply(cmd: str) -> str | None:
        sent.append(cmd)
        if cmd == lose:
            return None
        if cmd.startswith("ROUT:CLOS? (@"):
            return "1" if int(cmd[13:-1]) == closed["channel"] else "0"
        if cmd.startswith("ROUT:CLOS (@"):
            closed["channel"] = int(cmd[12:-1])
            return None
        if cmd == "SYST:ERR?":
            return '0,"No error"'
        return "0"

    switch = make_driver("scpi-switch", "switch", FakeTransport(reply))
    assert isinstance(switch, SwitchDriver)
    return switch, sent


def test_a_route_is_sent_even_when_remembered_and_read_back() -> None:
    switch, sent = _switch()
    switch.route(7)
    assert "ROUT:CLOS (@7)" in sent and "ROUT:CLOS? (@7)" in sent
    sent.clear()
    switch.route(7)  # remembered as closed: sent and read back all the same
    assert "ROUT:CLOS (@7)" in sent and "ROUT:CLOS? (@7)" in sent
    assert switch.select(7) is False  # a plain selection still trusts the memo


def test_a_route_lost_on_the_way_reads_open_and_is_refused() -> None:
    switch, sent = _switch(lose="ROUT:CLOS (@6)")
    switch.route(7)
    with pytest.raises(InstrumentError, match="reads open"):
        switch.route(6)
    assert switch.state() == {}  # what is closed is unknown: the next selection is sent
    sent.clear()
    assert switch.select(7) is True and sent == ["ROUT:CLOS (@7)"]
