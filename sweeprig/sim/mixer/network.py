"""Linear port networks around the mixer core: band edges, match and port voltages.

Units: frequencies in Hz, powers in W (or dBm where named), resistances in ohms, return loss
in dB (positive; ``None`` = perfect match), voltages in V peak. Only magnitudes are modelled:
the port networks scale amplitudes and leave phases alone.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray


def band_magnitude(
    freq_hz: ArrayLike, highpass_hz: float | None, lowpass_hz: float | None
) -> NDArray:
    """|H(f)| of a first-order high-pass corner times a first-order low-pass corner.

    ``|H_hp| = (f/f_hp)/sqrt(1 + (f/f_hp)²)``, ``|H_lp| = 1/sqrt(1 + (f/f_lp)²)``; a corner
    given as ``None`` is absent (flat). ``f = 0`` passes a high-pass as 0.
    """
    f2 = np.square(np.asarray(freq_hz, dtype=float))
    power = None  # |H|², built from the corners present
    if highpass_hz is not None:
        r2 = f2 * (1.0 / highpass_hz**2)
        power = r2 / (1.0 + r2)
    if lowpass_hz is not None:
        low = 1.0 / (1.0 + f2 * (1.0 / lowpass_hz**2))
        power = low if power is None else power * low
    return np.ones_like(f2) if power is None else np.sqrt(power)


def reflection_magnitude(return_loss_db: float | None) -> float:
    """|Γ| from a return loss in dB (``return loss = −20·log10|Γ|``; None → 0)."""
    if return_loss_db is None:
        return 0.0
    return float(10.0 ** (-return_loss_db / 20.0))


def delivered_fraction(return_loss_db: float | None) -> float:
    """Delivered / available power at a mismatched port: ``1 − |Γ|²``."""
    gamma = reflection_magnitude(return_loss_db)
    return 1.0 - gamma * gamma


def dbm_to_w(power_dbm: ArrayLike) -> NDArray:
    """dBm → W (element-wise)."""
    return 1e-3 * np.power(10.0, np.asarray(power_dbm, dtype=float) / 10.0)


def w_to_dbm(power_w: ArrayLike) -> NDArray:
    """W → dBm (element-wise; 0 W → −inf without a warning)."""
    p = np.asarray(power_w, dtype=float)
    with np.errstate(divide="ignore"):
        return 10.0 * np.log10(p / 1e-3)


def peak_voltage_v(power_w: ArrayLike, resistance_ohm: float) -> NDArray:
    """Peak voltage of a sine delivering ``power_w`` into ``resistance_ohm``: sqrt(2·R·P)."""
    return np.sqrt(2.0 * resistance_ohm * np.asarray(power_w, dtype=float))
