"""Simulation control — Tarnwick Labs TW-SIMCTL (simulation only): the shared clock as SCPI.

Lets a client in another process read and advance the simulated time, and ask the simulator
what is truly at a port (:mod:`sweeprig.sim.truth`) for the present instrument states.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence

from sweeprig.clock import Clock, VirtualClock
from sweeprig.sim.scpi import Command, Identity, ScpiError, ScpiInstrument, format_number

#: Longest single advance, s (one week), a guard against a typo stalling a real-time clock.
MAX_ADVANCE_S = 7 * 24 * 3600.0


class SimControl(ScpiInstrument):
    """TW-SIMCTL: ``SIMulation:TIME?``, ``SIMulation:TIME:ADVance <s>``, ``SIMulation:MODE?``,
    and (when the bench gives the hooks) ``SIMulation:TRUTh:LINE? <port>,<freq>`` and
    ``SIMulation:TRUTh:NOISe? <port>,<freq>``.

    ``truth_line(port, freq_hz)``: (total, part, source harmonic, leakage, analyzer) dBm of
    the line within 1 Hz, or None; ``truth_noise(port, freq_hz)``: (total, DANL, input,
    reciprocal mixing) dBm. Ports: ``IF``, ``RF``, ``LO``.
    """

    def __init__(
        self,
        clock: Clock,
        serial: str = "SIMCTL-1",
        *,
        truth_line: Callable[[str, float], Sequence[float] | None] | None = None,
        truth_noise: Callable[[str, float], Sequence[float]] | None = None,
    ) -> None:
        super().__init__(clock, Identity("Tarnwick Labs", "TW-SIMCTL", serial, "1.0"))
        self.truth_line = truth_line
        self.truth_noise = truth_noise
        self.add_command("SIMulation:TIME", query=self._time)
        self.add_command("SIMulation:TIME:ADVance", write=self._advance)
        self.add_command("SIMulation:MODE", query=self._mode)
        self.add_command("SIMulation:TRUTh:LINE", query=self._truth_line)
        self.add_command("SIMulation:TRUTh:NOISe", query=self._truth_noise)

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

    def _port_freq(self, cmd: Command) -> tuple[str, float]:
        port_param, freq_param = cmd.expect(2, 2)
        port = port_param.text.strip().lower()
        if port not in ("if", "rf", "lo"):
            raise ScpiError(-224, f"{cmd.header}? {port_param.text} (IF, RF or LO)")
        freq = freq_param.to_float("frequency", where=cmd.header)
        return port, freq

    def _truth_line(self, cmd: Command) -> str:
        port, freq = self._port_freq(cmd)
        if self.truth_line is None:
            raise ScpiError(-200, "no simulated world behind this controller")
        values = self.truth_line(port, freq)
        if values is None:
            values = (float("-inf"),) * 5
        return ",".join(format_number(round(v, 6) if v == v and abs(v) != float("inf")
                                      else v) for v in values)

    def _truth_noise(self, cmd: Command) -> str:
        port, freq = self._port_freq(cmd)
        if self.truth_noise is None:
            raise ScpiError(-200, "no simulated world behind this controller")
        return ",".join(format_number(round(v, 6) if abs(v) != float("inf") else v)
                        for v in self.truth_noise(port, freq))
