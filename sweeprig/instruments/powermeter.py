"""Power meter driver (role ``pm``): calibration-factor frequency, average power in dBm."""

from __future__ import annotations

from sweeprig.instruments.driver import Driver


class PowerMeterDriver(Driver):
    """An average power meter with one sensor."""

    kind = "powermeter"

    def set_frequency(self, freq_hz: float) -> bool:
        """Frequency for the sensor's calibration factor, Hz."""
        return self.set_value("frequency", freq_hz)

    def set_averages(self, count: int) -> bool:
        """Number of averages (if the profile supports it)."""
        return self.set_value("averages", count)

    def read_power_dbm(self) -> float:
        """Measure the average power at the sensor, dBm."""
        return float(self.ask("power"))
