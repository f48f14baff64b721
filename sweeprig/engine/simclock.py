"""Following the simulated bench's clock from another process.

When the engine runs against a simulated bench served by ``sweeprig sim serve`` (a bench
file naming a ``simctl`` role), waiting — settling, chamber soaks — must pass in the
simulator's time, not on the wall clock, or a soak of ten minutes would take ten minutes.
"""

from __future__ import annotations

from collections.abc import Callable

from sweeprig.instruments import SimControlDriver


class SimControlClock:
    """A :class:`sweeprig.clock.Clock` backed by the simulator's control instrument.

    ``now()`` reads the simulated time, s; ``sleep(s)`` advances it by ``s`` without waiting.

    ``traffic``: the number of messages sent so far to the bench's instruments (this one's
    included), when the caller can count them. On a simulator in virtual time
    (``SIMulation:MODE?`` answers ``VIRT``, asked once, at the first read: nothing is sent
    before the bench is identified and locked) the time moves only with its instruments'
    work and with the engine's advances, and both are messages: while the count
    has not moved since the last read, ``now()`` gives that read's answer without asking
    again (a point's start is then its predecessor's end, exactly; one exchange fewer a
    point). A simulator serving in real time (``sweeprig sim serve --realtime``) moves between
    messages too, and so does one whose profile cannot say: every ``now()`` asks it. (Another
    client of the same served bench would move it unseen; a run holds the bench's lock.)
    """

    def __init__(self, control: SimControlDriver,
                 traffic: Callable[[], int] | None = None) -> None:
        self.control = control
        self._traffic = traffic
        self._virtual: bool | None = None  # asked at the first read (nothing is sent here)
        self._last: tuple[float, int] | None = None  # (the last read, traffic after it)

    def now(self) -> float:
        if self._traffic is not None and self._virtual is None:
            self._virtual = self.control.profile.has("mode") and self.control.mode() == "VIRT"
        if self._traffic is None or not self._virtual:
            return self.control.time_s()
        if self._last is not None and self._traffic() == self._last[1]:
            return self._last[0]
        time_s = self.control.time_s()
        self._last = (time_s, self._traffic())
        return time_s

    def sleep(self, seconds: float) -> None:
        if seconds > 0:
            self.control.advance(seconds)
