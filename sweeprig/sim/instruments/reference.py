"""A simulated instrument's 10 MHz reference: its own crystal, or what its reference input gets.

SCPI-99's ``ROSCillator:SOURce INTernal|EXTernal`` (from memory: the reference oscillator
node, under SOURce for a source and SENSe for an analyzer) selects it. On ``EXTernal`` the
instrument runs on whatever its reference input is cabled to (the sim-bench description's
``[references] ref_in``); with nothing cabled there it stays on its crystal and reports the
reference unlocked in the SCPI-99 questionable status' FREQuency bit (bit 5, from memory).
Every frequency the instrument makes (or measures) is then off by that reference's error:
``f·(1 + ppm·1e-6)``.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

from sweeprig.sim.scpi import ScpiInstrument, Setting

#: SCPI-99 QUEStionable status, FREQuency bit (bit 5): the reference is not locked.
QUES_FREQUENCY = 1 << 5
#: The choices of the reference selection (SCPI-99 mnemonics).
CHOICES = ("INTernal", "EXTernal")


@dataclass
class ReferenceOscillator:
    """``crystal_ppm``: the instrument's own crystal error; ``ref_in``: the error of what its
    reference input receives, ppm (None: nothing cabled there)."""

    crystal_ppm: float = 0.0
    ref_in: Callable[[], float | None] = lambda: None
    #: True once its reference input has lost its signal (a planted ``unlock`` fault).
    input_lost: bool = False

    def install(self, instrument: ScpiInstrument, pattern: str) -> None:
        """Serve ``<pattern> INT|EXT`` and its query on ``instrument`` (power-on: INTernal)."""
        self._instrument = instrument
        instrument.add_setting(Setting("reference", pattern, "enum", "INTernal",
                                       choices=CHOICES))

    def external(self) -> bool:
        return str(self._instrument.value("reference")).upper().startswith("EXT")

    def unlocked(self) -> bool:
        """Set to external with nothing at the reference input."""
        return self.external() and self._given() is None

    def lose_input(self) -> None:
        """The reference input loses its signal for good: set to external, the instrument
        runs on its crystal from now on and reports its reference unlocked."""
        self.input_lost = True

    def error_ppm(self) -> float:
        """The error of the reference the instrument runs on now, ppm."""
        if self.external():
            given = self._given()
            if given is not None:
                return given
        return self.crystal_ppm

    def _given(self) -> float | None:
        return None if self.input_lost else self.ref_in()

    def questionable_bits(self) -> int:
        return QUES_FREQUENCY if self.unlocked() else 0
