"""Value types of the mixer model's interface (shared by the model and the simulated world).

Powers are in dBm at the mixer's own port planes (cable losses are the world's business),
frequencies in Hz, temperatures in degC, voltages in V, currents in A, phases in radians.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import NamedTuple


@dataclass(frozen=True)
class ToneInput:
    """One source's signal arriving at a mixer port.

    ``power_dbm`` is the available power of the fundamental at the port plane.
    ``harmonics_dbc[i]`` is the level of harmonic i+2 relative to the fundamental (dBc), so a
    source with a −35 dBc second harmonic has ``harmonics_dbc=(-35.0,)``. Harmonics share the
    fundamental's phase axis (they are commensurate with it by construction).
    """

    freq_hz: float
    power_dbm: float
    phase_rad: float = 0.0
    harmonics_dbc: tuple[float, ...] = ()


@dataclass(frozen=True)
class OperatingPoint:
    """Conditions of the part: die temperature (degC) and supply voltage (V)."""

    temperature_c: float = 25.0
    supply_v: float = 3.3


class Product(NamedTuple):
    """One spectral line at a mixer port.

    ``orders`` are the signed multipliers of the input tones that made it, in the order
    (LO, RF1, RF2, ...): the line sits at |sum(orders[k] * f[k])|. ``power_dbm`` is the power
    delivered into a matched 50 ohm load at that port.

    A named tuple (immutable, built positionally or by keyword, fields read by name): a
    response holds hundreds of lines and a tuple is several times cheaper to build than a
    frozen dataclass. Use ``product._replace(power_dbm=...)`` for a changed copy.
    """

    freq_hz: float
    power_dbm: float
    orders: tuple[int, ...]


@dataclass(frozen=True)
class MixerResponse:
    """Everything the mixer puts out for one set of inputs.

    ``if_port``: lines at the output (IF for a downconverter) port.
    ``rf_port``: lines leaving the RF (input) port: LO leakage (LO→RF isolation) and reflections.
    For an upconverter the fields keep their names: ``if_port`` holds the output (RF) port's
    lines and ``rf_port`` the input (IF) port's lines.
    ``lo_port``: lines leaving the LO port (RF→LO leakage), may be empty.
    ``if_noise_dbm_per_hz``: output noise density at the IF port (flat over the IF band).
    ``supply_current_a``: DC current drawn from the supply.
    """

    if_port: tuple[Product, ...]
    rf_port: tuple[Product, ...] = ()
    lo_port: tuple[Product, ...] = ()
    if_noise_dbm_per_hz: float = -174.0
    supply_current_a: float = 0.0
    notes: dict[str, float] = field(default_factory=dict)
