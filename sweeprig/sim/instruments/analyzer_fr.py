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
* the noise-source drive is ``[SOURce]:NOISe[:STATe]``;
* its sweeps are slower: 1.6 times the TW-SA13's for the same span, RBW and VBW
  (``SWEep:TIME?`` says so).
"""

from __future__ import annotations

from sweeprig.sim.instruments.analyzer import (
    AnalyzerDialect,
    SpectrumAnalyzer,
    encode_real32_block,
)
from sweeprig.sim.scpi import Command
from sweeprig.sim.scpi.errors import ScpiError

MAKER = "Farrowmere Instruments"
MODEL = "FR-SA20"
#: Instrument-defined questionable bits of this family (SCPI-99 leaves bits 9 to 13 to the
#: instrument): input overload in the last sweep, and uncalibrated (reference level too low).
#: Its sweeps take this many times the TW-SA13's for the same settings (invented).
SWEEP_TIME_SCALE_FR = 1.6
QUES_OVERLOAD_FR = 1 << 10
QUES_UNCALIBRATED_FR = 1 << 11


class FarrowmereAnalyzer(SpectrumAnalyzer):
    """The FR-SA20 (sim): the TW-SA13's receiver with the command set of the module docstring.
    Constructed as :class:`~sweeprig.sim.instruments.analyzer.SpectrumAnalyzer`."""

    maker = MAKER
    model = MODEL
    default_serial = "SA20-0001"
    dialect = AnalyzerDialect(
        bandwidth="[SENSe]:BWIDth",
        attenuation="[SENSe]:POWer[:RF]:ATTenuation",
        # the marker's frequency also switches it on (as the TW-SA13's X does)
        marker_x="CALCulate:MARKer[1-4]:FREQuency",
        marker_peak="CALCulate:MARKer[1-4]:PEAK[:SEARch]",
        marker_y="CALCulate:MARKer[1-4]:AMPLitude",
        marker_density="CALCulate:MARKer[1-4]:NOISe",
        power_detector="POWer",
        noise_output="[SOURce]:NOISe[:STATe]",
        format_default="REAL,32",
        byte_order=False,
        trace="TRACe[1-3][:DATA]",
        sweep_time_scale=SWEEP_TIME_SCALE_FR,
    )

    def questionable_condition(self) -> int:
        bits = self.reference.questionable_bits()
        last = self.last_sweep
        if last is not None:
            if last.overload:
                bits |= QUES_OVERLOAD_FR
            if last.uncalibrated:
                bits |= QUES_UNCALIBRATED_FR
        return bits

    def _trace_query(self, cmd: Command) -> str | bytes:
        cmd.no_params()
        if cmd.index != 1:
            raise ScpiError(-221, f"trace {cmd.index} is blank; read TRACe1")
        trace = self._shown(self._current_sweep().trace_dbm)
        if self.value("format") == "REAL,32":
            return encode_real32_block(trace, big_endian=False)
        return ",".join(f"{v:.4f}" for v in trace)
