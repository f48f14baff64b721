"""Simulation control — Tarnwick Labs TW-SIMCTL (simulation only): the shared clock as SCPI.

Lets a client in another process read and advance the simulated time.
"""

from __future__ import annotations

from sweeprig.clock import Clock, VirtualClock
from sweeprig.sim.scpi import Command, Identity, ScpiError, ScpiInstrument, format_number

#: Longest single advance, s (one week), a guard against a typo stalling a real-time clock.
MAX_ADVANCE_S = 7 * 24 * 3600.0


class SimControl(ScpiInstrument):
    """TW-SIMCTL: ``SIMulation:TIME?``, ``SIMulation:TIME:ADVance <s>``, ``SIMulation:MODE?``."""

    def __init__(self, clock: Clock, serial: str = "SIMCTL-1") -> None:
        super().__init__(clock, Identity("Tarnwick Labs", "TW-SIMCTL", serial, "1.0"))
        self.add_command("SIMulation:TIME", query=self._time)
        self.add_command("SIMulation:TIME:ADVance", write=self._advance)
        self.add_command("SIMulation:MODE", query=self._mode)

    @property
    def mode(self) -> str:
        """``VIRT`` for a virtual clock, ``REAL`` for wall time."""
        return "VIRT" if isinstance(self.clock, VirtualClock) else "REAL"

    def _time(self, cmd: Command) -> str:
        cmd.no_params()
        return format_number(self.clock.now())

    def _advance(self, cmd: Command) -> None:
        seconds = cmd.one().to_float("time", where=cmd.header)
        if not 0.0 <= seconds <= MAX_ADVANCE_S:
            raise ScpiError(-222, f"{cmd.header} {cmd.params[0].text} outside 0..604800 s")
        self.clock.sleep(seconds)

    def _mode(self, cmd: Command) -> str:
        cmd.no_params()
        return self.mode
