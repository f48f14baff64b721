"""A simulated output's protection: tripped, it switches its own output off and keeps it off.

A supply's over-voltage or over-current protection, or a generator's reverse-power
protection, trips on something outside the instrument (a part drawing too much, power fed
back into the generator's output): the output goes off and stays off until the protection is
cleared. SCPI-99 (from memory, not checked against the text): ``OUTPut:PROTection:TRIPped?``
answers 1 while tripped, ``OUTPut:PROTection:CLEar`` clears it (the output stays off until
switched on again). Switching the output on while tripped is refused here (error −221,
settings conflict), as the instruments this imitates do. ``*RST`` does not clear it; a power
cycle does.

On the simulated bench only a planted ``trip`` fault (:mod:`sweeprig.sim.faults`) trips it.
"""

from __future__ import annotations

from collections.abc import Callable

from sweeprig.sim.scpi import Command, ScpiError, ScpiInstrument, Setting


class OutputProtection:
    """The protection of an instrument's one output, whose on/off setting is ``setting``."""

    def __init__(self, setting: str = "output_on") -> None:
        self.setting = setting
        #: True from a trip until the protection is cleared (or the power cycled).
        self.tripped = False

    def install(self, instrument: ScpiInstrument) -> None:
        """Serve the trip query and the clear command on ``instrument``."""
        self._instrument = instrument
        instrument.add_command("OUTPut:PROTection:TRIPped", query=self._query)
        instrument.add_command("OUTPut:PROTection:CLEar", write=self._clear)

    def guard(self, then: Callable[[object], None] | None = None) -> Callable[[object], None]:
        """The output setting's ``on_change``: switching it on while tripped is refused (the
        output stays off); otherwise ``then`` runs."""

        def on_change(value: object) -> None:
            if value and self.tripped:
                self._instrument.put_value(self.setting, False)
                raise ScpiError(-221, "output protection tripped; clear it first")
            if then is not None:
                then(value)

        return on_change

    def trip(self) -> None:
        """The protection trips: the output goes off and stays off."""
        self.tripped = True
        self._instrument.put_value(self.setting, False)

    def power_cycled(self) -> None:
        """A power cycle clears it."""
        self.tripped = False

    def _query(self, cmd: Command) -> str:
        cmd.no_params()
        return "1" if self.tripped else "0"

    def _clear(self, cmd: Command) -> None:
        cmd.no_params()
        self.tripped = False


class ProtectedOutputInstrument(ScpiInstrument):
    """An instrument with one output (``OUTPut[:STATe]``, setting ``output_on``) behind an
    :class:`OutputProtection`: a planted ``trip`` fault trips it, a power cycle clears it."""

    protection: OutputProtection

    def _add_protected_output(self, then: Callable[[object], None] | None = None) -> None:
        """Register the output's on/off setting (power-on: off), guarded by its protection;
        ``then``: the setting's own ``on_change``."""
        self.protection = OutputProtection()
        self.protection.install(self)
        self.add_setting(Setting("output_on", "OUTPut[:STATe]", "bool", False,
                                 on_change=self.protection.guard(then)))

    def reset_to_power_on(self) -> None:
        super().reset_to_power_on()
        self.protection.power_cycled()

    def trip_protection(self) -> None:
        """Its protection trips (:meth:`OutputProtection.trip`)."""
        self.protection.trip()
