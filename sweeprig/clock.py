"""Clocks: wall time for real benches, virtual time for the simulated bench.

Every time-consuming step (settling, sweeps, chamber soaks) goes through a clock, so a
simulated overnight run takes seconds of wall time while still reporting the hours it
would take on real hardware. Times are in seconds.
"""

from __future__ import annotations

import threading
import time
from typing import Protocol


class Clock(Protocol):
    """What the engine and the simulated instruments need of time."""

    def now(self) -> float:
        """Seconds since an arbitrary, fixed origin (monotonic)."""
        ...

    def sleep(self, seconds: float) -> None:
        """Let ``seconds`` pass."""
        ...


class WallClock:
    """Real time: ``time.monotonic`` and ``time.sleep``."""

    def now(self) -> float:
        return time.monotonic()

    def sleep(self, seconds: float) -> None:
        if seconds > 0:
            time.sleep(seconds)


class VirtualClock:
    """Simulated time that advances only when something waits on it.

    ``sleep`` returns at once and moves ``now`` forward. With ``realtime_factor > 0`` it also
    sleeps ``seconds * realtime_factor`` of wall time (1.0 = real time), for demos that should
    feel like a real bench. Thread-safe: the simulated instruments share one clock.
    """

    def __init__(self, start_s: float = 0.0, *, realtime_factor: float = 0.0) -> None:
        self._now = float(start_s)
        self._lock = threading.Lock()
        self.realtime_factor = realtime_factor

    def now(self) -> float:
        with self._lock:
            return self._now

    def sleep(self, seconds: float) -> None:
        if seconds <= 0:
            return
        if self.realtime_factor > 0:
            time.sleep(seconds * self.realtime_factor)
        with self._lock:
            self._now += seconds

    def advance_to(self, t_s: float) -> None:
        """Move time forward to ``t_s`` (never backwards)."""
        with self._lock:
            self._now = max(self._now, t_s)
