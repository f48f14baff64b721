"""Farrowmere Instruments FR-SG8 (sim): the second source family (roles ``rf``, ``rf2``, ``lo``).

The TW-SG6's simulated source (:mod:`sweeprig.sim.instruments.source`) behind the command set
of docs/instruments.md ("Signal source, second family"), written before its profile
(drivers/fr-sg8.toml). What differs, each a form a real synthesiser can have:

* headers without the optional ``:CW`` and ``:IMMediate`` nodes (SCPI-99 vol. 1, 6.2.1:
  optional nodes are the instrument's choice; from memory);
* settings applied late: every change is an overlapped command (IEEE 488.2-1992, 12.5.1:
  a pending operation that ``*OPC``, ``*OPC?`` and ``*WAI`` wait for; from memory). The
  query answers the new value at once; the output, which the simulated world reads, keeps
  the old one until the operation ends. While it runs, the OPERation condition's bit 1
  (SCPI-99 SETTling) is set;
* the reference-unlocked flag in the questionable register's instrument-defined bit 9
  (SCPI-99 leaves bits 9 to 13 to the instrument), not bit 5;
* its unleveled flag where the first family has it, the standard POWer bit 3 (its profile
  takes no compound messages: the engine asks it in a message of its own after each point);
* its own crystal is off (see :data:`CRYSTAL_PPM`) and it powers on on it.

The times are invented figures of this fictional source.
"""

from __future__ import annotations

from typing import Any

from sweeprig.sim.instruments.reference import QUES_FREQUENCY
from sweeprig.sim.instruments.source import SignalSource

MAKER = "Farrowmere Instruments"
MODEL = "FR-SG8"
#: SCPI-99 OPERation status, SETTling bit (bit 1; from memory).
OPER_SETTLING = 1 << 1
#: Instrument-defined questionable bit of this family: the reference is not locked.
QUES_UNLOCKED_FR = 1 << 9
#: Time a new setting takes to reach the output, s (invented).
APPLY_S = {"freq_hz": 0.040, "power_dbm": 0.015, "output_on": 0.010}
#: Its own crystal's error by role when the description gives none, ppm (invented).
CRYSTAL_PPM = {"rf": 0.8, "rf2": -0.6, "lo": 1.2}


class FarrowmereSource(SignalSource):
    """The FR-SG8 (sim): the TW-SG6 with the command set and timing of the module docstring.
    Constructed as :class:`~sweeprig.sim.instruments.source.SignalSource`."""

    maker = MAKER
    model = MODEL
    frequency_header = "[SOURce]:FREQuency[:FIXed]"
    power_header = "[SOURce]:POWer[:LEVel][:AMPLitude]"

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        #: setting name → [(time from which it holds at the output s, value), ...]
        self._applied: dict[str, list[tuple[float, Any]]] = {}
        super().__init__(*args, **kwargs)
        self.on_reset()

    def on_reset(self) -> None:
        super().on_reset()
        known = self.settings()
        self._applied = {name: [(float("-inf"), self.value(name))] for name in APPLY_S
                         if name in known}

    def _settle(self, _value: object) -> None:
        """A new setting: an overlapped operation; the output follows when it ends."""
        now = self.clock.now()
        for name, delay in APPLY_S.items():
            history = self._applied.get(name)
            if history is None:
                continue
            value = self.value(name)
            if value != history[-1][1]:
                end = self.start_operation(delay, operation_bit=OPER_SETTLING)
                held = self._entry_at(history, now)  # what the output has now
                history[:] = [held, *(h for h in history if h[0] > now), (end, value)]

    @staticmethod
    def _entry_at(history: list[tuple[float, Any]], t_s: float) -> tuple[float, Any]:
        held = history[0]
        for entry in history:
            if entry[0] <= t_s:
                held = entry
        return held

    def _at_output(self, name: str) -> Any:
        return self._entry_at(self._applied[name], self.clock.now())[1]

    @property
    def freq_hz(self) -> float:
        """CW frequency at the output (the last setting that has been applied), Hz."""
        return float(self._at_output("freq_hz"))

    @property
    def power_dbm(self) -> float:
        """Level at the output (the last setting that has been applied), dBm."""
        return float(self._at_output("power_dbm"))

    @property
    def output_on(self) -> bool:
        return bool(self._at_output("output_on"))

    def questionable_condition(self) -> int:
        unlocked = QUES_UNLOCKED_FR if self.reference.questionable_bits() & QUES_FREQUENCY else 0
        return unlocked | self.unleveled_bits()  # its unleveled flag: the standard bit 3
