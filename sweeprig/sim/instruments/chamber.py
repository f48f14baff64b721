"""Thermal chamber — Kelderhall Thermal KT-C70 (simulated), sweeprig's own THERmal commands.

Model, computed in closed form from the shared clock (no background thread):

* control on: the air ramps linearly at the ramp rate to the set point, then holds it;
* control off: the air relaxes exponentially to ambient (23 °C) with time constant
  ``drift_tau_s`` (invented figure, 600 s);
* the DUT probe follows the air as a first-order lag, dP/dt = (A − P)/τ, τ = 120 s.

Every change of a setting (and ``*RST``) closes the current segment at the present state
and starts a new one, so the temperatures are continuous in time.

First-order lag driven by a ramp A = a0 + k·t: P(t) = a0 + k(t − τ) + (P0 − a0 + kτ)e^(−t/τ);
by an exponential A = T∞ + D·e^(−t/τa): P(t) = T∞ + C·e^(−t/τa) + (P0 − T∞ − C)e^(−t/τ),
C = D·τa/(τa − τ) (solutions of the linear ODE; any text on first-order systems).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from sweeprig.clock import Clock
from sweeprig.sim.scpi import Command, Identity, ScpiInstrument, Setting, format_number

AMBIENT_C = 23.0
SETPOINT_MIN_C = -70.0
SETPOINT_MAX_C = 180.0
PROBE_TAU_S = 120.0
DRIFT_TAU_S = 600.0
RAMP_DEFAULT_C_PER_MIN = 5.0


@dataclass(frozen=True)
class _Segment:
    """State at ``t0_s`` and the conditions that hold from then on."""

    t0_s: float
    air0_c: float
    probe0_c: float
    control_on: bool
    setpoint_c: float
    ramp_c_per_min: float


def _lag_ramp(probe0_c: float, air0_c: float, slope_c_per_s: float, t_s: float,
              tau_s: float) -> float:
    return (air0_c + slope_c_per_s * (t_s - tau_s)
            + (probe0_c - air0_c + slope_c_per_s * tau_s) * math.exp(-t_s / tau_s))


def _lag_hold(probe0_c: float, air_c: float, t_s: float, tau_s: float) -> float:
    return air_c + (probe0_c - air_c) * math.exp(-t_s / tau_s)


def _temperatures(seg: _Segment, t_s: float, ambient_c: float, probe_tau_s: float,
                  drift_tau_s: float) -> tuple[float, float]:
    """(air, probe) temperatures, degC, at time ``t_s`` within segment ``seg``."""
    dt = max(0.0, t_s - seg.t0_s)
    if seg.control_on:
        gap = seg.setpoint_c - seg.air0_c
        rate = seg.ramp_c_per_min / 60.0
        ramp_s = abs(gap) / rate if rate > 0 else math.inf
        slope = math.copysign(rate, gap)
        if dt <= ramp_s:
            air = seg.air0_c + slope * dt
            return air, _lag_ramp(seg.probe0_c, seg.air0_c, slope, dt, probe_tau_s)
        probe_end = _lag_ramp(seg.probe0_c, seg.air0_c, slope, ramp_s, probe_tau_s)
        return seg.setpoint_c, _lag_hold(probe_end, seg.setpoint_c, dt - ramp_s, probe_tau_s)
    gap = seg.air0_c - ambient_c
    air = ambient_c + gap * math.exp(-dt / drift_tau_s)
    if math.isclose(drift_tau_s, probe_tau_s):
        decay = math.exp(-dt / probe_tau_s)
        probe = ambient_c + (seg.probe0_c - ambient_c) * decay + gap * (dt / probe_tau_s) * decay
    else:
        c = gap * drift_tau_s / (drift_tau_s - probe_tau_s)
        probe = (ambient_c + c * math.exp(-dt / drift_tau_s)
                 + (seg.probe0_c - ambient_c - c) * math.exp(-dt / probe_tau_s))
    return air, probe


class ThermalChamber(ScpiInstrument):
    """KT-C70 chamber. Power-on: control OFF (idle), set point 23 °C, ramp 5 °C/min."""

    def __init__(
        self,
        clock: Clock,
        serial: str = "C70-40001",
        *,
        ambient_c: float = AMBIENT_C,
        probe_tau_s: float = PROBE_TAU_S,
        drift_tau_s: float = DRIFT_TAU_S,
    ) -> None:
        super().__init__(clock, Identity("Kelderhall Thermal", "KT-C70", serial, "1.0"))
        self.ambient_c = ambient_c
        self.probe_tau_s = probe_tau_s
        self.drift_tau_s = drift_tau_s
        caution = "caution: chamber air outside -70..+180 degC is not allowed"
        self.add_setting(Setting(
            "setpoint_c", "THERmal:SETPoint", "float", ambient_c, unit="temperature",
            minimum=SETPOINT_MIN_C, maximum=SETPOINT_MAX_C, on_change=self._resegment,
            caution=caution,
        ))
        self.add_setting(Setting("control_on", "THERmal:CONTrol", "bool", False,
                                 on_change=self._resegment))
        self.add_setting(Setting(
            "ramp_c_per_min", "THERmal:RAMP", "float", RAMP_DEFAULT_C_PER_MIN,
            minimum=0.1, maximum=30.0, on_change=self._resegment,
        ))
        self.add_command("THERmal:AIR", query=self._air_query)
        self.add_command("THERmal:PROBe", query=self._probe_query)
        #: True once its over-temperature limiter has tripped (a planted ``trip`` fault):
        #: the conditioning stops while the controller still reads control on.
        self.limiter_tripped = False
        self._segment = _Segment(clock.now(), ambient_c, ambient_c, False, ambient_c,
                                 RAMP_DEFAULT_C_PER_MIN)

    def trip_protection(self) -> None:
        """Its limiter trips: the air drifts to ambient from now on, whatever the controller
        is set to (``THERmal:CONTrol?`` still answers 1); a power cycle resets it."""
        with self.lock:
            self.limiter_tripped = True
            self._resegment(None)

    def reset_to_power_on(self) -> None:
        with self.lock:
            self.limiter_tripped = False
            super().reset_to_power_on()

    def temperatures_c(self) -> tuple[float, float]:
        """(air, DUT probe) temperature now, degC."""
        return _temperatures(self._segment, self.clock.now(), self.ambient_c,
                             self.probe_tau_s, self.drift_tau_s)

    def air_temperature_c(self) -> float:
        return self.temperatures_c()[0]

    def probe_temperature_c(self) -> float:
        """DUT probe temperature now, degC (what the world uses as the part's temperature)."""
        return self.temperatures_c()[1]

    def on_reset(self) -> None:
        if hasattr(self, "_segment"):
            self._resegment(None)

    def _resegment(self, _value: object) -> None:
        with self.lock:
            now = self.clock.now()
            air, probe = self.temperatures_c()
            self._segment = _Segment(
                now, air, probe,
                bool(self.value("control_on")) and not self.limiter_tripped,
                float(self.value("setpoint_c")), float(self.value("ramp_c_per_min")),
            )

    def _air_query(self, cmd: Command) -> str:
        cmd.no_params()
        return format_number(self.air_temperature_c())

    def _probe_query(self, cmd: Command) -> str:
        cmd.no_params()
        return format_number(self.probe_temperature_c())
