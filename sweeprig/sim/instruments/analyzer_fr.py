"""Farrowmere Instruments FR-SA20 (sim): the second analyzer family (role ``sa``).

The same simulated receiver as the TW-SA13 (:mod:`sweeprig.sim.instruments.analyzer`: the
same display, sweep timing, couplings and reference), behind another SCPI dialect, so that the
driver profiles are proven against more than the one command set they were written with. The
command set is fixed by docs/instruments.md ("Spectrum analyzer, second family"), written
before its profile (drivers/fr-sa20.toml). Every difference is a legal SCPI-99 form a real
analyzer could use (SCPI-99 vol. 1, 6: optional nodes, numeric suffixes, short forms; from
memory):

* RBW and VBW only under ``[SENSe]:BWIDth`` (no ``BANDwidth`` alias);
* attenuation under ``[SENSe]:POWer[:RF]:ATTenuation`` (not ``INPut``);
* the marker frequency is ``CALCulate:MARKer<n>:FREQuency``, its level
  ``CALCulate:MARKer<n>:AMPLitude?``, the peak search ``CALCulate:MARKer<n>:PEAK[:SEARch]``;
* the power detector is spelt ``POWer`` (``[SENSe]:DETector[:FUNCtion] SAMPle|POWer``);
* the trace is ``TRACe<n>[:DATA]?`` (the trace number a suffix, no parameter); binary traces
  are IEEE 488.2 definite-length blocks of 32-bit floats, always little-endian (there is no
  ``FORMat:BORDer``), and the power-on format is ``REAL,32``;
* overload and uncalibrated are reported in the questionable register's instrument-defined
  bits 10 (1024) and 11 (2048), not in SCPI-99's POWer (3) and CALibration (8) bits; the
  reference's FREQuency bit stays bit 5;
* the noise-source drive is ``[SOURce]:NOISe[:STATe]``.
"""

from __future__ import annotations

from dataclasses import replace

from sweeprig.sim.analyzer_display import SweepSettings
from sweeprig.sim.instruments.analyzer import (
    ATT_MAX_DB,
    AUTO_ATT_MIN_DB,
    AVERAGES_MAX,
    CENTER_MIN_HZ,
    FREQ_MAX_HZ,
    FREQ_MIN_HZ,
    POINTS_DEFAULT,
    POINTS_MAX,
    POINTS_MIN,
    RBW_MAX_HZ,
    RBW_MIN_HZ,
    SpectrumAnalyzer,
    encode_real32_block,
    round_attenuation,
    round_rbw_up,
)
from sweeprig.sim.scpi import Command, Setting
from sweeprig.sim.scpi.errors import ScpiError

MAKER = "Farrowmere Instruments"
MODEL = "FR-SA20"
#: Instrument-defined questionable bits of this family (SCPI-99 leaves bits 9 to 13 to the
#: instrument): input overload in the last sweep, and uncalibrated (reference level too low).
QUES_OVERLOAD_FR = 1 << 10
QUES_UNCALIBRATED_FR = 1 << 11


class FarrowmereAnalyzer(SpectrumAnalyzer):
    """The FR-SA20 (sim): the TW-SA13's receiver with the command set of the module docstring.
    Constructed as :class:`~sweeprig.sim.instruments.analyzer.SpectrumAnalyzer`."""

    maker = MAKER
    model = MODEL
    default_serial = "SA20-0001"

    def sweep_settings(self) -> SweepSettings:
        settings = super().sweep_settings()
        power = str(self.value("detector")).upper() == "POWER"
        return replace(settings, detector="rms" if power else "sample")

    def questionable_condition(self) -> int:
        bits = self.reference.questionable_bits()
        last = self.last_sweep
        if last is not None:
            if last.overload:
                bits |= QUES_OVERLOAD_FR
            if last.uncalibrated:
                bits |= QUES_UNCALIBRATED_FR
        return bits

    def _register(self) -> None:
        add = self.add_setting
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
        add(Setting("rbw_hz", "[SENSe]:BWIDth[:RESolution]", "float", default=3e6,
                    unit=freq, minimum=RBW_MIN_HZ, maximum=RBW_MAX_HZ, coerce=round_rbw_up,
                    on_change=self._rbw_changed))
        add(Setting("rbw_auto", "[SENSe]:BWIDth[:RESolution]:AUTO", "bool",
                    default=True, on_change=lambda _v: self._couple()))
        add(Setting("vbw_hz", "[SENSe]:BWIDth:VIDeo", "float", default=3e6,
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
        add(Setting("att_db", "[SENSe]:POWer[:RF]:ATTenuation", "float",
                    default=AUTO_ATT_MIN_DB, unit="level_db", minimum=0.0, maximum=ATT_MAX_DB,
                    coerce=round_attenuation, on_change=self._att_changed))
        add(Setting("att_auto", "[SENSe]:POWer[:RF]:ATTenuation:AUTO", "bool", default=True,
                    on_change=lambda _v: self._couple()))
        add(Setting("continuous", "INITiate:CONTinuous", "bool", default=True))
        add(Setting("marker_on", "CALCulate:MARKer[1-4][:STATe]", "bool", default=False))
        add(Setting("marker_x_hz", "CALCulate:MARKer[1-4]:FREQuency", "float",
                    default=0.5 * (CENTER_MIN_HZ + FREQ_MAX_HZ), unit=freq,
                    minimum=FREQ_MIN_HZ, maximum=FREQ_MAX_HZ))
        add(Setting("detector", "[SENSe]:DETector[:FUNCtion]", "enum", default="SAMPle",
                    choices=("SAMPle", "POWer")))
        add(Setting("noise_output", "[SOURce]:NOISe[:STATe]", "bool", default=False))
        add(Setting("format", "FORMat[:DATA]", "enum", default="REAL,32",
                    choices=("ASCii", "REAL,32")))
        self.reference.install(self, "[SENSe]:ROSCillator:SOURce")
        self.add_command("[SENSe]:SWEep:TIME", query=self._sweep_time_query)
        self.add_command("INITiate[:IMMediate]", write=self._initiate)
        # the marker's frequency also switches it on (as the TW-SA13's X does)
        self.add_command("CALCulate:MARKer[1-4]:FREQuency", write=self._marker_x)
        self.add_command("CALCulate:MARKer[1-4]:PEAK[:SEARch]", write=self._marker_max)
        self.add_command("CALCulate:MARKer[1-4]:AMPLitude", query=self._marker_y)
        self.add_command("CALCulate:MARKer[1-4]:NOISe", query=self._marker_density)
        self.add_command("TRACe[1-3][:DATA]", query=self._trace_fr)

    def _trace_fr(self, cmd: Command) -> str | bytes:
        cmd.no_params()
        if cmd.index != 1:
            raise ScpiError(-221, f"trace {cmd.index} is blank; read TRACe1")
        trace = self._current_sweep().trace_dbm
        if self.value("format") == "REAL,32":
            return encode_real32_block(trace, big_endian=False)
        return ",".join(f"{v:.4f}" for v in trace)
