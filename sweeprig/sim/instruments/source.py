"""Signal source — Tarnwick Labs TW-SG6 (simulated): CW tone, level, RF output switch.

Roles ``rf``, ``rf2``, ``lo``. The world reads the read-only views ``freq_hz``,
``power_dbm`` (the setting), ``delivered_power_dbm`` (setting plus the source's level error
at the set frequency, dBm, whether or not the output is on), ``output_on`` and
``harmonics_dbc`` (levels of the 2nd, 3rd, … harmonics relative to the carrier, dBc) and
``spurious`` (non-harmonic lines as (offset from the carrier Hz, level dBc)).

A source given a ``leveled_max_dbm`` (a planted fault: an output amplifier short of
headroom) delivers at most that; asked for more with its output on, it reports itself
unleveled in its questionable status register's POWer bit (bit 3,
``STATus:QUEStionable:CONDition?``; SCPI-99 Volume 2's questionable register, from memory).

What a previous user can leave set (power-on and ``*RST``: none of it), as SCPI-99 defines
them (from memory, not checked against the text): a level offset (``[SOURce]:POWer:OFFSet``:
the level set and shown is the output's plus the offset, so the output is the setting minus
it), a frequency offset (``[SOURce]:FREQuency:OFFSet``, likewise) and modulation
(``OUTPut:MODulation[:STATe]``: only its state is kept; the tone stays a CW tone here).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence

from sweeprig.clock import Clock
from sweeprig.sim.instruments.protection import ProtectedOutputInstrument
from sweeprig.sim.instruments.reference import ReferenceOscillator
from sweeprig.sim.scpi import Identity, Setting

FREQ_MIN_HZ = 9e3
FREQ_MAX_HZ = 6e9
POWER_MIN_DBM = -130.0
POWER_MAX_DBM = 20.0
#: Power-on level: low, on the safe side (the output is off anyway).
POWER_DEFAULT_DBM = -30.0
FREQ_DEFAULT_HZ = 1e9
#: Settling after a frequency or level change, s (invented figure of the simulated source).
SETTLE_S = 0.002
#: The questionable register's POWer bit (bit 3): set while the output is not leveled.
QUES_POWER = 1 << 3


def default_level_error_db(freq_hz: float) -> float:
    """The simulated bench's source level error versus frequency, dB (invented ripple).

    A smooth ripple of two sine terms, always within ±0.15 dB.
    """
    return 0.10 * math.sin(2.0 * math.pi * freq_hz / 1.3e9) + 0.05 * math.sin(
        2.0 * math.pi * freq_hz / 0.37e9 + 0.7
    )


#: Peak of :func:`default_level_error_db`, dB.
DEFAULT_RIPPLE_DB = 0.15


def scaled_level_error(peak_db: float) -> Callable[[float], float]:
    """The shape of :func:`default_level_error_db` scaled to ``peak_db`` (dB)."""
    if peak_db == DEFAULT_RIPPLE_DB:
        return default_level_error_db
    scale = peak_db / DEFAULT_RIPPLE_DB
    return lambda freq_hz: scale * default_level_error_db(freq_hz)


def linearity_error_db(power_dbm: float, peak_db: float) -> float:
    """The source's level error versus its level setting, dB: ``peak_db·tanh((−10 − P)/15)``,
    0 at a −10 dBm setting, approaching +``peak_db`` far below it (the output attenuator's
    error) and −``peak_db`` far above it (the output amplifier short of its level): an
    invented shape."""
    return peak_db * math.tanh((-10.0 - power_dbm) / 15.0) if peak_db else 0.0


def nominal_power_dbm(power_dbm: float, freq_hz: float,
                      level_error_db: Callable[[float], float], linearity_peak_db: float
                      ) -> float:
    """The level a source set to ``power_dbm`` at ``freq_hz`` would put out leveled, dBm:
    the setting plus its level error versus frequency and versus level."""
    return (power_dbm + float(level_error_db(freq_hz))
            + linearity_error_db(power_dbm, linearity_peak_db))


def no_level_error_db(freq_hz: float) -> float:
    """A perfect source: 0 dB level error at every frequency."""
    return 0.0


class SignalSource(ProtectedOutputInstrument):
    """TW-SG6 CW signal source. Power-on: 1 GHz, −30 dBm, output OFF.

    A subclass serving another command set (another family) names its own ``maker``,
    ``model`` and headers (the class attributes below)."""

    maker = "Tarnwick Labs"
    model = "TW-SG6"
    frequency_header = "[SOURce]:FREQuency[:CW|:FIXed]"
    power_header = "[SOURce]:POWer[:LEVel][:IMMediate][:AMPLitude]"

    def __init__(
        self,
        clock: Clock,
        serial: str = "SG6-10001",
        *,
        level_error_db: Callable[[float], float] = default_level_error_db,
        harmonics_dbc: Sequence[float] = (-35.0, -45.0),
        spurious: Sequence[tuple[float, float]] = (),
        level_linearity_db: float = 0.0,
        reference: ReferenceOscillator | None = None,
        leveled_max_dbm: float | None = None,
    ) -> None:
        super().__init__(clock, Identity(self.maker, self.model, serial, "1.0"))
        self.reference = reference or ReferenceOscillator()
        self.reference.install(self, "[SOURce]:ROSCillator:SOURce")
        self.level_error_db = level_error_db
        self.level_linearity_db = float(level_linearity_db)
        self.leveled_max_dbm = math.inf if leveled_max_dbm is None else float(leveled_max_dbm)
        self._harmonics_dbc = tuple(float(h) for h in harmonics_dbc)
        self._spurious = tuple((float(o), float(d)) for o, d in spurious)
        self.add_setting(Setting(
            "freq_hz", self.frequency_header, "float", FREQ_DEFAULT_HZ,
            unit="frequency", minimum=FREQ_MIN_HZ, maximum=FREQ_MAX_HZ, on_change=self._settle,
        ))
        self.add_setting(Setting(
            "power_dbm", self.power_header, "float",
            POWER_DEFAULT_DBM, unit="power", minimum=POWER_MIN_DBM, maximum=POWER_MAX_DBM,
            on_change=self._settle,
            caution="caution: check the DUT's maximum input level before raising it",
        ))
        # its output, behind its reverse-power protection (tripped only by a planted fault)
        self._add_protected_output(self._settle)
        self.add_setting(Setting("power_offset_db", "[SOURce]:POWer[:LEVel][:IMMediate]:OFFSet",
                                 "float", 0.0, minimum=-100.0, maximum=100.0,
                                 on_change=self._settle))
        self.add_setting(Setting("freq_offset_hz", "[SOURce]:FREQuency:OFFSet", "float", 0.0,
                                 unit="frequency", minimum=-FREQ_MAX_HZ, maximum=FREQ_MAX_HZ,
                                 on_change=self._settle))
        self.add_setting(Setting("modulation_on", "OUTPut:MODulation[:STATe]", "bool", False))

    def _settle(self, _value: object) -> None:
        self.start_operation(SETTLE_S)

    @property
    def freq_hz(self) -> float:
        """CW frequency setting, Hz."""
        return float(self.value("freq_hz"))

    @property
    def output_freq_hz(self) -> float:
        """Frequency actually at the output, Hz: the setting less its frequency offset, moved
        by the error of the reference the source runs on
        (:mod:`sweeprig.sim.instruments.reference`)."""
        return self._set_freq_hz() * (1.0 + 1e-6 * self.reference.error_ppm())

    def _set_freq_hz(self) -> float:
        """The frequency it makes before its reference's error: the setting less its
        frequency offset, Hz."""
        offset = float(self.value("freq_offset_hz"))
        return self.freq_hz - offset if offset else self.freq_hz

    def questionable_condition(self) -> int:
        return self.reference.questionable_bits() | self.unleveled_bits()

    def unleveled_bits(self) -> int:
        """:data:`QUES_POWER` while the output is on and asked for more than it can
        deliver leveled, else 0."""
        return QUES_POWER if self.output_on and self.unleveled else 0

    @property
    def unleveled(self) -> bool:
        """True when the setting asks for more than :attr:`leveled_max_dbm` at the output."""
        return self._nominal_power_dbm() > self.leveled_max_dbm

    @property
    def power_dbm(self) -> float:
        """Level setting, dBm."""
        return float(self.value("power_dbm"))

    @property
    def delivered_power_dbm(self) -> float:
        """Level actually delivered at the output connector, dBm (setting + level error
        versus frequency + level error versus level), at most :attr:`leveled_max_dbm`."""
        return min(self._nominal_power_dbm(), self.leveled_max_dbm)

    def _nominal_power_dbm(self) -> float:
        offset = float(self.value("power_offset_db"))
        level = self.power_dbm - offset if offset else self.power_dbm
        return nominal_power_dbm(level, self._set_freq_hz(), self.level_error_db,
                                 self.level_linearity_db)

    @property
    def output_on(self) -> bool:
        return bool(self.value("output_on"))

    @property
    def harmonics_dbc(self) -> tuple[float, ...]:
        """Harmonic levels relative to the carrier, dBc: (2nd, 3rd, …)."""
        return self._harmonics_dbc

    @property
    def spurious(self) -> tuple[tuple[float, float], ...]:
        """Non-harmonic spurious lines: (offset from the carrier Hz, level dBc)."""
        return self._spurious
