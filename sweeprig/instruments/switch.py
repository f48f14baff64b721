"""RF switch driver (role ``switch``): route the analyzer to one DUT port."""

from __future__ import annotations

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
