"""DC power supply — Tarnwick Labs TW-PS30 (simulated): one output, CV/CC.

The world supplies ``load(volts) -> amps``: the current the DUT draws at a terminal voltage
(assumed non-decreasing in the voltage). With the output on, the supply holds the set
voltage while the load draws less than the current limit (constant voltage); otherwise it
holds the current at the limit and the voltage drops to where the load draws exactly that
(constant current, found by bisection).
"""

from __future__ import annotations

from collections.abc import Callable

from sweeprig.clock import Clock
from sweeprig.sim.instruments.protection import ProtectedOutputInstrument
from sweeprig.sim.scpi import Command, Identity, Setting, format_number

VOLTAGE_MAX_V = 30.0
CURRENT_MAX_A = 3.0
#: Power-on current limit, A: low, on the safe side.
CURRENT_DEFAULT_A = 0.1
QUES_CURRENT_LIMIT = 1 << 1
_BISECTION_STEPS = 40


def _open_circuit(_volts: float) -> float:
    return 0.0


class DcSupply(ProtectedOutputInstrument):
    """TW-PS30 supply. Power-on: 0 V, 0.1 A limit, output OFF."""

    def __init__(
        self,
        clock: Clock,
        serial: str = "PS30-30001",
        *,
        load: Callable[[float], float] = _open_circuit,
    ) -> None:
        super().__init__(clock, Identity("Tarnwick Labs", "TW-PS30", serial, "1.0"))
        self.load = load
        self.add_setting(Setting(
            "voltage_v", "[SOURce]:VOLTage[:LEVel][:IMMediate][:AMPLitude]", "float", 0.0,
            unit="voltage", minimum=0.0, maximum=VOLTAGE_MAX_V,
            caution="caution: check the DUT's maximum supply voltage",
        ))
        self.add_setting(Setting(
            "current_limit_a", "[SOURce]:CURRent[:LEVel][:IMMediate][:AMPLitude]", "float",
            CURRENT_DEFAULT_A, unit="current", minimum=0.0, maximum=CURRENT_MAX_A,
        ))
        # its output, behind its over-voltage/over-current protection (tripped only by a
        # planted fault)
        self._add_protected_output()
        self.add_command("MEASure[:SCALar]:VOLTage[:DC]", query=self._measure_voltage)
        self.add_command("MEASure[:SCALar]:CURRent[:DC]", query=self._measure_current)

    def operating_point(self) -> tuple[float, float, bool]:
        """(terminal voltage V, current A, in current limit) right now.

        Takes no instrument lock: the world may call it while holding its own lock.
        """
        if not self.value("output_on"):
            return 0.0, 0.0, False
        set_v = float(self.value("voltage_v"))
        limit_a = float(self.value("current_limit_a"))
        drawn_a = float(self.load(set_v))
        if drawn_a <= limit_a:
            return set_v, drawn_a, False
        low_v, high_v = 0.0, set_v
        if float(self.load(0.0)) >= limit_a:
            return 0.0, limit_a, True
        for _ in range(_BISECTION_STEPS):
            mid_v = 0.5 * (low_v + high_v)
            if float(self.load(mid_v)) > limit_a:
                high_v = mid_v
            else:
                low_v = mid_v
        return low_v, limit_a, True

    @property
    def output_on(self) -> bool:
        return bool(self.value("output_on"))

    @property
    def output_voltage_v(self) -> float:
        """Actual terminal voltage, V (0 with the output off; below the setting in CC)."""
        return self.operating_point()[0]

    @property
    def output_current_a(self) -> float:
        """Actual output current, A."""
        return self.operating_point()[1]

    def questionable_condition(self) -> int:
        return QUES_CURRENT_LIMIT if self.operating_point()[2] else 0

    def _measure_voltage(self, cmd: Command) -> str:
        cmd.no_params()
        return format_number(self.operating_point()[0])

    def _measure_current(self, cmd: Command) -> str:
        cmd.no_params()
        return format_number(self.operating_point()[1])
