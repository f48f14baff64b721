"""RF switch driver (role ``switch``): route the analyzer to one DUT port."""

from __future__ import annotations

from sweeprig.errors import InstrumentError
from sweeprig.instruments.driver import Driver


class SwitchDriver(Driver):
    """A single-pole switch: one channel closed at a time (numbered from 1)."""

    kind = "switch"

    def select(self, channel: int) -> bool:
        """Close ``channel`` (unchanged selection is not re-sent)."""
        return self.set_value("channel", channel)

    def is_closed(self, channel: int) -> bool:
        """Whether ``channel`` is closed (asks the instrument)."""
        return bool(self.ask("closed", channel))

    def route(self, channel: int) -> None:
        """Close ``channel`` for a route a measurement depends on (the part or the calibration
        thru in the DUT position), checked: always sent (the memo of the last channel sent
        cannot say a lost command ran), the error queue read, and the channel read back
        where the profile can ask. Raises :class:`InstrumentError` when it reads open."""
        self.set_value("channel", channel, force=True)
        self.check_errors()
        self.confirm(channel)

    def confirm(self, channel: int) -> None:
        """Read ``channel`` back where the profile can ask (a reading depends on the port it
        routes): raises :class:`InstrumentError` when it reads open, and forgets the switch's
        state, so the next selection is sent again."""
        if self.profile.has("closed") and not self.is_closed(channel):
            self.forget_state()  # what the switch has closed is unknown
            raise InstrumentError(
                f"switch channel {channel} reads open just after closing it",
                where=self.where(),
                fix="check the switch and its control cable; the point is measured again",
            )
