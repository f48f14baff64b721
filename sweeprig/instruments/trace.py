"""A trace as the analyzer reports it: levels with the frequency axis read back from it.

The axis is never rebuilt from what was requested: an analyzer may round a span, clamp a
centre near its band edge or keep a different point count, and a noise floor or peak search
on a rebuilt axis would then look in the wrong place. Swept-analyzer trace points are spread
evenly from the start to the stop frequency, both included (SCPI-99 SENSe:FREQuency
STARt/STOP/CENTer/SPAN and SENSe:SWEep:POINts; common practice for swept analyzers).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class Trace:
    """Levels of one sweep, dBm per point, with the axis the instrument reported.

    ``start_hz``/``stop_hz``: the first and last point's frequency, Hz, as read back
    (``centre − span/2`` and ``centre + span/2``). ``levels_dbm``: one level per point.
    ``points_reported``: the point count the instrument stated, when it was asked (None
    otherwise); the block's own length is the point count used.
    """

    start_hz: float
    stop_hz: float
    levels_dbm: np.ndarray
    points_reported: int | None = None

    @classmethod
    def from_centre_span(cls, centre_hz: float, span_hz: float, levels_dbm: np.ndarray,
                         points_reported: int | None = None) -> Trace:
        """A trace from a read-back centre and span, Hz."""
        return cls(centre_hz - span_hz / 2.0, centre_hz + span_hz / 2.0,
                   np.asarray(levels_dbm, dtype=np.float64), points_reported)

    @property
    def points(self) -> int:
        return int(self.levels_dbm.size)

    @property
    def centre_hz(self) -> float:
        return 0.5 * (self.start_hz + self.stop_hz)

    @property
    def span_hz(self) -> float:
        return self.stop_hz - self.start_hz

    @property
    def freq_hz(self) -> np.ndarray:
        """Frequency of every point, Hz (evenly spaced, start and stop included)."""
        return np.linspace(self.start_hz, self.stop_hz, self.points)

    @property
    def points_agree(self) -> bool:
        """Whether the block holds as many points as the instrument said (True if unasked)."""
        return self.points_reported is None or self.points_reported == self.points
