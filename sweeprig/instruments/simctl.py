"""Simulation-control driver (role ``simctl``, simulated bench only): simulated time."""

from __future__ import annotations

from sweeprig.instruments.driver import Driver


class SimControlDriver(Driver):
    """The simulated bench's clock, for a client in another process."""

    kind = "simctl"

    def time_s(self) -> float:
        """Simulated time, s."""
        return float(self.ask("time"))

    def advance(self, seconds: float) -> None:
        """Let ``seconds`` of simulated time pass."""
        self.do("advance", seconds)

    def mode(self) -> str:
        """``VIRT`` (virtual time) or ``REAL``."""
        return str(self.ask("mode"))
