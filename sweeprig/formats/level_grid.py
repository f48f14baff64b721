"""Path loss of a source connection over frequency AND level: a calibration's grid.

A source's level error depends on its setting as well as on its frequency (its output
attenuator and levelling detector), so a calibration measures each source connection over a
grid of frequencies × levels at the DUT plane. The table here answers the loss (dB, positive
for attenuation) at any (frequency, level) inside that grid, interpolated linearly in
frequency and then linearly in level (bilinear), and refuses (never extrapolates) a point
outside it: the pre-flight check names the points that fall outside the calibrated grid.

The level axis is the level at the DUT plane, dBm (what a sequence asks for), not the
source's setting.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from numpy.typing import ArrayLike

from sweeprig.errors import InputError
from sweeprig.units import format_frequency

#: Relative slack at the frequency ends (as for :class:`~sweeprig.formats.pathloss.TableLoss`).
_FREQ_RTOL = 1e-9
#: Slack at the level ends, dB: a level computed as a sum of steps still counts as inside.
LEVEL_SLACK_DB = 1e-6


@dataclass(frozen=True)
class LevelGridLoss:
    """Loss over a grid of frequencies (Hz, ascending) × levels (dBm at the DUT plane,
    ascending); ``loss_table_db[i, j]`` is the loss at ``level_dbm[i]`` and ``freq_hz[j]``."""

    freq_hz: np.ndarray = field(repr=False)
    level_dbm: np.ndarray = field(repr=False)
    loss_table_db: np.ndarray = field(repr=False)
    file: str = ""
    where: str = ""
    fix: str = ""

    def outside(self, freq_hz: ArrayLike, level_dbm: ArrayLike) -> np.ndarray:
        """True where a (frequency, level) lies outside the grid (broadcast arrays)."""
        f, p = np.broadcast_arrays(np.asarray(freq_hz, dtype=float),
                                   np.asarray(level_dbm, dtype=float))
        return ((f < self.freq_hz[0] * (1 - _FREQ_RTOL))
                | (f > self.freq_hz[-1] * (1 + _FREQ_RTOL))
                | (p < self.level_dbm[0] - LEVEL_SLACK_DB)
                | (p > self.level_dbm[-1] + LEVEL_SLACK_DB)
                | ~np.isfinite(p))

    def span(self) -> str:
        """The grid's extent in words."""
        lv = self.level_dbm
        levels = (f"{lv[0]:g} dBm" if lv.size == 1 else f"{lv[0]:g} to {lv[-1]:g} dBm")
        return (f"{format_frequency(self.freq_hz[0])} to {format_frequency(self.freq_hz[-1])}"
                f", {levels} at the DUT plane")

    def loss_db(self, freq_hz: ArrayLike, level_dbm: ArrayLike | None = None) -> np.ndarray:
        """Loss in dB at each (frequency, level); InputError for any point outside the grid
        or without a level."""
        if level_dbm is None:
            raise InputError(
                "this connection's calibration depends on the level, but no level was given "
                "for it", where=self.where or self.file,
                fix="report this as a bug in sweeprig; meanwhile calibrate at one level "
                "(--levels with one value)")
        f, p = np.broadcast_arrays(np.asarray(freq_hz, dtype=float),
                                   np.asarray(level_dbm, dtype=float))
        if f.size == 0:
            return np.zeros(f.shape)
        bad = self.outside(f, p)
        if bad.any():
            k = int(np.flatnonzero(bad.ravel())[0])
            raise InputError(
                f"calibrated loss needed at {format_frequency(float(f.ravel()[k]))} and "
                f"{float(p.ravel()[k]):g} dBm, outside the calibrated grid {self.file} "
                f"({self.span()}); sweeprig does not extrapolate a calibration",
                where=self.where or self.file,
                fix=self.fix or "calibrate again over every frequency and level the sequence "
                "uses, or narrow the sweep")
        rows = np.stack([np.interp(f.ravel(), self.freq_hz, row)
                         for row in self.loss_table_db])  # levels × points
        levels = self.level_dbm
        pr = p.ravel()
        if levels.size == 1:
            return rows[0].reshape(f.shape)
        i = np.clip(np.searchsorted(levels, pr, side="right") - 1, 0, levels.size - 2)
        t = np.clip((pr - levels[i]) / (levels[i + 1] - levels[i]), 0.0, 1.0)
        cols = np.arange(pr.size)
        out = rows[i, cols] * (1.0 - t) + rows[i + 1, cols] * t
        return out.reshape(f.shape)

    def at(self, freq_hz: float, level_dbm: float | None = None) -> float:
        """Loss in dB at one frequency (Hz) and level (dBm at the DUT plane)."""
        return float(self.loss_db(np.asarray([freq_hz]),
                                  None if level_dbm is None else np.asarray([level_dbm]))[0])

    def estimate_at(self, freq_hz: float, level_dbm: float | None = None) -> float:
        """The loss for a prediction (never to correct a measured level): the grid's nearest
        point outside it, its middle level without a level."""
        f = float(np.clip(freq_hz, self.freq_hz[0], self.freq_hz[-1]))
        lv = self.level_dbm
        p = float(np.median(lv)) if level_dbm is None else float(
            np.clip(level_dbm, lv[0], lv[-1]))
        return self.at(f, p)

    def describe(self) -> str:
        return (f"calibrated grid {self.file} ({self.freq_hz.size} frequencies × "
                f"{self.level_dbm.size} levels, {self.span()})")
