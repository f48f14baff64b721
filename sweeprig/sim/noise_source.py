"""The simulated noise source and how its noise reaches the analyzer: pure numpy, no I/O.

A noise source is a diode biased into avalanche by a drive voltage (commonly 28 V from a bench
supply): on, it presents the noise temperature T_hot(f) = T0·(1 + ENR(f)) at its output; off,
a matched load at its physical (room) temperature T_cold. ENR = (T_hot − T0)/T0, T0 = 290 K
(the IEEE definition of the excess noise ratio; Pozar, *Microwave Engineering*, noise chapter).

On the simulated bench the source's output sits at the DUT RF input plane (where a real bench
connects it for a noise-figure measurement), so with the calibration thru fitted it feeds the
receive path straight.

A double-balanced mixer converts the noise at its input from the signal band (f_LO ± f_IF on
the wanted side) and from the image band (the other side) to the same IF. With input noise
temperatures T_s and T_i in the two bands and transducer gains G_s and G_i (ratios), the
output noise density is

    N_out = N_0 + k·(T_s − T0)·G_s + k·(T_i − T0)·G_i

where N_0 is the part's output noise density with its whole input at T0 (the part model's
``kT0·F_SSB·G``, :mod:`sweeprig.sim.mixer.part`). Input bands further out (around the odd LO
harmonics) are counted in N_0 at T0 only: the model treats the noise source's excess there as
rolled off by the part's port filters (a simplification, stated). From this, the noise factors
the Y-factor method recovers (definitions: IEEE; the SSB/DSB relation of the field notes):

    F_SSB = N_0 / (k·T0·G_s),   F_DSB = N_0 / (k·T0·(G_s + G_i)) = F_SSB·G_s/(G_s + G_i).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from numpy.typing import ArrayLike, NDArray

from sweeprig.sim.analyzer_display import BOLTZMANN_J_PER_K, T0_K

ZERO_C_K = 273.15
#: A typical diode noise source's ENR, (Hz, dB): about 15 dB with a gentle slope and ripple,
#: an invented curve in the range such sources state (no source).
DEFAULT_ENR_POINTS: tuple[tuple[float, float], ...] = (
    (10e6, 15.32), (100e6, 15.28), (500e6, 15.21), (1e9, 15.12), (1.5e9, 15.05),
    (2e9, 14.98), (2.5e9, 14.93), (3e9, 14.90), (4e9, 14.82), (6e9, 14.70), (8e9, 14.61),
    (13.6e9, 14.40),
)


@dataclass(frozen=True)
class NoiseSourceModel:
    """A simulated noise source.

    ``enr_points``: its true ENR as (Hz, dB), frequencies rising (linear interpolation in dB,
    held flat beyond the ends). ``drive_on_v``: the drive voltage above which it is on (hot);
    a supply below it leaves the diode off (an analyzer's noise-source output drives it at its
    rated voltage whenever on). ``ambient_c``: its physical temperature, degC
    (its cold state is a matched load at this temperature).
    """

    enr_points: tuple[tuple[float, float], ...] = DEFAULT_ENR_POINTS
    drive_on_v: float = 20.0
    ambient_c: float = 23.0
    driven_by: str = "nsdc"
    """What its drive input is wired to: "nsdc" (the supply output) or "sa" (the analyzer's
    own noise-source output)."""

    def enr_db(self, freq_hz: ArrayLike) -> NDArray[np.float64]:
        """True ENR at ``freq_hz``, dB."""
        xs, ys = _enr_table(self.enr_points)
        return np.interp(np.asarray(freq_hz, dtype=float), xs, ys)

    @property
    def cold_k(self) -> float:
        """Cold (off) noise temperature, K: the room temperature."""
        return self.ambient_c + ZERO_C_K

    def temperature_k(self, freq_hz: ArrayLike, on: bool) -> NDArray[np.float64]:
        """Noise temperature presented at ``freq_hz``, K: T0·(1 + ENR) on, T_cold off."""
        f = np.asarray(freq_hz, dtype=float)
        if not on:
            return np.full(f.shape, self.cold_k)
        return T0_K * (1.0 + 10.0 ** (self.enr_db(f) / 10.0))

    def is_on(self, drive_v: float) -> bool:
        """Whether a drive of ``drive_v`` volts turns the source on."""
        return drive_v >= self.drive_on_v


@lru_cache(maxsize=16)
def _enr_table(points: tuple[tuple[float, float], ...]) -> tuple[NDArray[np.float64],
                                                                 NDArray[np.float64]]:
    """An ENR table as two read-only arrays (Hz, dB)."""
    xs = np.array([p[0] for p in points], dtype=float)
    ys = np.array([p[1] for p in points], dtype=float)
    xs.flags.writeable = False
    ys.flags.writeable = False
    return xs, ys


def density_mw_per_hz(temperature_k: ArrayLike) -> NDArray[np.float64]:
    """Available noise power density k·T, mW/Hz."""
    return BOLTZMANN_J_PER_K * np.asarray(temperature_k, dtype=float) * 1e3


def mixer_output_density_mw(
    part_density_mw: float, signal_k: ArrayLike, image_k: ArrayLike,
    signal_gain: ArrayLike, image_gain: ArrayLike,
) -> NDArray[np.float64]:
    """Output noise density of a mixer, mW/Hz (see the module docstring):
    N_0 + k·(T_s − T0)·G_s + k·(T_i − T0)·G_i. Gains are ratios (not dB)."""
    return (part_density_mw
            + density_mw_per_hz(np.asarray(signal_k, dtype=float) - T0_K)
            * np.asarray(signal_gain, dtype=float)
            + density_mw_per_hz(np.asarray(image_k, dtype=float) - T0_K)
            * np.asarray(image_gain, dtype=float))


def noise_factors(part_density_mw: float, signal_gain: float,
                  image_gain: float) -> tuple[float, float]:
    """(F_SSB, F_DSB) of a mixer from its output density at T0 and its two band gains
    (ratios): N_0/(k·T0·G_s) and N_0/(k·T0·(G_s + G_i))."""
    kt0 = float(density_mw_per_hz(T0_K))
    if signal_gain <= 0.0:
        return math.inf, math.inf
    return (part_density_mw / (kt0 * signal_gain),
            part_density_mw / (kt0 * (signal_gain + image_gain)))
