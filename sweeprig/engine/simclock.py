"""Following the simulated bench's clock from another process.

When the engine runs against a simulated bench served by ``sweeprig sim serve`` (a bench
file naming a ``simctl`` role), waiting — settling, chamber soaks — must pass in the
simulator's time, not on the wall clock, or a soak of ten minutes would take ten minutes.
"""

from __future__ import annotations

from sweeprig.instruments import SimControlDriver


class SimControlClock:
    """A :class:`sweeprig.clock.Clock` backed by the simulator's control instrument.

    ``now()`` reads the simulated time, s; ``sleep(s)`` advances it by ``s`` without waiting.
    """

    def __init__(self, control: SimControlDriver) -> None:
        self.control = control

    def now(self) -> float:
        return self.control.time_s()

    def sleep(self, seconds: float) -> None:
        if seconds > 0:
            self.control.advance(seconds)
