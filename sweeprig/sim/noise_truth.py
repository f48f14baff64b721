"""The simulated part's noise figure as the Y-factor method sees it: the model's truth.

From the part's output noise density with its whole input at T0 and its conversion gain
from the signal and the image band (:mod:`sweeprig.sim.noise_source`): F_SSB and F_DSB at one
operating point, LO tone and RF (signal) frequency.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

from sweeprig.sim.mixer.types import OperatingPoint, ToneInput
from sweeprig.sim.noise_source import noise_factors


@dataclass(frozen=True)
class NoiseFigureTruth:
    """The part's noise figures, dB: single-sideband (referred to the signal band's gain),
    double-sideband (to the sum of both bands' gains); the image-to-signal gain ratio (dB)
    and the signal-band conversion gain (dB)."""

    ssb_db: float
    dsb_db: float
    image_to_signal_db: float
    signal_gain_db: float


def part_noise_figure(
    part: Any, *, temperature_c: float, supply_v: float, lo_freq_hz: float,
    lo_power_dbm: float, rf_freq_hz: float,
) -> NoiseFigureTruth:
    """The noise figures of a downconverting ``part`` (a ``MixerPart``) with the LO tone
    ``lo_*`` at its LO port and the signal at ``rf_freq_hz``; the image band is the other
    side of the LO at the same IF."""
    op = OperatingPoint(temperature_c=temperature_c, supply_v=supply_v)
    response = part.evaluate(op, ToneInput(lo_freq_hz, lo_power_dbm), ())
    f_if = abs(rf_freq_hz - lo_freq_hz)
    f_img = 2.0 * lo_freq_hz - rf_freq_hz
    mid = 10.0 ** (response.notes["conversion_gain_db"] / 10.0) * float(
        part.output_port.magnitude(f_if)) ** 2
    g_s = mid * float(part.input_port.magnitude(rf_freq_hz)) ** 2
    g_i = mid * float(part.input_port.magnitude(abs(f_img))) ** 2
    f_ssb, f_dsb = noise_factors(10.0 ** (response.if_noise_dbm_per_hz / 10.0), g_s, g_i)
    return NoiseFigureTruth(
        ssb_db=10.0 * math.log10(f_ssb), dsb_db=10.0 * math.log10(f_dsb),
        image_to_signal_db=10.0 * math.log10(g_i / g_s) if g_s > 0 else math.inf,
        signal_gain_db=10.0 * math.log10(g_s) if g_s > 0 else -math.inf,
    )
