"""Signal source driver (roles ``rf``, ``rf2``, ``lo``): CW frequency, level, RF output."""

from __future__ import annotations

from typing import Any

from sweeprig.errors import InstrumentError, TransportError
from sweeprig.instruments.driver import Driver

#: The key of a point record's ``extra`` listing the sources (role names) found unleveled
#: by the status read after the point (the reduction flags its figures ``source_unleveled``).
UNLEVELED_SOURCES = "unleveled_sources"

#: The settings a previous user may have left on a source that make its output other than the
#: CW tone at the level and frequency sweeprig sets (read once, at connect).
LEFT_SETTING_OPS = ("power_offset", "frequency_offset", "modulation")


class SourceDriver(Driver):
    """A CW signal source. Safe state: RF output off."""

    kind = "source"
    #: Asked with its status read after every point: its output's level state, its
    #: reference's lock (:attr:`~sweeprig.instruments.driver.Driver.status_seen`; one query
    #: where both read one register, as SCPI-99's questionable condition holds both) and its
    #: output protection.
    status_companions = ("unleveled", "reference_unlocked", "output_tripped")

    def left_settings(self) -> tuple[list[str], list[tuple[str, dict[str, Any]]]]:
        """What a previous user left set that makes its output other than the CW tone at the
        level and frequency sweeprig sets (:data:`LEFT_SETTING_OPS` its profile can ask):
        a text for each one found set, and a note (with its details) for each query the
        instrument refused, which is then left unchecked."""
        found: list[str] = []
        notes: list[tuple[str, dict[str, Any]]] = []
        for name in LEFT_SETTING_OPS:
            if not self.plain_query(name):
                continue
            query = self.profile.op(name).queries[0]
            try:
                value = self.ask(name)
                refused = "; ".join(str(e) for e in self.errors())
            except (InstrumentError, TransportError) as exc:
                value, refused = None, str(exc).splitlines()[0]
            if refused:
                notes.append((f"role {self.role!r}: {query} failed at connect ({refused}), so "
                              f"its {name.replace('_', ' ')} is not checked; give it a profile "
                              f"without ops.{name} to silence this",
                              {"role": self.role, "query": query, "left_out": [name]}))
            elif name == "modulation" and value:
                found.append(f"modulation is on ({query} answered {value!r}): switch it off "
                             "at the instrument (OUTP:MOD:STAT OFF)")
            elif name != "modulation" and float(value) != 0.0:
                unit = "dB" if name == "power_offset" else "Hz"
                found.append(f"a {name.replace('_', ' ')} of {float(value):g} {unit} is set "
                             f"({query}): its output is that far from what sweeprig sets; "
                             f"set it to 0 at the instrument, and calibrate again if the "
                             "calibration was made with it set")
        return found, notes

    def set_frequency(self, freq_hz: float) -> bool:
        """Set the CW frequency, Hz. Returns True if a command was sent."""
        return self.set_value("frequency", freq_hz)

    def set_power(self, power_dbm: float) -> bool:
        """Set the output level, dBm (checked against the power limit before sending)."""
        return self.set_value("power", power_dbm)

    def set_output(self, on: bool) -> bool:
        """Switch the RF output on or off."""
        return self.set_value("output", on)

    def query_frequency_hz(self) -> float:
        """Read back the CW frequency, Hz."""
        return float(self.read_back("frequency"))

    def query_power_dbm(self) -> float:
        """Read back the output level, dBm."""
        return float(self.read_back("power"))

    def query_output(self) -> bool:
        """Read back the RF output state."""
        return bool(self.read_back("output"))

    def safe(self) -> None:
        """RF output off (always sent, whatever the cache says)."""
        self.set_value("output", False, force=True)
