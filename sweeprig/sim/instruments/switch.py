"""RF switch — Tarnwick Labs TW-RS2 (simulated): routes the analyzer input to one DUT port,
the power-meter sensor to one DUT input plane, and the DUT position to the part or a thru.

Three sections, exactly one channel closed in each (closing a channel opens the others of
its section):

* analyzer input: 1 IF port (power-on), 2 RF port, 3 LO port;
* power-meter sensor: 4 DUT RF input plane (power-on), 5 DUT LO input plane;
* DUT position: 6 the part (power-on), 7 the calibration thru (the part's socket bypassed:
  what arrives at the DUT RF input plane goes on, without loss, to each output path).
"""

from __future__ import annotations

from sweeprig.clock import Clock
from sweeprig.sim.scpi import Command, Identity, ScpiError, ScpiInstrument

#: The channels of each section; the first of each is closed at power-on.
SECTIONS: tuple[tuple[int, ...], ...] = ((1, 2, 3), (4, 5), (6, 7))
CHANNELS = tuple(c for section in SECTIONS for c in section)
DEFAULT_CHANNEL = 1
SENSOR_RF_PLANE, SENSOR_LO_PLANE = 4, 5
DUT_PART, DUT_THRU = 6, 7
#: Switching and settling time, s (invented figure).
SWITCH_TIME_S = 0.005


def _section(channel: int) -> int:
    return next(k for k, section in enumerate(SECTIONS) if channel in section)


class RfSwitch(ScpiInstrument):
    """TW-RS2 switch; ``.channel`` is the analyzer section's closed channel,
    ``.sensor_channel`` the sensor section's, ``.thru`` whether the thru replaces the part."""

    def __init__(self, clock: Clock, serial: str = "RS2-50001") -> None:
        super().__init__(clock, Identity("Tarnwick Labs", "TW-RS2", serial, "1.0"))
        self._closed = [section[0] for section in SECTIONS]
        self.add_command("ROUTe:CLOSe", write=self._close, query=self._close_query)

    @property
    def channel(self) -> int:
        return self._closed[0]

    @property
    def sensor_channel(self) -> int:
        return self._closed[1]

    @property
    def thru(self) -> bool:
        return self._closed[2] == DUT_THRU

    def move_by_hand(self, channel: int) -> None:
        """An operator moving a cable where the bench file has no channel for a route (an
        attended calibration's test): the channel's section changes without a command."""
        with self.lock:
            self._closed[_section(channel)] = channel

    def on_reset(self) -> None:
        self._closed = [section[0] for section in SECTIONS]

    def _channels(self, cmd: Command) -> tuple[int, ...]:
        channels = cmd.one().to_channels(where=cmd.header)
        bad = [c for c in channels if c not in CHANNELS]
        if bad:
            raise ScpiError(-222, f"{cmd.header} channel {bad[0]} not in 1..{max(CHANNELS)}")
        return channels

    def _close(self, cmd: Command) -> None:
        channels = self._channels(cmd)
        if len(set(channels)) != 1:
            raise ScpiError(-221, f"{cmd.header} closes one channel at a time")
        channel = channels[0]
        section = _section(channel)
        if channel != self._closed[section]:
            self._closed[section] = channel
            self.start_operation(SWITCH_TIME_S)

    def _close_query(self, cmd: Command) -> str:
        return ",".join("1" if c in self._closed else "0" for c in self._channels(cmd))
