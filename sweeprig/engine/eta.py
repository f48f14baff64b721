"""The time left in a run: the prediction of what remains, corrected by the pace so far.

What remains is the predicted time of the points not yet stored (the plan's average per
point, :mod:`sweeprig.plan.duration`) plus, for every temperature not yet reached, its
predicted chamber travel and soak, plus what is left of the wait in progress (a soak's time
left; a chamber travel's prediction minus the time already waited). The points' part is
scaled by the measured pace (bench time per point measured here over the predicted), and the
whole turned into wall time by the measured ratio of wall to bench time (1 on a real bench;
far below 1 on the simulated bench, whose time passes instantly).
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field

from sweeprig.plan.duration import DurationEstimate

#: The pace correction is trusted only within this factor of the prediction (a few slow
#: first points, a recovery, must not throw the ETA off by more; common practice, no source).
PACE_LIMITS = (0.5, 3.0)


@dataclass
class EtaTracker:
    """Tracks a run's progress for its ETA (one per run process)."""

    estimate: DurationEstimate
    total_points: int
    done_points: int = 0
    _position: int | None = None  # index in the temperature order of the condition in hand
    _measured_s: float = 0.0
    _measured_points: int = 0
    _bench0_s: float | None = None
    _wall0_s: float = field(default_factory=time.monotonic)

    @property
    def point_s(self) -> float:
        """Predicted bench time of one point (the plan's average), s."""
        studies = sum(s.total_s for s in self.estimate.studies) + self.estimate.supply_s
        return studies / self.total_points if self.total_points else 0.0

    def start(self, bench_now_s: float) -> None:
        """The run's measuring starts (bench clock ``bench_now_s``)."""
        self._bench0_s = bench_now_s
        self._wall0_s = time.monotonic()

    def at_temperature(self, temperature_c: float | None) -> None:
        """The run starts going to the condition of ``temperature_c``."""
        order = [t for t, _s in self.estimate.conditions_s]
        if temperature_c is not None and temperature_c in order:
            self._position = order.index(temperature_c)

    def condition_s(self) -> float:
        """Predicted chamber travel + soak of the condition in hand, s (0 without one)."""
        if self._position is None:
            return 0.0
        return self.estimate.conditions_s[self._position][1]

    def point_measured(self, measure_s: float) -> None:
        """A point was stored after ``measure_s`` of bench time outside chamber waits."""
        self.done_points += 1
        self._measured_s += max(measure_s, 0.0)
        self._measured_points += 1

    def pace(self) -> float:
        """Measured bench time per point over the predicted (1 until a point is measured)."""
        if self._measured_points == 0 or self.point_s <= 0:
            return 1.0
        ratio = self._measured_s / self._measured_points / self.point_s
        return min(max(ratio, PACE_LIMITS[0]), PACE_LIMITS[1])

    def bench_left_s(self, *, wait_left_s: float | None = None) -> float:
        """Predicted bench time left, s. ``wait_left_s``: what is left of the wait in
        progress (its condition then counts as under way, not as still to come)."""
        points = max(self.total_points - self.done_points, 0) * self.point_s * self.pace()
        conditions = self.estimate.conditions_s
        future = conditions if self._position is None else conditions[self._position + 1:]
        left = points + sum(s for _t, s in future)
        if wait_left_s is not None:
            left += max(wait_left_s, 0.0)
        return left

    def wall_per_bench(self, bench_now_s: float) -> float:
        """Wall seconds per bench second so far (1 until both have moved)."""
        if self._bench0_s is None:
            return 1.0
        bench = bench_now_s - self._bench0_s
        wall = time.monotonic() - self._wall0_s
        if bench <= 1.0:
            return 1.0
        return wall / bench

    def fields(self, bench_now_s: float, *, wait_left_s: float | None = None
               ) -> dict[str, float]:
        """``eta_s`` (bench seconds left) and ``eta_wall_s`` (wall seconds left)."""
        left = self.bench_left_s(wait_left_s=wait_left_s)
        return {"eta_s": left, "eta_wall_s": left * self.wall_per_bench(bench_now_s)}


def eta_text(seconds: float) -> str:
    """``1:05:00`` for a time left, s (rounded up, so it never shows 0:00:00 early)."""
    whole = math.ceil(max(seconds, 0.0))
    hours, rest = divmod(whole, 3600)
    minutes, secs = divmod(rest, 60)
    return f"{hours}:{minutes:02d}:{secs:02d}"
