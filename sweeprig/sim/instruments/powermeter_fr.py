"""Farrowmere Instruments FR-PM4 (sim): the second power-meter family (role ``pm``).

The TW-PM18's simulated meter and sensor (:mod:`sweeprig.sim.instruments.powermeter`) behind
the command set of docs/instruments.md ("Power meter, second family"), written before its
profile (drivers/fr-pm4.toml). What differs:

* zeroing is ``CALibration[:ZERO]:AUTO ONCE``, 4 s in the background: not one of the
  pending operations ``*OPC?``, ``*OPC`` and ``*WAI`` wait for (IEEE 488.2-1992 12.5 leaves
  to the device which commands are overlapped; from memory), so they answer at once; its end
  shows only as the OPERation condition's bit 0 (SCPI-99 CALibrating) clearing. The sensor
  counts as zeroed only from then;
* the sensor must be zeroed after power-on: until then ``MEASure?``/``FETCh?`` answer the
  SCPI-99 not-a-number 9.91E37 and queue ``-230`` (data corrupt or stale); no ``READ?``;
* the not-zeroed state in the questionable register's instrument-defined bit 9.
"""

from __future__ import annotations

from typing import Any

from sweeprig.sim.instruments.powermeter import ZERO_TIME_S, PowerMeter
from sweeprig.sim.scpi import SCPI_NAN, Command, format_number
from sweeprig.sim.scpi.errors import ScpiError

MAKER = "Farrowmere Instruments"
MODEL = "FR-PM4"
#: Instrument-defined questionable bit of this family: the sensor is not zeroed.
QUES_NOT_ZEROED_FR = 1 << 9
#: SCPI-99 OPERation status, CALibrating bit (bit 0; from memory): a zeroing is running.
OPER_CALIBRATING = 1 << 0


class FarrowmerePowerMeter(PowerMeter):
    """The FR-PM4 (sim). Constructed as :class:`~sweeprig.sim.instruments.powermeter.PowerMeter`;
    it powers on not zeroed, whatever ``zero_offset_dbm`` says."""

    maker = MAKER
    model = MODEL

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        kwargs.setdefault("serial", "PM4-40001")
        super().__init__(*args, **kwargs)
        self._zeroed = False
        self._zero_ends_s = float("inf")

    def _register_measure(self) -> None:
        self.add_command("MEASure[:SCALar][:POWer][:AC]", query=self._measure_zeroed)
        self.add_command("FETCh", query=self._measure_zeroed)
        self.add_command("CALibration[:ZERO]:AUTO", write=self._zero_auto)

    def zeroed(self) -> bool:
        """The last zeroing succeeded and has ended."""
        return self._zeroed and self.clock.now() >= self._zero_ends_s

    def _zero_auto(self, cmd: Command) -> None:
        word = str(cmd.one().text).upper()
        if word != "ONCE":
            raise ScpiError(-224, f"{cmd.header} takes ONCE")
        with self.lock:
            if self._zeroing_refused():
                return
            # in the background, not a pending operation: *OPC?, *OPC and *WAI do not wait
            self._zero_ends_s = self.clock.now() + ZERO_TIME_S
            self.status.operation_event |= OPER_CALIBRATING
            if self.zero_holds:
                self.zero_offset_mw = 0.0
            self._zeroed = True

    def _zero_state(self, cmd: Command) -> str:
        cmd.no_params()
        return "1" if self.zeroed() else "0"

    def _measure_zeroed(self, cmd: Command) -> str:
        if not self.zeroed():
            cmd.no_params()
            self.push_error(-230, "the sensor has not been zeroed since power-on (or the "
                            "zeroing has not ended): zero it with RF off, CAL:AUTO ONCE")
            return format_number(SCPI_NAN)
        return self._measure(cmd)

    def questionable_condition(self) -> int:
        return 0 if self.zeroed() else QUES_NOT_ZEROED_FR

    def operation_condition(self) -> int:
        running = self.clock.now() < self._zero_ends_s < float("inf")
        return super().operation_condition() | (OPER_CALIBRATING if running else 0)
