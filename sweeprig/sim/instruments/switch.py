"""RF switch — Tarnwick Labs TW-RS2 (simulated): routes the analyzer input to one DUT port.

Channels: 1 IF port (power-on), 2 RF port, 3 LO port. Exactly one channel is closed.
"""

from __future__ import annotations

from sweeprig.clock import Clock
from sweeprig.sim.scpi import Command, Identity, ScpiError, ScpiInstrument

CHANNELS = (1, 2, 3)
DEFAULT_CHANNEL = 1
#: Switching and settling time, s (invented figure).
SWITCH_TIME_S = 0.005


class RfSwitch(ScpiInstrument):
    """TW-RS2 one-of-three switch; ``.channel`` is the closed channel."""

    def __init__(self, clock: Clock, serial: str = "RS2-50001") -> None:
        super().__init__(clock, Identity("Tarnwick Labs", "TW-RS2", serial, "1.0"))
        self._channel = DEFAULT_CHANNEL
        self.add_command("ROUTe:CLOSe", write=self._close, query=self._close_query)

    @property
    def channel(self) -> int:
        return self._channel

    def on_reset(self) -> None:
        self._channel = DEFAULT_CHANNEL

    def _channels(self, cmd: Command) -> tuple[int, ...]:
        channels = cmd.one().to_channels(where=cmd.header)
        bad = [c for c in channels if c not in CHANNELS]
        if bad:
            raise ScpiError(-222, f"{cmd.header} channel {bad[0]} not in 1..3")
        return channels

    def _close(self, cmd: Command) -> None:
        channels = self._channels(cmd)
        if len(set(channels)) != 1:
            raise ScpiError(-221, f"{cmd.header} closes one channel at a time")
        if channels[0] != self._channel:
            self._channel = channels[0]
            self.start_operation(SWITCH_TIME_S)

    def _close_query(self, cmd: Command) -> str:
        return ",".join("1" if c == self._channel else "0" for c in self._channels(cmd))
