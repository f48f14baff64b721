"""Signal source driver (roles ``rf``, ``rf2``, ``lo``): CW frequency, level, RF output."""

from __future__ import annotations

from sweeprig.instruments.driver import Driver

#: The key of a point record's ``extra`` listing the sources (role names) found unleveled
#: by the status read after the point (the reduction flags its figures ``source_unleveled``).
UNLEVELED_SOURCES = "unleveled_sources"



class SourceDriver(Driver):
    """A CW signal source. Safe state: RF output off."""

    kind = "source"
    #: Asked with its status read after every point: its output's level state, its
    #: reference's lock (:attr:`~sweeprig.instruments.driver.Driver.status_seen`; one query
    #: where both read one register, as SCPI-99's questionable condition holds both) and its
    #: output protection.
    status_companions = ("unleveled", "reference_unlocked", "output_tripped")
    #: What a previous user may have left set that makes its output other than the CW tone
    #: at the level and frequency sweeprig sets (read once, at connect).
    left_setting_ops = ("power_offset", "frequency_offset", "modulation")

    def set_frequency(self, freq_hz: float) -> bool:
        """Set the CW frequency, Hz. Returns True if a command was sent."""
        return self.set_value("frequency", freq_hz)

    def set_power(self, power_dbm: float) -> bool:
        """Set the output level, dBm (checked against the power limit before sending)."""
        return self.set_value("power", power_dbm)

    def set_output(self, on: bool) -> bool:
        """Switch the RF output on or off."""
        return self.set_value("output", on)

    def query_frequency_hz(self) -> float:
        """Read back the CW frequency, Hz."""
        return float(self.read_back("frequency"))

    def query_power_dbm(self) -> float:
        """Read back the output level, dBm."""
        return float(self.read_back("power"))

    def query_output(self) -> bool:
        """Read back the RF output state."""
        return bool(self.read_back("output"))

    def safe(self) -> None:
        """RF output off (always sent, whatever the cache says)."""
        self.set_value("output", False, force=True)
