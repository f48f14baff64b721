"""DC supply driver (role ``dc``): voltage, current limit, output, measurements."""

from __future__ import annotations

from sweeprig.instruments.driver import Driver


class SupplyDriver(Driver):
    """A single-output DC supply. Safe state: output off."""

    kind = "supply"

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

    def in_current_limit(self) -> bool:
        """Whether the supply is limiting current (False if the profile cannot tell)."""
        return bool(self.ask("current_limited")) if self.profile.has("current_limited") else False

    def query_output(self) -> bool:
        """Read back the output state."""
        return bool(self.read_back("output"))

    def safe(self) -> None:
        """Output off (always sent, whatever the cache says)."""
        self.set_value("output", False, force=True)
