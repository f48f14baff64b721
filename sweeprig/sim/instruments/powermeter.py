"""Power meter — Tarnwick Labs TW-PM18 (simulated): average power at one sensor.

The world supplies ``sense()``: the true power at the sensor plane, dBm. The sensor indicates
only the fraction K (its calibration factor, :data:`SENSOR_CAL_FACTOR`) of that power, as a
real sensor does; the meter leaves K to the software (its own factor stays at 100 %), so a
reading is low by ``10·log10(K/100)`` until the bench file's ``[sensor] cal_factor`` table
corrects it. ``cal_factor_error_db`` is what that table leaves uncorrected (a ripple). A
reading adds zeroed-sensor noise (a seeded generator, so runs repeat) that shrinks as
1/√averages and the offset of a sensor not zeroed, and advances the shared clock by the
measurement time. ``CALibration:ZERO`` zeroes the sensor (refused with a signal at it);
``CALibration:ZERO:STATe?`` reads back whether the last zeroing succeeded.
"""

from __future__ import annotations

import itertools
import math
import random
from collections.abc import Callable

from sweeprig.clock import Clock
from sweeprig.sim.scpi import SCPI_NAN, Command, Identity, ScpiInstrument, Setting, format_number

RANGE_MIN_DBM = -60.0
RANGE_MAX_DBM = 20.0
#: Noise of the zeroed sensor (one average), dBm-equivalent standard deviation (invented).
NOISE_FLOOR_DBM = -75.0
#: Relative reading noise (one average), fraction of the power (invented).
RELATIVE_NOISE = 0.002
#: Measurement time per average, s (invented).
TIME_PER_AVERAGE_S = 0.005


#: The simulated sensor's calibration factor, (frequency Hz, per cent): invented, the shape of
#: a diode sensor's falling response. The shipped simulated bench file carries the same table.
SENSOR_CAL_FACTOR: tuple[tuple[float, float], ...] = (
    (100e3, 99.8), (1e6, 99.7), (10e6, 99.6), (100e6, 99.3), (500e6, 98.8), (1e9, 98.2),
    (2e9, 97.0), (3e9, 96.1),
    (4e9, 95.4), (6e9, 94.3), (8e9, 93.5), (12e9, 92.2), (18e9, 90.4),
)
#: Time the sensor takes to zero, s (invented).
ZERO_TIME_S = 4.0
#: Zeroing is refused when more than this reaches the sensor, dBm (invented).
ZERO_REFUSED_ABOVE_DBM = -55.0


def sensor_cal_factor_percent(freq_hz: float) -> float:
    """The simulated sensor's calibration factor at ``freq_hz``, per cent (linear
    interpolation of :data:`SENSOR_CAL_FACTOR`, held flat outside it)."""
    if freq_hz <= SENSOR_CAL_FACTOR[0][0]:
        return SENSOR_CAL_FACTOR[0][1]
    for (f0, k0), (f1, k1) in itertools.pairwise(SENSOR_CAL_FACTOR):
        if freq_hz <= f1:
            return k0 + (k1 - k0) * (freq_hz - f0) / (f1 - f0)
    return SENSOR_CAL_FACTOR[-1][1]


def _no_signal() -> float:
    return -200.0


#: The suffix of the display offset's node (SENSe:CORRection:GAIN2): the index its settings'
#: values are kept under.
DISPLAY_OFFSET_INDEX = 2

class PowerMeter(ScpiInstrument):
    """TW-PM18 power meter. Power-on: 1 GHz calibration frequency, 4 averages, dBm.

    A subclass serving another command set names its own ``maker`` and ``model`` and
    overrides :meth:`_register_measure`."""

    maker = "Tarnwick Labs"
    model = "TW-PM18"

    def __init__(
        self,
        clock: Clock,
        serial: str = "PM18-20001",
        *,
        sense: Callable[[], float] = _no_signal,
        seed: int = 0,
        cal_factor_error_db: float = 0.0,
        relative_noise: float = RELATIVE_NOISE,
        zero_offset_dbm: float | None = None,
        zero_holds: bool = True,
        range_max_dbm: float = RANGE_MAX_DBM,
    ) -> None:
        super().__init__(clock, Identity(self.maker, self.model, serial, "1.0"))
        self.sense = sense
        self.cal_factor_error_db = float(cal_factor_error_db)
        self.relative_noise = float(relative_noise)
        self.zero_offset_mw = 0.0 if zero_offset_dbm is None else 10.0 ** (zero_offset_dbm / 10.0)
        self.zero_holds = bool(zero_holds)
        self.range_max_dbm = float(range_max_dbm)
        self.zeroings = 0
        self._zeroed = zero_offset_dbm is None
        self._rng = random.Random(seed)
        self.add_setting(Setting("freq_hz", "[SENSe]:FREQuency", "float", 1e9,
                                 unit="frequency", minimum=9e3, maximum=18e9))
        self.add_setting(Setting("average_count", "[SENSe]:AVERage:COUNt", "int", 4,
                                 minimum=1, maximum=1024))
        self.add_setting(Setting("unit", "UNIT:POWer", "enum", "DBM", choices=("DBM", "W")))
        # A display offset (SCPI-99's SENSe:CORRection:GAIN2, from memory): while on, added
        # to every reading; power-on and *RST: off, 0 dB (values kept under
        # DISPLAY_OFFSET_INDEX, the node's numeric suffix).
        self.add_setting(Setting("offset_db",
                                 "[SENSe]:CORRection:GAIN[2-2][:INPut][:MAGNitude]", "float",
                                 0.0, minimum=-100.0, maximum=100.0))
        self.add_setting(Setting("offset_on", "[SENSe]:CORRection:GAIN[2-2]:STATe", "bool",
                                 False))
        # A duty-cycle correction (SCPI-99's SENSe:CORRection:DCYCle, from memory): while on,
        # every reading is the pulse power of a signal of that duty cycle, the average power
        # raised by 10·log10(100 / duty) (a rectangular pulse train's pulse power from its
        # average: standard result); power-on and *RST: off, 1 %. What an earlier user left
        # set of either is planted by the simulated bench (sweeprig.sim.bench).
        self.add_setting(Setting("duty_cycle_percent", "[SENSe]:CORRection:DCYCle[:INPut]",
                                 "float", 1.0, minimum=0.001, maximum=100.0))
        self.add_setting(Setting("duty_cycle_on", "[SENSe]:CORRection:DCYCle:STATe", "bool",
                                 False))
        self._register_measure()
        self.add_command("CALibration:ZERO:STATe", query=self._zero_state)

    def _register_measure(self) -> None:
        """The reading and zeroing commands of this family."""
        self.add_command("MEASure[:SCALar][:POWer][:AC]", query=self._measure)
        self.add_command("READ", query=self._measure)
        self.add_command("CALibration:ZERO[:IMMediate]", write=self._zero)

    def read_dbm(self) -> float:
        """One reading, dBm (clock advanced, noise drawn); NaN above the range."""
        with self.lock:
            count = int(self.value("average_count"))
            self.clock.sleep(TIME_PER_AVERAGE_S * count)
            true_dbm = float(self.sense())
            if true_dbm > self.range_max_dbm:
                return math.nan
            root_n = math.sqrt(count)
            true_mw = 10.0 ** (true_dbm / 10.0)
            floor_mw = 10.0 ** (NOISE_FLOOR_DBM / 10.0)
            freq = float(self.value("freq_hz"))
            true_mw *= (sensor_cal_factor_percent(freq) / 100.0
                        * 10.0 ** (self.cal_factor_residual_db(freq) / 10.0))
            reading_mw = (
                true_mw * (1.0 + self.relative_noise * self._rng.gauss(0.0, 1.0) / root_n)
                + floor_mw * self._rng.gauss(0.0, 1.0) / root_n
                + self.zero_offset_mw
            )
            reading_mw = max(abs(reading_mw), 0.01 * floor_mw)
            offset = (float(self.value("offset_db", DISPLAY_OFFSET_INDEX))
                      if self.value("offset_on", DISPLAY_OFFSET_INDEX) else 0.0)
            if self.value("duty_cycle_on"):
                offset += 10.0 * math.log10(100.0 / float(self.value("duty_cycle_percent")))
            return 10.0 * math.log10(reading_mw) + offset

    def cal_factor_residual_db(self, freq_hz: float) -> float:
        """What the sensor's calibration factor at ``freq_hz`` leaves uncorrected, dB: a
        ripple of peak ``cal_factor_error_db`` (invented shape)."""
        if not self.cal_factor_error_db:
            return 0.0
        return self.cal_factor_error_db * math.sin(2.0 * math.pi * freq_hz / 2.1e9 + 0.4)

    def _zero(self, cmd: Command) -> None:
        """Zero the sensor: refused (error −200, state 0) with a signal at it; a sensor whose
        zeroing does not take (``zero_holds`` false) keeps its offset and reports success."""
        cmd.no_params()
        self.zero_sensor()

    def _zeroing_refused(self) -> bool:
        """Count a zeroing; refuse it (an error in the queue, the sensor not zeroed) when a
        signal reaches the sensor. Call with the lock held."""
        self.zeroings += 1
        if float(self.sense()) <= ZERO_REFUSED_ABOVE_DBM:
            return False
        self._zeroed = False
        self.push_error(-200, "zeroing refused: a signal reaches the sensor; switch every RF "
                        "output off and zero again")
        return True

    def zero_sensor(self) -> None:
        """Zero the sensor now (see :meth:`_zero`); the clock advances by the zeroing time."""
        with self.lock:
            self.clock.sleep(ZERO_TIME_S)
            if self._zeroing_refused():
                return
            if self.zero_holds:
                self.zero_offset_mw = 0.0
            self._zeroed = True

    def _zero_state(self, cmd: Command) -> str:
        cmd.no_params()
        return "1" if self._zeroed else "0"

    def _measure(self, cmd: Command) -> str:
        cmd.no_params()
        reading_dbm = self.read_dbm()
        if math.isnan(reading_dbm):
            self.push_error(
                -222,
                f"{cmd.header}? sensor above {format_number(self.range_max_dbm)} dBm; "
                "caution: reduce the power at once, the sensor can be damaged",
            )
            return format_number(SCPI_NAN)
        if self.value("unit") == "W":
            return format_number(1e-3 * 10.0 ** (reading_dbm / 10.0))
        return format_number(reading_dbm)
