"""Tarnwick Labs TW-SA13 (sim): the simulated swept spectrum analyzer (role ``sa``).

The SCPI command set is fixed by docs/instruments.md. The display itself is computed by
:mod:`sweeprig.sim.analyzer_display`; this module holds the settings, the couplings between
them (RBW to span, attenuation to reference level), the sweep as a pending operation on the
shared clock, the markers and the trace transfer. It gets its input from a callable given at
construction, so it knows nothing about the rest of the simulated bench.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any, ClassVar

import numpy as np

from sweeprig.clock import Clock
from sweeprig.sim.analyzer_display import (
    GAUSSIAN_ENBW_PER_RBW,
    LOG_DETECTOR_BIAS_DB,
    AnalyzerParams,
    InputSpectrum,
    SweepResult,
    SweepSettings,
    simulate_sweep,
    sweep_time_s,
    total_sweep_time_s,
)
from sweeprig.sim.instruments.reference import ReferenceOscillator
from sweeprig.sim.scpi import (
    OPER_SWEEPING,
    Command,
    Identity,
    ScpiError,
    ScpiInstrument,
    Setting,
    format_number,
)

MAKER = "Tarnwick Labs"
MODEL = "TW-SA13"
FREQ_MIN_HZ = 0.0
CENTER_MIN_HZ = 9e3
FREQ_MAX_HZ = 13.6e9
RBW_MIN_HZ = 1.0
RBW_MAX_HZ = 10e6
ATT_MAX_DB = 70.0
ATT_STEP_DB = 2.0
POINTS_MIN, POINTS_MAX, POINTS_DEFAULT = 101, 10001, 1001
#: The settings a sweep's :class:`SweepSettings` is made of (a change to one of them makes
#: it again).
_SWEEP_SETTINGS = frozenset(("start_hz", "stop_hz", "points", "rbw_hz", "vbw_hz", "att_db",
                             "ref_level_dbm", "ref_offset_db", "avg_on", "avg_count",
                             "detector"))
AVERAGES_MAX = 10000
MARKERS = 4
# RBW coupled to span: span/RBW = 100 (common practice, no source).
SPAN_PER_RBW = 100.0
# Auto attenuation: a signal at the reference level reaches the first mixer at -10 dBm, and
# never less than 10 dB of attenuation (common practice, no source).
AUTO_ATT_MIXER_DBM = -10.0
AUTO_ATT_MIN_DB = 10.0

QUES_OVERLOAD = 1 << 3
QUES_UNCALIBRATED = 1 << 8  # SCPI-99 QUEStionable CALibration bit

_RBW_STEPS_HZ = tuple(m * 10.0**k for k in range(8) for m in (1.0, 3.0) if m * 10.0**k <= 1e7)


def round_rbw_up(rbw_hz: float) -> float:
    """The next RBW of the 1-3-10 sequence at or above ``rbw_hz`` (1 Hz to 10 MHz)."""
    for step in _RBW_STEPS_HZ:
        if step >= rbw_hz * (1.0 - 1e-9):
            return step
    return _RBW_STEPS_HZ[-1]


def round_attenuation(att_db: float) -> float:
    """Attenuation rounded to the 2 dB step, 0 to 70 dB."""
    return min(max(ATT_STEP_DB * round(att_db / ATT_STEP_DB), 0.0), ATT_MAX_DB)


def encode_real32_block(values: np.ndarray, *, big_endian: bool = True) -> bytes:
    """IEEE 488.2 definite-length arbitrary block ``#<n><length><bytes>`` of 32-bit floats."""
    data = np.asarray(values, dtype=">f4" if big_endian else "<f4").tobytes()
    length = str(len(data))
    return b"#" + str(len(length)).encode("ascii") + length.encode("ascii") + data


@dataclass(frozen=True)
class AnalyzerDialect:
    """The headers and spellings where the simulated analyzer families differ (each a legal
    SCPI-99 form); the receiver behind them is the same. The default is the TW-SA13's."""

    bandwidth: str = "[SENSe]:BANDwidth|BWIDth"
    attenuation: str = "INPut:ATTenuation"
    marker_x: str = "CALCulate:MARKer[1-4]:X"
    marker_peak: str = "CALCulate:MARKer[1-4]:MAXimum[:PEAK]"
    marker_y: str = "CALCulate:MARKer[1-4]:Y"
    marker_density: str = "CALCulate:MARKer[1-4]:DENSity"
    #: The power (RMS) detector's name beside ``SAMPle``.
    power_detector: str = "RMS"
    noise_output: str = "OUTPut:NOISe[:STATe]"
    format_default: str = "ASCii"
    #: Whether ``FORMat:BORDer`` exists (else binary traces keep one byte order).
    byte_order: bool = True
    trace: str = "TRACe[:DATA]"
    #: Its sweep time over the receiver's k·span/RBW² (a slower sweep: more settling per
    #: frequency step); ``SWEep:TIME?`` answers it, so a controller that asks waits right.
    sweep_time_scale: float = 1.0


class SpectrumAnalyzer(ScpiInstrument):
    """The TW-SA13 (sim).

    ``input_spectrum``: called at each sweep; returns what arrives at the input connector.
    ``params``: the analyzer's own noise figure, intercepts, compression and overload.
    ``seed``: seeds the noise of the traces (same seed and commands → same traces).
    A subclass serving another command set (another family) names its own ``maker`` and
    ``model`` and overrides :meth:`_register`.
    """

    maker = MAKER
    model = MODEL
    dialect: ClassVar[AnalyzerDialect] = AnalyzerDialect()
    default_serial = "SA13-0001"

    def __init__(
        self,
        clock: Clock,
        input_spectrum: Callable[[], InputSpectrum],
        *,
        params: AnalyzerParams | None = None,
        seed: int = 1,
        serial: str | None = None,
        reference: ReferenceOscillator | None = None,
    ) -> None:
        super().__init__(clock, Identity(self.maker, self.model, serial or self.default_serial,
                                         "1.0"))
        self.reference = reference or ReferenceOscillator()
        self.input_spectrum = input_spectrum
        self.params = params or AnalyzerParams()
        self.rng = np.random.default_rng(seed)
        self._last: SweepResult | None = None
        self._last_settings: SweepSettings | None = None
        self._last_time_s = -math.inf
        self._vbw_coupled = True
        #: the sweep settings of the present settings (None: to be made again)
        self._settings_now: SweepSettings | None = None
        self._register()
        self.on_reset()

    # ------------------------------------------------------------------ public views
    @property
    def noise_output_on(self) -> bool:
        """Whether its noise-source drive output is on."""
        return bool(self.value("noise_output"))

    @property
    def last_sweep(self) -> SweepResult | None:
        """The most recent sweep, or None before the first."""
        return self._last

    def put_value(self, name: str, value: object, index: int = 1) -> None:
        with self.lock:
            super().put_value(name, value, index)
            if name in _SWEEP_SETTINGS:
                self._settings_now = None

    def sweep_settings(self) -> SweepSettings:
        """The settings a sweep started now would use (made again only after one of them
        changed: a marker read asks for them at every reading)."""
        with self.lock:
            settings = self._settings_now
            if settings is None:
                settings = self._settings_now = self._make_sweep_settings()
            return settings

    def _make_sweep_settings(self) -> SweepSettings:
        averaging = bool(self.value("avg_on"))
        return SweepSettings(
            start_hz=self.value("start_hz"),
            stop_hz=self.value("stop_hz"),
            points=int(self.value("points")),
            rbw_hz=self.value("rbw_hz"),
            vbw_hz=self.value("vbw_hz"),
            attenuation_db=self.value("att_db"),
            # the reference level is set as shown: with an offset, the input's is that less
            ref_level_dbm=self.value("ref_level_dbm") - self.value("ref_offset_db")
            if self.value("ref_offset_db") else self.value("ref_level_dbm"),
            averages=int(self.value("avg_count")) if averaging else 1,
            detector=("rms" if str(self.value("detector")).upper()
                      == self.dialect.power_detector.upper() else "sample"),
        )

    def sweep_now(self) -> SweepResult:
        """Take a sweep at the present settings and input (no time passes)."""
        with self.lock:
            settings = self.sweep_settings()
            self._last = simulate_sweep(self._seen_spectrum(), settings, self.params, self.rng)
            self._last_settings = settings
            self._last_time_s = self.clock.now()
            return self._last

    def _seen_spectrum(self) -> InputSpectrum:
        """The input as this analyzer's reference shows it: a line at f reads at
        f / (1 + ppm·1e-6) (its frequencies are counted in its own reference's units)."""
        spectrum = self.input_spectrum()
        error = self.reference.error_ppm()
        if not error:
            return spectrum
        scale = 1.0 / (1.0 + 1e-6 * error)
        freq_hz, power_dbm = spectrum.line_arrays()
        return InputSpectrum.from_arrays(freq_hz * scale, power_dbm,
                                         noise_dbm_per_hz=spectrum.noise_dbm_per_hz,
                                         wideband_noise_dbm=spectrum.wideband_noise_dbm)

    def questionable_condition(self) -> int:
        bits = self.reference.questionable_bits()
        if self._last is not None:
            if self._last.overload:
                bits |= QUES_OVERLOAD
            if self._last.uncalibrated:
                bits |= QUES_UNCALIBRATED
        return bits

    def on_reset(self) -> None:
        self._settings_now = None  # every setting is back at its default
        self._last = None
        self._last_settings = None
        self._last_time_s = -math.inf
        self._vbw_coupled = True
        self._couple()

    # ------------------------------------------------------------------ registration
    def _register(self) -> None:
        add, d = self.add_setting, self.dialect
        freq = "frequency"
        add(Setting("center_hz", "[SENSe]:FREQuency:CENTer", "float",
                    default=0.5 * (CENTER_MIN_HZ + FREQ_MAX_HZ), unit=freq,
                    minimum=CENTER_MIN_HZ, maximum=FREQ_MAX_HZ, on_change=self._center_changed))
        add(Setting("span_hz", "[SENSe]:FREQuency:SPAN", "float",
                    default=FREQ_MAX_HZ - CENTER_MIN_HZ, unit=freq,
                    minimum=0.0, maximum=FREQ_MAX_HZ - FREQ_MIN_HZ, on_change=self._span_changed))
        add(Setting("start_hz", "[SENSe]:FREQuency:STARt", "float", default=CENTER_MIN_HZ,
                    unit=freq, minimum=FREQ_MIN_HZ, maximum=FREQ_MAX_HZ,
                    on_change=self._start_changed))
        add(Setting("stop_hz", "[SENSe]:FREQuency:STOP", "float", default=FREQ_MAX_HZ,
                    unit=freq, minimum=FREQ_MIN_HZ, maximum=FREQ_MAX_HZ,
                    on_change=self._stop_changed))
        add(Setting("rbw_hz", f"{d.bandwidth}[:RESolution]", "float", default=3e6,
                    unit=freq, minimum=RBW_MIN_HZ, maximum=RBW_MAX_HZ, coerce=round_rbw_up,
                    on_change=self._rbw_changed))
        add(Setting("rbw_auto", f"{d.bandwidth}[:RESolution]:AUTO", "bool",
                    default=True, on_change=lambda _v: self._couple()))
        add(Setting("vbw_hz", f"{d.bandwidth}:VIDeo", "float", default=3e6,
                    unit=freq, minimum=RBW_MIN_HZ, maximum=RBW_MAX_HZ,
                    on_change=self._vbw_changed))
        add(Setting("avg_count", "[SENSe]:AVERage:COUNt", "int", default=10,
                    minimum=1, maximum=AVERAGES_MAX))
        add(Setting("avg_on", "[SENSe]:AVERage[:STATe]", "bool", default=False))
        add(Setting("points", "[SENSe]:SWEep:POINts", "int", default=POINTS_DEFAULT,
                    minimum=POINTS_MIN, maximum=POINTS_MAX))
        add(Setting("ref_level_dbm", "DISPlay[:WINDow]:TRACe:Y[:SCALe]:RLEVel", "float",
                    default=0.0, unit="power", minimum=-170.0, maximum=30.0,
                    on_change=lambda _v: self._couple()))
        # What an earlier user can leave set (SCPI-99 names, from memory; power-on and *RST:
        # none): a reference level offset (every level shown is the input's plus it, the
        # reference level set as shown), and amplitude corrections (their state only: no
        # table is applied here).
        add(Setting("ref_offset_db", "DISPlay[:WINDow]:TRACe:Y[:SCALe]:RLEVel:OFFSet",
                    "float", default=0.0, minimum=-200.0, maximum=200.0))
        add(Setting("corrections_on", "[SENSe]:CORRection:CSET[:STATe]", "bool",
                    default=False))
        # The trace's mode (SCPI-99 DISPlay:TRACe:MODE, from memory): WRITe, each sweep
        # writes it; VIEW, it is frozen (a sweep changes nothing read from it). MAXHold and
        # MINHold are taken and kept, but sweep as WRITe here (not modelled).
        add(Setting("trace_mode", "DISPlay[:WINDow]:TRACe:MODE", "enum", default="WRITe",
                    choices=("WRITe", "VIEW", "MAXHold", "MINHold")))
        add(Setting("att_db", d.attenuation, "float", default=AUTO_ATT_MIN_DB,
                    unit="level_db", minimum=0.0, maximum=ATT_MAX_DB, coerce=round_attenuation,
                    on_change=self._att_changed))
        add(Setting("att_auto", f"{d.attenuation}:AUTO", "bool", default=True,
                    on_change=lambda _v: self._couple()))
        add(Setting("continuous", "INITiate:CONTinuous", "bool", default=True))
        add(Setting("marker_on", "CALCulate:MARKer[1-4][:STATe]", "bool", default=False))
        add(Setting("marker_x_hz", d.marker_x, "float",
                    default=0.5 * (CENTER_MIN_HZ + FREQ_MAX_HZ), unit=freq,
                    minimum=FREQ_MIN_HZ, maximum=FREQ_MAX_HZ))
        # The trace detector (SCPI-99 SENSe:DETector): SAMPle, the log envelope (log
        # averaging); RMS, the power detector for noise readings.
        add(Setting("detector", "[SENSe]:DETector[:FUNCtion]", "enum", default="SAMPle",
                    choices=("SAMPle", d.power_detector)))
        # Its own noise-source drive output (a rear-panel drive switching a noise source hot
        # for Y-factor readings; off at power-on and after *RST).
        add(Setting("noise_output", d.noise_output, "bool", default=False))
        add(Setting("format", "FORMat[:DATA]", "enum", default=d.format_default,
                    choices=("ASCii", "REAL,32")))
        if d.byte_order:
            add(Setting("byte_order", "FORMat:BORDer", "enum", default="NORMal",
                        choices=("NORMal", "SWAPped")))
        self.reference.install(self, "[SENSe]:ROSCillator:SOURce")
        self.add_command("[SENSe]:SWEep:TIME", query=self._sweep_time_query)
        self.add_command("INITiate[:IMMediate]", write=self._initiate)
        # Marker X: a write handler that also switches the marker on (registered after the
        # setting so it replaces the setting's own write handler).
        self.add_command(d.marker_x, write=self._marker_x)
        self.add_command(d.marker_peak, write=self._marker_max)
        self.add_command(d.marker_y, query=self._marker_y)
        self.add_command(d.marker_density, query=self._marker_density)
        self.add_command(d.trace, query=self._trace_query)

    # ------------------------------------------------------------------ couplings
    def _set_span(self, center_hz: float, span_hz: float) -> None:
        span = max(0.0, min(span_hz, 2.0 * (center_hz - FREQ_MIN_HZ),
                            2.0 * (FREQ_MAX_HZ - center_hz)))
        self.put_value("center_hz", center_hz)
        self.put_value("span_hz", span)
        self.put_value("start_hz", center_hz - span / 2.0)
        self.put_value("stop_hz", center_hz + span / 2.0)
        self._couple()

    def _set_edges(self, start_hz: float, stop_hz: float) -> None:
        self.put_value("start_hz", start_hz)
        self.put_value("stop_hz", stop_hz)
        self.put_value("center_hz", 0.5 * (start_hz + stop_hz))
        self.put_value("span_hz", stop_hz - start_hz)
        self._couple()

    def _center_changed(self, center_hz: float) -> None:
        self._set_span(center_hz, self.value("span_hz"))

    def _span_changed(self, span_hz: float) -> None:
        self._set_span(self.value("center_hz"), span_hz)

    def _start_changed(self, start_hz: float) -> None:
        self._set_edges(start_hz, max(start_hz, self.value("stop_hz")))

    def _stop_changed(self, stop_hz: float) -> None:
        self._set_edges(min(stop_hz, self.value("start_hz")), stop_hz)

    def _rbw_changed(self, _rbw_hz: float) -> None:
        self.put_value("rbw_auto", False)
        self._couple()

    def _vbw_changed(self, _vbw_hz: float) -> None:
        self._vbw_coupled = False

    def _att_changed(self, _att_db: float) -> None:
        self.put_value("att_auto", False)

    def _couple(self) -> None:
        """Apply the auto couplings: RBW ← span, VBW ← RBW, attenuation ← reference level."""
        span = self.value("span_hz")
        if self.value("rbw_auto") and span > 0:
            rbw = round_rbw_up(min(max(span / SPAN_PER_RBW, RBW_MIN_HZ), RBW_MAX_HZ))
            self.put_value("rbw_hz", rbw)
        if self._vbw_coupled:
            self.put_value("vbw_hz", self.value("rbw_hz"))
        if self.value("att_auto"):
            wanted = self.value("ref_level_dbm") - AUTO_ATT_MIXER_DBM
            att = ATT_STEP_DB * math.ceil(wanted / ATT_STEP_DB - 1e-9)
            self.put_value("att_db", min(max(att, AUTO_ATT_MIN_DB), ATT_MAX_DB))

    # ------------------------------------------------------------------ handlers
    def _sweep_time_query(self, cmd: Command) -> str:
        cmd.no_params()
        return format_number(self.dialect.sweep_time_scale
                             * sweep_time_s(self.sweep_settings()))

    def _initiate(self, cmd: Command) -> None:
        cmd.no_params()
        settings = self.sweep_settings()
        if not self._frozen():
            self.sweep_now()
        self.start_operation(self.dialect.sweep_time_scale * total_sweep_time_s(settings),
                             operation_bit=OPER_SWEEPING)

    def _current_sweep(self) -> SweepResult:
        """The trace to read: the last sweep. In continuous mode a fresh one when the last is
        older than a sweep time or was taken with other settings (single-sweep mode keeps the
        last trace until the next INITiate, as a real analyzer does)."""
        last = self._last
        if last is None:
            return self.sweep_now()
        if self.value("continuous") and not self._frozen():
            age = self.clock.now() - self._last_time_s
            settings = self.sweep_settings()
            if age >= self.dialect.sweep_time_scale * last.sweep_time_s or \
                    (self._last_settings is not settings and self._last_settings != settings):
                return self.sweep_now()
        return last

    def _frozen(self) -> bool:
        """Whether its trace is frozen (mode VIEW: the last sweep's, whatever is swept)."""
        return self.value("trace_mode") == "VIEW" and self._last is not None

    def _marker_x(self, cmd: Command) -> None:
        param = cmd.one()
        special = param.special()
        start, stop = self.value("start_hz"), self.value("stop_hz")
        if special == "MIN":
            x = start
        elif special == "MAX":
            x = stop
        elif special == "DEF":
            x = self.value("center_hz")
        else:
            x = param.to_float("frequency", where=cmd.header)
            if not math.isfinite(x):
                raise ScpiError(-222, f"{cmd.header} {param.text}")
        # The marker stays on the trace: clamped to the span.
        self.put_value("marker_x_hz", min(max(x, start), stop), cmd.index)
        self.put_value("marker_on", True, cmd.index)

    def _marker_max(self, cmd: Command) -> None:
        cmd.no_params()
        freq_hz, _ = self._current_sweep().peak()
        self.put_value("marker_x_hz", freq_hz, cmd.index)
        self.put_value("marker_on", True, cmd.index)

    def _marker_y(self, cmd: Command) -> str:
        cmd.no_params()
        if not self.value("marker_on", cmd.index):
            raise ScpiError(-221, f"marker {cmd.index} is off; set its X or switch it on")
        return format_number(round(self._shown(self._current_sweep().level_at(
            self.value("marker_x_hz", cmd.index))), 6))

    def _marker_density(self, cmd: Command) -> str:
        """The marker's noise function: the mean noise power of the trace points within one
        RBW of the marker, per hertz of the RBW filter's noise bandwidth (dBm/Hz). Mean power
        with the RMS detector; with the sample (log) detector the mean of the dB values plus
        the log-averaging bias 10·γ/ln 10 = 2.51 dB (a Gaussian noise's Rayleigh envelope)."""
        cmd.no_params()
        if not self.value("marker_on", cmd.index):
            raise ScpiError(-221, f"marker {cmd.index} is off; set its X or switch it on")
        sweep = self._current_sweep()
        settings = self._last_settings or self.sweep_settings()
        x = self.value("marker_x_hz", cmd.index)
        near = np.abs(sweep.freqs_hz - x) <= settings.rbw_hz
        levels = sweep.trace_dbm[near] if near.any() else np.array([sweep.level_at(x)])
        if settings.detector == "rms":
            mean_dbm = 10.0 * math.log10(float(np.mean(10.0 ** (levels / 10.0))))
        else:
            mean_dbm = float(np.mean(levels)) + LOG_DETECTOR_BIAS_DB
        enbw_hz = GAUSSIAN_ENBW_PER_RBW * settings.rbw_hz
        return format_number(round(self._shown(mean_dbm) - 10.0 * math.log10(enbw_hz), 6))

    def _shown(self, level_dbm: Any) -> Any:
        """A level (dBm, or an array of them) as the display shows it: plus the reference
        level offset, where one is set."""
        offset = self.value("ref_offset_db")
        return level_dbm + offset if offset else level_dbm

    def _trace_query(self, cmd: Command) -> str | bytes:
        name = cmd.one()
        if name.text.upper() not in ("TRACE1", "TRAC1"):
            raise ScpiError(-224, f"{cmd.header}? {name.text} (only TRACE1)")
        trace = self._shown(self._current_sweep().trace_dbm)
        if self.value("format") == "REAL,32":
            return encode_real32_block(trace, big_endian=self.value("byte_order") == "NORMAL")
        return ",".join(f"{v:.4f}" for v in trace)
