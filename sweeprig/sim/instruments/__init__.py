"""The simulated instruments, each a :class:`~sweeprig.sim.scpi.ScpiInstrument`.

Command sets: docs/instruments.md.
"""

from sweeprig.sim.instruments.chamber import ThermalChamber
from sweeprig.sim.instruments.powermeter import PowerMeter
from sweeprig.sim.instruments.simctl import SimControl
from sweeprig.sim.instruments.source import (
    SignalSource,
    default_level_error_db,
    no_level_error_db,
)
from sweeprig.sim.instruments.supply import DcSupply
from sweeprig.sim.instruments.switch import RfSwitch

__all__ = [
    "DcSupply",
    "PowerMeter",
    "RfSwitch",
    "SignalSource",
    "SimControl",
    "ThermalChamber",
    "default_level_error_db",
    "no_level_error_db",
]
