"""Thermal chamber driver (role ``chamber``): set point, conditioning, temperatures."""

from __future__ import annotations

from sweeprig.instruments.driver import Driver


class ChamberDriver(Driver):
    """A thermal chamber. Temperatures in °C."""

    kind = "chamber"

    def set_setpoint_c(self, temperature_c: float) -> bool:
        """Air set point, °C."""
        return self.set_value("setpoint", temperature_c)

    def set_control(self, on: bool) -> bool:
        """Conditioning on (air driven to the set point) or off (drifts to ambient)."""
        return self.set_value("control", on)

    def set_ramp_c_per_min(self, rate_c_per_min: float) -> bool:
        """Air ramp rate, °C/min (if the profile supports it)."""
        return self.set_value("ramp", rate_c_per_min)

    def probe_temperature_c(self, *, status: bool = False) -> float:
        """DUT probe temperature, °C. ``status``: the event status register is read in the
        same message where the profile allows it (taken as
        :meth:`~sweeprig.instruments.driver.Driver.point_status` will read it)."""
        if status:
            return float(self.ask_joined(("probe", None), status=True)[0])
        return float(self.ask("probe"))

    def air_temperature_c(self) -> float:
        """Chamber air temperature, °C."""
        return float(self.ask("air"))

    def safe(self, idle_setpoint_c: float | None = None) -> None:
        """Idle: set point to ``idle_setpoint_c`` with conditioning on, or, with no idle set
        point, conditioning off (the air drifts to ambient). Always sent."""
        if idle_setpoint_c is None:
            self.set_value("control", False, force=True)
        else:
            self.set_value("setpoint", idle_setpoint_c, force=True)
            self.set_value("control", True, force=True)
