"""DC supply driver (role ``dc``): voltage, current limit, output, measurements."""

from __future__ import annotations

import math

from sweeprig.instruments.driver import Driver

#: The name a point's supply reading records when the part did not get its stated supply
#: (the figure flag of the same name: :mod:`sweeprig.analysis.figures`).
SUPPLY_LIMITED = "supply_limited"
#: An output this far below its setting (a fraction of it, and at least
#: :data:`SUPPLY_LOW_MIN_V`) is not at the stated supply, whatever the supply says of its
#: current limit: a supply in constant voltage holds its setting to a fraction of a per cent
#: (common practice, no source).
SUPPLY_LOW_FRACTION = 0.02
SUPPLY_LOW_MIN_V = 0.010


def supply_limited(limited: bool | None, voltage_v: float, set_v: float | None) -> bool:
    """Whether the part ran below its stated supply: the supply reports its current limit
    (``limited``; None: it cannot say), or its measured output ``voltage_v`` is below the
    setting ``set_v`` by more than :data:`SUPPLY_LOW_FRACTION` (V; None: no setting known)."""
    if limited:
        return True
    if set_v is None or not math.isfinite(voltage_v):
        return False
    return voltage_v < set_v - max(SUPPLY_LOW_FRACTION * set_v, SUPPLY_LOW_MIN_V)


class SupplyDriver(Driver):
    """A single-output DC supply. Safe state: output off."""

    kind = "supply"
    #: Read with every posted status read (its per-point ``*ESR?``): whether the supply holds
    #: its current limit (:attr:`~sweeprig.instruments.driver.Driver.status_seen`), and
    #: whether its output protection tripped.
    status_companions = ("current_limited", "output_tripped")

    def set_voltage(self, voltage_v: float) -> bool:
        """Set voltage, V (checked against the voltage limit before sending)."""
        return self.set_value("voltage", voltage_v)

    def set_current_limit(self, current_a: float) -> bool:
        """Current limit, A."""
        return self.set_value("current_limit", current_a)

    def set_output(self, on: bool) -> bool:
        """Switch the output on or off."""
        return self.set_value("output", on)

    def measure_voltage_v(self) -> float:
        """Measured output voltage, V."""
        return float(self.ask("measure_voltage"))

    def measure_current_a(self) -> float:
        """Measured output current, A (the DUT's supply current)."""
        return float(self.ask("measure_current"))

    def read_output(self) -> tuple[float, float, bool | None]:
        """(current A, voltage V, in current limit) of the output, in one message where the
        profile allows it; the limit is None when the profile cannot tell."""
        asks: list[tuple[str, None]] = [("measure_current", None), ("measure_voltage", None)]
        if self.profile.has("current_limited"):
            asks.append(("current_limited", None))
        replies = self.ask_joined(*asks)
        limited = bool(replies[2]) if len(replies) > 2 else None
        return float(replies[0]), float(replies[1]), limited

    def in_current_limit(self) -> bool:
        """Whether the supply is limiting current (False if the profile cannot tell)."""
        return bool(self.ask("current_limited")) if self.profile.has("current_limited") else False

    def query_output(self) -> bool:
        """Read back the output state."""
        return bool(self.read_back("output"))

    def safe(self) -> None:
        """Output off (always sent, whatever the cache says)."""
        self.set_value("output", False, force=True)
