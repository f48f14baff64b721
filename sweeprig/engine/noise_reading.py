"""The runner's noise_figure reading: the Y-factor readings of one point, stored raw.

The runner hands each ``noise_figure`` reading here (:meth:`NoiseReader.read`). The first
reading at an IF and input attenuation runs the system calibration there (the thru in the
part's place, once per run; the attenuation is the planner's,
:mod:`sweeprig.plan.noise_setup`); the cold temperature was read when the run was set up,
before any conditioning (:mod:`sweeprig.engine.noise_figure`). The RF sources are off while
the noise is read (the noise source alone drives the part's input) and back on afterwards.
What is stored, in the reading's ``extra``: the hot and cold powers of the part and of the
calibration (mW at the analyzer input), their jitters, the ENRs and their uncertainties, the
cold temperature, the compression check and the interferer check, and what the analyzer
said of the point's sweeps and of the calibration's (overloaded, uncalibrated); the analysis
(:mod:`sweeprig.analysis.noise_load`) reduces them to the figure.
"""

from __future__ import annotations

import math

from sweeprig.analysis.noise_figure import HotCold
from sweeprig.clock import Clock
from sweeprig.engine.connect import BenchDrivers
from sweeprig.engine.noise_figure import NoiseBench, NoiseSettings
from sweeprig.engine.runner import ANALYZER_UNCALIBRATED
from sweeprig.formats.bench import Bench
from sweeprig.plan.expand import Point
from sweeprig.plan.readings import Reading
from sweeprig.store.base import ReadingRecord


class NoiseReader:
    """Noise-figure readings for one run (built when the run is set up)."""

    def __init__(self, bench: Bench, drivers: BenchDrivers, clock: Clock) -> None:
        self.nb = NoiseBench(bench, drivers, clock)
        self.d = drivers
        self.nb.cold_k = self.nb.cold_temperature_k()  # now: before any conditioning
        self.nb.off()
        self._calibrations: dict[tuple[float, float], HotCold] = {}
        self._calibration_flags: dict[tuple[float, float], tuple[bool, bool]] = {}

    def forget_state(self) -> None:
        """After a recovery: the noise source's state is unknown (see
        :meth:`NoiseBench.forget_state`); the system calibrations taken stay (they were
        completed and read back before the fault)."""
        self.nb.forget_state()

    def read(self, point: Point, reading: Reading) -> ReadingRecord:
        assert reading.freq_hz is not None
        if_hz = float(reading.freq_hz)
        nb = self.nb
        nb.settings = reading.noise if reading.noise is not None else NoiseSettings()
        # the receive path's noise depends on the input attenuation: one system calibration
        # per IF and attenuation, at the settings of the readings it corrects
        key = (if_hz, nb.settings.attenuation_db)
        if key not in self._calibrations:
            cold_k = nb.cold_k
            nb.calibration.pop(if_hz, None)
            nb.system_calibration([if_hz])
            self._calibrations[key] = nb.calibration[if_hz]
            self._calibration_flags[key] = nb.calibration_flags[if_hz]
            nb.cold_k = cold_k  # the ambient of the set-up, not the chamber's air now
            lo = self.d.lo
            if lo is not None:
                lo.set_output(True)
                lo.check_errors()
        rf_on = [s for s in (self.d.rf, self.d.rf2) if s is not None and s.set_output(False)]
        for source in rf_on:
            source.check_errors()
        image_hz = abs(2.0 * point.lo_freq_hz - point.rf_freq_hz)
        nb.enr.check_covers([point.rf_freq_hz, image_hz],
                            where=nb.bench.where(("noise_source", "enr_file")),
                            what=f"point {point.index} (signal and image bands)")
        got = nb.hot_cold(if_hz, check_compression=True)
        for source in rf_on:
            source.set_output(True)
            source.check_errors()
        cal = self._calibrations[key]
        cal_overload, cal_uncalibrated = self._calibration_flags[key]
        enr = nb.enr
        hot, cold = got.hot, got.cold
        return ReadingRecord(
            name=reading.name, kind=reading.kind, port="if", freq_hz=if_hz,
            level_dbm=10.0 * math.log10(cold.power_mw), span_hz=nb.settings.span_rbw
            * nb.settings.rbw_hz, rbw_hz=nb.settings.rbw_hz,
            attenuation_db=nb.settings.attenuation_db, averages=nb.settings.averages,
            overload=got.overload,
            extra={
                "noise": {
                    "hot_mw": hot.power_mw, "cold_mw": cold.power_mw,
                    "jitter_rel": max(hot.jitter_rel, cold.jitter_rel),
                    "rf_hz": point.rf_freq_hz, "image_hz": image_hz,
                    "enr_rf_db": float(enr.enr_at(point.rf_freq_hz)),
                    "enr_image_db": float(enr.enr_at(image_hz)),
                    "enr_u_db": float(max(enr.uncertainty_at(point.rf_freq_hz)[0],
                                          enr.uncertainty_at(image_hz)[0])),
                    "cal_hot_mw": cal.hot_mw, "cal_cold_mw": cal.cold_mw,
                    "cal_jitter_rel": cal.jitter_rel, "cal_enr_db": cal.enr_db,
                    "cal_enr_u_db": cal.enr_u_db, "cold_k": nb.cold_k,
                    "cold_measured": nb.cold_measured,
                    "compression_step_db": got.compression_step_db,
                    "compression_jitter_db": got.compression_jitter_db,
                    "peak_excess_db": max(hot.peak_excess_db, cold.peak_excess_db),
                    "point_sigma_db": max(hot.point_sigma_db, cold.point_sigma_db),
                    "enr_serial": enr.serial,
                    # the analyzer's own word on its sweeps: the point's (any of them) and
                    # the system calibration's that corrects it
                    "uncalibrated": got.uncalibrated,
                    "cal_overload": cal_overload,
                    "cal_uncalibrated": cal_uncalibrated,
                },
                **({"status_flags": [ANALYZER_UNCALIBRATED]} if got.uncalibrated else {}),
            },
        )
