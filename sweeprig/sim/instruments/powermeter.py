"""Power meter — Tarnwick Labs TW-PM18 (simulated): average power at one sensor.

The world supplies ``sense()``: the true power at the sensor plane, dBm. A reading adds
zeroed-sensor noise (a seeded generator, so runs repeat) that shrinks as 1/√averages, and
what the sensor's calibration factor leaves uncorrected at the set frequency
(``cal_factor_error_db``), and advances the shared clock by the measurement time.
"""

from __future__ import annotations

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


def _no_signal() -> float:
    return -200.0


class PowerMeter(ScpiInstrument):
    """TW-PM18 power meter. Power-on: 1 GHz calibration frequency, 4 averages, dBm."""

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
    ) -> None:
        super().__init__(clock, Identity("Tarnwick Labs", "TW-PM18", serial, "1.0"))
        self.sense = sense
        self.cal_factor_error_db = float(cal_factor_error_db)
        self.relative_noise = float(relative_noise)
        self.zero_offset_mw = 0.0 if zero_offset_dbm is None else 10.0 ** (zero_offset_dbm / 10.0)
        self._rng = random.Random(seed)
        self.add_setting(Setting("freq_hz", "[SENSe]:FREQuency", "float", 1e9,
                                 unit="frequency", minimum=9e3, maximum=18e9))
        self.add_setting(Setting("average_count", "[SENSe]:AVERage:COUNt", "int", 4,
                                 minimum=1, maximum=1024))
        self.add_setting(Setting("unit", "UNIT:POWer", "enum", "DBM", choices=("DBM", "W")))
        self.add_command("MEASure[:SCALar][:POWer][:AC]", query=self._measure)
        self.add_command("READ", query=self._measure)

    def read_dbm(self) -> float:
        """One reading, dBm (clock advanced, noise drawn); NaN above the range."""
        with self.lock:
            count = int(self.value("average_count"))
            self.clock.sleep(TIME_PER_AVERAGE_S * count)
            true_dbm = float(self.sense())
            if true_dbm > RANGE_MAX_DBM:
                return math.nan
            root_n = math.sqrt(count)
            true_mw = 10.0 ** (true_dbm / 10.0)
            floor_mw = 10.0 ** (NOISE_FLOOR_DBM / 10.0)
            true_mw *= 10.0 ** (self.cal_factor_residual_db(float(self.value("freq_hz")))
                                / 10.0)
            reading_mw = (
                true_mw * (1.0 + self.relative_noise * self._rng.gauss(0.0, 1.0) / root_n)
                + floor_mw * self._rng.gauss(0.0, 1.0) / root_n
                + self.zero_offset_mw
            )
            reading_mw = max(abs(reading_mw), 0.01 * floor_mw)
            return 10.0 * math.log10(reading_mw)

    def cal_factor_residual_db(self, freq_hz: float) -> float:
        """What the sensor's calibration factor at ``freq_hz`` leaves uncorrected, dB: a
        ripple of peak ``cal_factor_error_db`` (invented shape)."""
        if not self.cal_factor_error_db:
            return 0.0
        return self.cal_factor_error_db * math.sin(2.0 * math.pi * freq_hz / 2.1e9 + 0.4)

    def _measure(self, cmd: Command) -> str:
        cmd.no_params()
        reading_dbm = self.read_dbm()
        if math.isnan(reading_dbm):
            self.push_error(
                -222,
                f"{cmd.header}? sensor above {format_number(RANGE_MAX_DBM)} dBm; "
                "caution: reduce the power at once, the sensor can be damaged",
            )
            return format_number(SCPI_NAN)
        if self.value("unit") == "W":
            return format_number(1e-3 * 10.0 ** (reading_dbm / 10.0))
        return format_number(reading_dbm)
