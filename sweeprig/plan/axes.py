"""One sweep axis as a lazy sequence of values (never materialised for ranges).

An axis is built from what a file holds (a value, a list, or a range) and answers its length,
its i-th value, and values for an array of indices, all in the internal unit of its kind.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from sweeprig.formats.fields import AxisValue, RangeSpec


def tidy(value: float) -> float:
    """Round away binary noise (2.3e9 + 2·25e6 → 2.35e9 exactly); 12 significant digits."""
    return float(f"{value:.12g}")


@dataclass(frozen=True)
class Axis:
    """Values of one axis. ``shape`` is "list", "step", "linear" or "log"."""

    name: str
    shape: str
    count: int
    start: float = 0.0
    stop: float = 0.0
    step: float = 0.0
    listed: tuple[float, ...] = ()

    def __len__(self) -> int:
        return self.count

    def value(self, i: int) -> float:
        """The i-th value (0 ≤ i < count)."""
        if not 0 <= i < self.count:
            raise IndexError(f"axis {self.name}: index {i} outside 0..{self.count - 1}")
        if self.shape == "list":
            return self.listed[i]
        if self.shape == "step":
            return tidy(self.start + i * self.step)
        if self.shape == "linear":
            if i == self.count - 1:
                return self.stop
            return tidy(self.start + (self.stop - self.start) * i / (self.count - 1))
        if i == self.count - 1:
            return self.stop
        ratio = self.stop / self.start
        return tidy(self.start * ratio ** (i / (self.count - 1)))

    def values(self, idx: np.ndarray) -> np.ndarray:
        """Values for an integer index array (vectorised; same formulas as :meth:`value`)."""
        idx = np.asarray(idx, dtype=np.int64)
        if self.shape == "list":
            return np.asarray(self.listed, dtype=float)[idx]
        if self.shape == "step":
            return self.start + idx * self.step
        frac = idx / max(self.count - 1, 1)
        if self.shape == "linear":
            return self.start + (self.stop - self.start) * frac
        return self.start * (self.stop / self.start) ** frac

    def all_values(self) -> np.ndarray:
        """Every value (only for axes small enough to hold in memory)."""
        return self.values(np.arange(self.count))

    @property
    def minimum(self) -> float:
        if self.shape == "list":
            return min(self.listed)
        return self.start

    @property
    def maximum(self) -> float:
        if self.shape == "list":
            return max(self.listed)
        return self.value(self.count - 1)


def axis_from_spec(name: str, spec: AxisValue) -> Axis:
    """Build an :class:`Axis` from a validated file value (float, tuple or range)."""
    if isinstance(spec, RangeSpec):
        if spec.step is not None:
            return Axis(name, "step", spec.count(), start=spec.start, stop=spec.stop,
                        step=spec.step)
        assert spec.points is not None
        shape = "log" if spec.scale == "log" else "linear"
        return Axis(name, shape, spec.points, start=spec.start, stop=spec.stop)
    if isinstance(spec, tuple | list):
        return Axis(name, "list", len(spec), listed=tuple(tidy(float(v)) for v in spec))
    return Axis(name, "list", 1, listed=(tidy(float(spec)),))
