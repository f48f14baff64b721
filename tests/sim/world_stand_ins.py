"""Stand-in instruments for the simulated world's unit tests: plain records with the
attributes :class:`sweeprig.sim.world.SimWorld` reads from the served instruments."""

from __future__ import annotations

from dataclasses import dataclass


@dataclass
class Source:
    freq_hz: float = 2.4e9
    delivered_power_dbm: float = -20.0
    output_on: bool = True
    harmonics_dbc: tuple[float, ...] = (-35.0, -45.0)


@dataclass
class Supply:
    output_voltage_v: float = 5.0
    output_on: bool = True


@dataclass
class Chamber:
    temperature_c: float = 85.0

    def probe_temperature_c(self) -> float:
        return self.temperature_c


@dataclass
class Switch:
    channel: int = 1
    sensor_channel: int = 4
    thru: bool = False
