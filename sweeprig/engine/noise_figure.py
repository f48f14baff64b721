"""Noise-figure readings by the Y-factor method on an open bench.

The noise source sits at the DUT RF input plane and is switched by its drive supply (role
``nsdc``, the bench file's ``[noise_source]``) or, with ``drive = "sa"``, by the analyzer's own
noise-source output (the profile's ``noise_source`` operation); either is read back after
each switch. For each point the analyzer reads the noise power at the part's output, source
hot and source cold, with settings chosen for noise:

* the power (RMS) detector when the profile has one (``detector`` operation), trace averaging
  in power; else the marker's noise function when the profile offers it (``noise_marker``:
  dBm/Hz around the IF, times the filter's noise bandwidth); otherwise the log-detected
  trace, whose mean in dB is corrected by the log-averaging bias 10·γ/ln 10 = 2.51 dB
  (:data:`sweeprig.engine.noise_floor.LOG_AVERAGE_BIAS_DB`);
* a stated RBW (default 3 MHz) over a span of 10 RBWs around the IF, so the trace also shows
  an interferer in the noise band;
* a stated number of averages (default 20): the mean power then scatters by
  1/sqrt(ENBW·T·averages) (the time-bandwidth rule, common practice, no source), about 0.4 %
  with a 1 ms sweep at 3 MHz;
* the input attenuation the planner chose (:mod:`sweeprig.plan.noise_setup`: low enough that
  the analyzer's own noise does not dominate, high enough not to compress; 0 dB when used
  without a plan); the hot reading is repeated with 10 dB more attenuation to see whether
  the hot source compresses the analyzer (an input-referred hot−cold difference that changes
  with attenuation is not linear).

The system calibration (:meth:`NoiseBench.system_calibration`) fits the calibration thru in the
part's place (the noise source then feeds the receive path straight) and reads hot and cold at
every IF (and attenuation) the study uses, once per run; the cold temperature is the measured
ambient (the chamber probe, idle, before any conditioning) unless the bench states one.

Caution: the drive is 28 V DC on the noise source; the safe state switches its supply (or the
analyzer's noise-source output) off at the end of a run and on any failure, and reads it back
(:mod:`sweeprig.engine.safe`).
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from dataclasses import dataclass

import numpy as np

from sweeprig.analysis.noise_figure import HotCold
from sweeprig.clock import Clock
from sweeprig.engine.connect import BenchDrivers
from sweeprig.engine.noise_floor import LOG_AVERAGE_BIAS_DB
from sweeprig.errors import InputError, InstrumentError
from sweeprig.formats.bench import Bench
from sweeprig.plan.noise_setup import SWITCH_SETTLE_S, NoiseSettings

__all__ = [
    "GAUSSIAN_ENBW_PER_RBW",
    "SWITCH_SETTLE_S",
    "NoiseBench",
    "NoisePoint",
    "NoisePower",
    "NoiseSettings",
]

ZERO_C_K = 273.15
#: Noise bandwidth of a Gaussian RBW filter per RBW: the integral of 2^-(2·df/RBW)² is
#: RBW·sqrt(π/(4·ln 2)) = 1.0645·RBW (derived; analyzers' filters are close to Gaussian).
GAUSSIAN_ENBW_PER_RBW = math.sqrt(math.pi / (4.0 * math.log(2.0)))
#: The drive must read back within this of its setting, V (else the source is not hot).
DRIVE_TOLERANCE_V = 0.5
#: Sweep time below which an analyzer does not go, s (the simulated one's floor).
MIN_SWEEP_S = 1e-3


@dataclass(frozen=True)
class NoisePower:
    """One noise reading: mean power in the span (mW at the analyzer input, as displayed),
    its relative standard deviation, the trace's highest point over its median (dB) and one
    point's standard deviation (dB), the analyzer's overload flag, and whether the analyzer
    flagged the sweep uncalibrated (False where its profile cannot tell)."""

    power_mw: float
    jitter_rel: float
    peak_excess_db: float
    point_sigma_db: float
    overload: bool
    uncalibrated: bool = False


@dataclass(frozen=True)
class NoisePoint:
    """The hot/cold readings of one point at the part's output (input-referred powers at the
    analyzer), and the compression check: the hot−cold difference's change (dB) with more
    attenuation and its jitter (dB); None when not checked. ``overload`` and
    ``uncalibrated``: the analyzer said so of any of the point's sweeps (the compression
    check's too)."""

    hot: NoisePower
    cold: NoisePower
    compression_step_db: float | None
    compression_jitter_db: float
    overload: bool = False
    uncalibrated: bool = False


class NoiseBench:
    """The noise source and the analyzer of an open bench, for Y-factor readings."""

    def __init__(self, bench: Bench, drivers: BenchDrivers, clock: Clock,
                 settings: NoiseSettings | None = None) -> None:
        if bench.noise_source is None or bench.enr_table is None:
            raise InputError("noise-figure readings need a noise source", where="bench",
                             fix="add [noise_source] (and roles.nsdc) to the bench file")
        drive = bench.noise_drive_role
        if drivers.sa is None or (drive == "nsdc" and drivers.nsdc is None):
            raise InputError("noise-figure readings need the roles sa and nsdc (or an "
                             "analyzer driving the noise source itself)", where="bench",
                             fix='add roles.sa and roles.nsdc, or [noise_source] drive = "sa"')
        if drive == "sa" and not drivers.sa.profile.has("noise_source"):
            raise InputError("the analyzer's profile has no noise_source operation, but the "
                             "bench drives the noise source from it",
                             where=bench.where(("roles", "sa")),
                             fix='use a profile with one (e.g. "scpi-analyzer-ns")')
        self.drive = drive
        self.bench = bench
        self.d = drivers
        self.clock = clock
        self.settings = settings or NoiseSettings()
        self.spec = bench.noise_source
        self.enr = bench.enr_table
        self._hot: bool | None = None
        self.cold_k: float | None = None
        self.cold_measured = True
        self.calibration: dict[float, HotCold] = {}
        #: Per IF of :attr:`calibration`: (overloaded, uncalibrated) as the analyzer said of
        #: any of the calibration's sweeps (every figure it corrects carries them).
        self.calibration_flags: dict[float, tuple[bool, bool]] = {}

    # -- the source -----------------------------------------------------------------------
    def source(self, hot: bool) -> None:
        """Switch the noise source hot (drive on) or cold (drive off), read back.

        Skipped when the source is known to be in that state already: known means switched
        and read back since the last :meth:`forget_state`; while a switch is under way (or
        failed part-way) the state is unknown, so the next call always commands it."""
        if self._hot is hot:
            return
        self._hot = None  # unknown until read back: a command may have run without its reply
        if self.drive == "sa":
            self._analyzer_output(hot)
            self._hot = hot
            return
        ns = self.d.nsdc
        assert ns is not None
        if hot:
            ns.set_current_limit(self.spec.current_limit)
            ns.set_voltage(self.spec.drive_voltage)
        # always sent: the driver's memo of the output may be as stale as ours (an "off"
        # lost on the way is remembered as sent)
        ns.set_value("output", hot, force=True)
        ns.check_errors()
        self.clock.sleep(SWITCH_SETTLE_S)
        volts = ns.measure_voltage_v()
        if hot and abs(volts - self.spec.drive_voltage) > DRIVE_TOLERANCE_V:
            ns.set_output(False)
            raise InstrumentError(
                f"the noise source's drive reads {volts:g} V, not {self.spec.drive_voltage:g} V"
                " (in current limit or not connected): the source is not hot",
                where=f"role 'nsdc' ({ns.resource})")
        if not hot and volts > DRIVE_TOLERANCE_V:
            raise InstrumentError(f"the noise source's drive still reads {volts:g} V after "
                                  "switching off", where=f"role 'nsdc' ({ns.resource})")
        self._hot = hot

    def _analyzer_output(self, hot: bool) -> None:
        """The analyzer's own noise-source output switched and read back."""
        sa = self.d.sa
        assert sa is not None
        sa.set_value("noise_source", hot, force=True)
        sa.check_errors()
        self.clock.sleep(SWITCH_SETTLE_S)
        state = sa.read_back("noise_source")
        if state is not hot:
            if hot:
                sa.set_value("noise_source", False, force=True)
            raise InstrumentError(
                f"the analyzer's noise-source output reads {'ON' if state else 'off'} after "
                f"switching it {'on' if hot else 'off'}: the source is not "
                f"{'hot' if hot else 'cold'}", where=f"role 'sa' ({sa.resource})")

    def forget_state(self) -> None:
        """Forget the source's state (after a recovery: an instrument may have been reset,
        or a command run whose reply was lost): the next :meth:`source` commands it and
        reads it back whatever it was last."""
        self._hot = None

    def off(self) -> None:
        """The drive off (idempotent in effect; always sent). Not read back here, so the
        source's state stays unknown: the next :meth:`source` commands it and reads it back
        (a lost "off" must never let a cold reading be taken with the source hot)."""
        self._hot = None
        if self.drive == "sa":
            sa = self.d.sa
            if sa is not None:
                sa.set_value("noise_source", False, force=True)
        ns = self.d.nsdc
        if ns is not None:
            ns.set_value("output", False, force=True)

    # -- one reading ----------------------------------------------------------------------
    def read(self, freq_hz: float, attenuation_db: float | None = None) -> NoisePower:
        """The noise power around ``freq_hz`` (see the module docstring)."""
        sa = self.d.sa
        assert sa is not None
        s = self.settings
        att = s.attenuation_db if attenuation_db is None else attenuation_db
        rms = sa.profile.has("detector")
        marker = not rms and sa.profile.has("noise_marker")
        if rms:
            sa.set_value("detector", "rms")
        sa.configure(centre_hz=freq_hz, span_hz=s.span_rbw * s.rbw_hz, rbw_hz=s.rbw_hz,
                     ref_level_dbm=-30.0 + att, attenuation_db=att, averages=s.averages,
                     points=s.points if sa.profile.has("points") else None)
        sa.check_errors()
        sa.sweep()
        trace = sa.trace()
        # the sweep's own flags, read before anything else is sent: an overloaded input or
        # an uncalibrated sweep (too fast for its RBW, the trace above the reference level)
        # gives a noise power that is wrong by an unknown amount
        overload, uncalibrated = sa.sweep_flags()
        if rms:
            sa.set_value("detector", "sample")
        points_mw = 10.0 ** (trace / 10.0)
        if rms:
            mean_mw = float(np.mean(points_mw))
        elif marker:  # the marker's noise function: dBm/Hz, times the filter's noise bandwidth
            density = float(sa.ask("noise_marker", freq_hz))
            mean_mw = 10.0 ** (density / 10.0) * GAUSSIAN_ENBW_PER_RBW * s.rbw_hz
        else:  # log-detected: the mean in dB sits 2.51 dB under the power
            mean_mw = 10.0 ** ((float(np.mean(trace)) + LOG_AVERAGE_BIAS_DB) / 10.0)
        sweep_s = max(MIN_SWEEP_S, sa.sweep_time_s() if sa.profile.has("sweep_time")
                      else MIN_SWEEP_S)
        time_bandwidth = GAUSSIAN_ENBW_PER_RBW * s.rbw_hz * sweep_s * max(1, s.averages)
        # the scatter of the mean of the points it averages (a noise marker: those within one
        # RBW of it, the common window; common practice, no source)
        used = points_mw
        if marker and trace.size > 1:
            offsets = np.linspace(-0.5, 0.5, trace.size) * s.span_rbw * s.rbw_hz
            used = points_mw[np.abs(offsets) <= s.rbw_hz]
        observed = float(np.std(used) / (np.mean(used) if marker else mean_mw)
                         / math.sqrt(used.size))
        jitter = max(1.0 / math.sqrt(time_bandwidth), observed)
        median = float(np.median(trace))
        # one point's scatter, robust to a line in the span: 1.4826·MAD estimates σ for
        # normally distributed points (standard result)
        sigma = 1.4826 * float(np.median(np.abs(trace - median)))
        return NoisePower(mean_mw, jitter, float(np.max(trace)) - median, sigma, overload,
                          bool(uncalibrated))

    def hot_cold(self, freq_hz: float, *, check_compression: bool) -> NoisePoint:
        """Cold then hot readings at ``freq_hz``; with ``check_compression`` also both with
        more attenuation, to compare the input-referred hot−cold differences."""
        self.source(False)
        cold = self.read(freq_hz)
        self.source(True)
        hot = self.read(freq_hz)
        step, step_jitter = None, 0.0
        read = [hot, cold]
        extra = self.settings.compression_check_db
        if check_compression and extra > 0:
            att = self.settings.attenuation_db + extra
            hot2 = self.read(freq_hz, att)
            self.source(False)
            cold2 = self.read(freq_hz, att)
            read += [hot2, cold2]
            d1, d2 = hot.power_mw - cold.power_mw, hot2.power_mw - cold2.power_mw
            if d1 > 0 and d2 > 0:
                step = 10.0 * math.log10(d2 / d1)
                rel = math.hypot(hot.jitter_rel * hot.power_mw, cold.jitter_rel * cold.power_mw,
                                 hot2.jitter_rel * hot2.power_mw,
                                 cold2.jitter_rel * cold2.power_mw)
                step_jitter = 10.0 * math.log10(1.0 + rel / min(d1, d2))
        self.source(False)
        return NoisePoint(hot, cold, step, step_jitter,
                          overload=any(r.overload for r in read),
                          uncalibrated=any(r.uncalibrated for r in read))

    # -- the system calibration -------------------------------------------------------------
    def system_calibration(self, if_freqs_hz: Iterable[float]) -> dict[float, HotCold]:
        """The receive path's hot/cold readings at every IF, the noise source straight into
        it through the calibration thru (switch route ``thru``; without one the operator must
        fit it: refused here, since the night runs unattended). Also fixes the cold
        temperature (see the module docstring)."""
        freqs = sorted({float(f) for f in if_freqs_hz})
        self.enr.check_covers(freqs, where=self.bench.where(("noise_source", "enr_file")),
                              what="the system calibration at the IF")
        self.cold_k = self.cold_temperature_k()
        switch = self.d.switch
        thru, part = self.bench.switch_route("thru"), self.bench.switch_route("part")
        if switch is None or thru is None or part is None:
            raise InputError(
                "the system calibration needs the RF switch to fit the calibration thru",
                where=self.bench.where(("roles",)),
                fix="give roles.switch channels thru and part")
        for source in self.d.sources():
            source.set_output(False)
        # from the moment the thru may be in, whatever fails puts the part back (read back
        # both ways: a calibration of the part, or readings of the thru, are silently wrong)
        try:
            switch.route(thru)
            switch.select(self.bench.switch_channel("if"))
            switch.check_errors()
            for f in freqs:
                p = self.hot_cold(f, check_compression=False)
                self.calibration[f] = HotCold(
                    p.hot.power_mw, p.cold.power_mw, max(p.hot.jitter_rel, p.cold.jitter_rel),
                    float(self.enr.enr_at(f)), float(self.enr.uncertainty_at(f)[0]))
                self.calibration_flags[f] = (p.overload, p.uncalibrated)
        finally:
            try:
                self.off()
            finally:
                switch.route(part)
        return self.calibration

    def cold_temperature_k(self) -> float:
        cold = self.spec.cold_temperature
        if cold != "ambient":
            self.cold_measured = False
            return float(cold) + ZERO_C_K
        if self.spec.room_temperature is not None:  # stated: a room thermometer's reading
            return float(self.spec.room_temperature) + ZERO_C_K
        chamber = self.d.chamber
        if chamber is not None:
            return chamber.probe_temperature_c() + ZERO_C_K
        if self.spec.room_temperature is None:
            raise InputError(
                "the cold temperature is the measured ambient, but the bench has no chamber "
                "probe to read it", where=self.bench.where(("noise_source",)),
                fix='state room_temperature = "23 degC" (or cold_temperature) in [noise_source]')
        return float(self.spec.room_temperature) + ZERO_C_K

    def part_readings(self, point: NoisePoint, rf_freq_hz: float, image_freq_hz: float,
                      image_to_signal_db: float | None = None) -> HotCold:
        """The part's HotCold for a point: the ENR weighted over the signal and image bands
        by their gains (equal when the image gain is unknown), its uncertainty the larger."""
        self.enr.check_covers([rf_freq_hz, image_freq_hz],
                              where=self.bench.where(("noise_source", "enr_file")),
                              what="the noise-figure point (signal and image bands)")
        r = 1.0 if image_to_signal_db is None else 10.0 ** (image_to_signal_db / 10.0)
        enr_s = 10.0 ** (float(self.enr.enr_at(rf_freq_hz)) / 10.0)
        enr_i = 10.0 ** (float(self.enr.enr_at(image_freq_hz)) / 10.0)
        enr = 10.0 * math.log10((enr_s + r * enr_i) / (1.0 + r))
        u = float(max(self.enr.uncertainty_at(rf_freq_hz)[0],
                      self.enr.uncertainty_at(image_freq_hz)[0]))
        return HotCold(point.hot.power_mw, point.cold.power_mw,
                       max(point.hot.jitter_rel, point.cold.jitter_rel), enr, u)
