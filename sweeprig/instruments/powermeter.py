"""Power meter driver (role ``pm``): calibration-factor frequency, average power in dBm."""

from __future__ import annotations

import contextlib
import math

from sweeprig.instruments.driver import Driver
from sweeprig.transport import blocks


class PowerMeterDriver(Driver):
    """An average power meter with one sensor."""

    kind = "powermeter"
    #: What a previous user may have left set that moves every reading (read once, at
    #: connect): a display offset would go into every calibration it makes.
    left_setting_ops = ("display_offset", "duty_cycle")

    def set_frequency(self, freq_hz: float) -> bool:
        """Frequency for the sensor's calibration factor, Hz."""
        return self.set_value("frequency", freq_hz)

    def set_averages(self, count: int) -> bool:
        """Number of averages (if the profile supports it)."""
        return self.set_value("averages", count)

    @property
    def can_zero(self) -> bool:
        """Whether the profile can zero the sensor (action ``zero``)."""
        return self.profile.has("zero")

    def zero(self) -> None:
        """Zero the sensor and wait for it (every RF source must be off first)."""
        self.do("zero")

    def zeroed(self) -> bool | None:
        """Whether the last zeroing succeeded, read back (None: the profile cannot say)."""
        if not self.profile.has("zeroed"):
            return None
        return bool(self.ask("zeroed"))

    def read_power_dbm(self) -> float:
        """Measure the average power at the sensor, dBm; NaN when the meter answers SCPI's
        'not a number' (9.91E37: over range, or no sensor), for the caller to judge."""
        operation = self.profile.op("power")
        for template in operation.commands:
            self.write(template)
        reply = self.query(operation.queries[0], timeout_s=operation.timeout_s)
        with contextlib.suppress(ValueError):
            if float(reply.strip()) == blocks.SCPI_NAN:
                return math.nan
        return float(self._parse(reply, "float", self.where(operation.queries[0])))
