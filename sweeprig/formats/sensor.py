"""The power-meter sensor of a bench file (``[sensor]``): calibration factor, zeroing, averages.

A power sensor does not absorb and detect all of the power that reaches it: its calibration
factor K (per cent) at each frequency is the fraction it indicates, so the power at its plane
is the indicated power divided by K, i.e. ``P = P_indicated − 10·log10(K / 100)`` dB (the
usual definition of a sensor's calibration factor; common practice, no single source). The
factors come from the sensor's own calibration report; sweeprig applies them itself, so the
meter's own calibration-factor setting must stay at 100 % (its power-on value)::

    [sensor]
    cal_factor = { freq = ["100 MHz", "2 GHz", "6 GHz"], percent = [99.1, 97.6, 95.0] }
    zero = true        # zero the sensor before calibrating (the profile's `zero` action)
    averages = 16      # readings averaged by the meter for each calibration point

Between the table's frequencies the factor is interpolated linearly in per cent (common
practice, no source); outside it a reading is refused, never extrapolated.
"""

from __future__ import annotations

import math
from typing import Annotated

import numpy as np
from pydantic import Field, model_validator

from sweeprig.errors import InputError
from sweeprig.formats.fields import Frequency, Frozen, StrictBool


class CalFactorTable(Frozen):
    """The sensor's calibration factor versus frequency."""

    freq: tuple[Frequency, ...] = Field(
        min_length=1, description="frequencies, ascending (text with units or Hz)")
    percent: tuple[Annotated[float, Field(gt=10.0, le=150.0)], ...] = Field(
        min_length=1, description="calibration factor at each frequency, per cent")

    @model_validator(mode="after")
    def _shape(self) -> CalFactorTable:
        if len(self.freq) != len(self.percent):
            raise ValueError(f"{len(self.freq)} frequencies but {len(self.percent)} factors: "
                             "give one factor per frequency")
        if any(b <= a for a, b in zip(self.freq, self.freq[1:], strict=False)):
            raise ValueError("the frequencies do not rise from one entry to the next: sort "
                             "them in ascending order")
        return self


class SensorSpec(Frozen):
    """The ``[sensor]`` table of a bench file (see the module docstring)."""

    cal_factor: CalFactorTable | None = Field(
        None, description="calibration factor versus frequency (absent: the meter's reading "
        "is taken as it is)")
    zero: StrictBool = Field(True, description="zero the sensor before a calibration, when "
                             "the meter's profile can (action `zero`)")
    averages: Annotated[int, Field(strict=True, ge=1, le=1024)] = Field(
        16, description="readings the meter averages for each calibration point")

    def cal_factor_db(self, freq_hz: float, where: str = "bench file, sensor.cal_factor") -> float:
        """``10·log10(K / 100)`` at ``freq_hz``, dB (0 without a table): subtract it from an
        indicated power to get the power at the sensor's plane. Refuses a frequency outside
        the table (no extrapolation)."""
        table = self.cal_factor
        if table is None:
            return 0.0
        freqs = np.asarray(table.freq, dtype=float)
        lo, hi = float(freqs[0]), float(freqs[-1])
        if len(freqs) == 1:
            if not math.isclose(freq_hz, lo, rel_tol=1e-9):
                raise _outside(freq_hz, lo, hi, where)
            return 10.0 * math.log10(table.percent[0] / 100.0)
        if not lo * (1 - 1e-9) <= freq_hz <= hi * (1 + 1e-9):
            raise _outside(freq_hz, lo, hi, where)
        percent = float(np.interp(freq_hz, freqs, np.asarray(table.percent, dtype=float)))
        return 10.0 * math.log10(percent / 100.0)

    def describe(self) -> str:
        """How readings are corrected, in words (for a calibration file's method)."""
        if self.cal_factor is None:
            return "no sensor calibration-factor table (readings as the meter gives them)"
        return (f"sensor calibration factor from the bench file's table "
                f"({len(self.cal_factor.freq)} frequencies, interpolated linearly)")


def _outside(freq_hz: float, lo: float, hi: float, where: str) -> InputError:
    return InputError(
        f"{freq_hz / 1e9:g} GHz is outside the sensor's calibration-factor table "
        f"({lo / 1e9:g} to {hi / 1e9:g} GHz)", where=where,
        fix="add the sensor's calibration factors over every frequency the calibration "
        "reads (from the sensor's calibration report); nothing is extrapolated")
