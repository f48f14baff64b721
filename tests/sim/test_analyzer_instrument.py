"""The TW-SA13 (sim) through plain pyvisa over loopback, fed by a fixed input spectrum."""

from __future__ import annotations

import math
from collections.abc import Iterator

import numpy as np
import pytest
import pyvisa

from sweeprig.clock import VirtualClock
from sweeprig.sim.analyzer_display import AnalyzerParams, InputSpectrum
from sweeprig.sim.instruments.analyzer import (
    SpectrumAnalyzer,
    encode_real32_block,
    round_attenuation,
    round_rbw_up,
)
from sweeprig.sim.server import serve


class Feed:
    """A settable input: what the analyzer would see from the world."""

    def __init__(self) -> None:
        self.spectrum = InputSpectrum(((70e6, -20.0),), -174.0)

    def __call__(self) -> InputSpectrum:
        return self.spectrum


@pytest.fixture
def bench() -> Iterator[tuple[pyvisa.resources.MessageBasedResource, SpectrumAnalyzer,
                              VirtualClock, Feed]]:
    clock = VirtualClock()
    feed = Feed()
    analyzer = SpectrumAnalyzer(clock, feed, params=AnalyzerParams(), seed=3)
    with serve({"sa": analyzer}) as served:
        rm = pyvisa.ResourceManager("@py")
        sa = rm.open_resource(served.resources["sa"], read_termination="\n",
                              write_termination="\n", timeout=5000)
        try:
            yield sa, analyzer, clock, feed  # type: ignore[misc]
        finally:
            sa.close()
            rm.close()


def _setup(sa: pyvisa.resources.MessageBasedResource, *commands: str) -> None:
    sa.write("*RST;*CLS;:INIT:CONT OFF")
    for command in commands:
        sa.write(command)
    assert sa.query("SYST:ERR:COUN?") == "0", sa.query("SYST:ERR?")


def test_identity_and_defaults(bench) -> None:
    sa, *_ = bench
    assert sa.query("*IDN?") == "Tarnwick Labs,TW-SA13,SA13-0001,1.0"
    assert sa.query("SWE:POIN?") == "1001"
    assert sa.query("FORM?") == "ASC"
    assert sa.query("INP:ATT:AUTO?") == "1"


def test_single_sweep_advances_the_virtual_clock(bench) -> None:
    sa, _, clock, _ = bench
    _setup(sa, "FREQ:CENT 70 MHz;SPAN 10 MHz", "BAND 10 kHz", "AVER:COUN 4;STAT ON")
    one = float(sa.query("SWE:TIME?"))
    # common practice, no source: sweep time ≈ k·span/RBW², k = 2.5
    assert one == pytest.approx(2.5 * 10e6 / 10e3**2)
    before = clock.now()
    sa.write("INIT")
    assert int(sa.query("STAT:OPER:COND?")) & 8  # sweeping
    assert sa.query("*OPC?") == "1"
    assert clock.now() - before == pytest.approx(4 * one)
    assert int(sa.query("STAT:OPER:COND?")) & 8 == 0


def test_marker_reads_the_line_exactly_at_x(bench) -> None:
    sa, *_ = bench
    _setup(sa, "FREQ:CENT 70 MHz;SPAN 1 MHz", "BAND 10 kHz", "INIT", "*WAI")
    sa.write("CALC:MARK1:X 70 MHz")
    assert float(sa.query("CALC:MARK1:Y?")) == pytest.approx(-20.0, abs=0.01)
    sa.write("CALC:MARK2:X 70.005 MHz")
    # Gaussian RBW filter, -3 dB at ±RBW/2 (definition of the 3 dB bandwidth)
    assert float(sa.query("CALC:MARK2:Y?")) == pytest.approx(-20.0 - 10 * math.log10(2), abs=0.01)
    assert float(sa.query("CALC:MARK2:X?")) == pytest.approx(70.005e6)


def test_marker_to_peak_is_refined(bench) -> None:
    sa, _, _, feed = bench
    feed.spectrum = InputSpectrum(((70.0123e6, -31.0),), -174.0)
    _setup(sa, "FREQ:STAR 69 MHz;STOP 71 MHz", "SWE:POIN 201", "BAND 30 kHz", "INIT", "*WAI")
    sa.write("CALC:MARK3:MAX")
    assert float(sa.query("CALC:MARK3:X?")) == pytest.approx(70.0123e6, abs=100.0)
    assert float(sa.query("CALC:MARK3:Y?")) == pytest.approx(-31.0, abs=0.02)


def test_marker_off_is_a_settings_conflict(bench) -> None:
    sa, *_ = bench
    _setup(sa)
    sa.write("CALC:MARK4:Y?")
    assert sa.query("SYST:ERR?").startswith("-221,")


def test_trace_as_ascii_and_real32_blocks(bench) -> None:
    sa, analyzer, _, _ = bench
    _setup(sa, "FREQ:CENT 70 MHz;SPAN 2 MHz", "SWE:POIN 401", "INIT", "*WAI")
    ascii_trace = sa.query_ascii_values("TRAC? TRACE1")
    assert len(ascii_trace) == 401
    expected = analyzer.last_sweep.trace_dbm  # type: ignore[union-attr]
    np.testing.assert_allclose(ascii_trace, expected, atol=1e-4)
    sa.write("FORM REAL,32")
    assert sa.query("FORM?") == "REAL,32"
    # IEEE 488.2 definite-length block, big-endian by default (FORMat:BORDer NORMal)
    block = sa.query_binary_values("TRAC:DATA? TRACE1", datatype="f", is_big_endian=True)
    np.testing.assert_allclose(block, expected.astype(np.float32), rtol=0, atol=0)
    sa.write("FORM:BORD SWAP")
    swapped = sa.query_binary_values("TRAC? TRACE1", datatype="f", is_big_endian=False)
    np.testing.assert_array_equal(swapped, block)
    assert sa.query("SYST:ERR?") == '0,"No error"'


def test_block_encoding() -> None:
    block = encode_real32_block(np.array([1.0, -2.5]))
    assert block == b"#18" + np.array([1.0, -2.5], dtype=">f4").tobytes()


def test_rbw_and_attenuation_steps(bench) -> None:
    sa, *_ = bench
    _setup(sa)
    sa.write("BAND 2 kHz")
    assert sa.query("BAND?") == "3000"  # 1-3-10 sequence, rounded up
    assert sa.query("BAND:AUTO?") == "0"
    sa.write("INP:ATT 15")
    assert float(sa.query("INP:ATT?")) in (14.0, 16.0)
    assert sa.query("INP:ATT:AUTO?") == "0"
    assert round_rbw_up(1.0) == 1.0 and round_rbw_up(1.1e6) == 3e6 and round_rbw_up(5e7) == 1e7
    assert round_attenuation(71.0) == 70.0 and round_attenuation(3.1) == 4.0
    sa.write("BAND 20 MHz")
    assert sa.query("SYST:ERR?").startswith("-222,")


def test_span_couplings(bench) -> None:
    sa, *_ = bench
    _setup(sa, "FREQ:STAR 100 MHz;STOP 300 MHz")
    assert float(sa.query("FREQ:CENT?")) == pytest.approx(200e6)
    assert float(sa.query("FREQ:SPAN?")) == pytest.approx(200e6)
    assert float(sa.query("BAND?")) == 3e6  # span/100 → 2 MHz → 3 MHz (auto)
    sa.write("FREQ:SPAN 0")
    assert float(sa.query("FREQ:STAR?")) == pytest.approx(200e6)
    sa.write("FREQ:CENT 20 GHz")
    assert sa.query("SYST:ERR?").startswith("-222,")
    assert float(sa.query("FREQ:CENT?")) == pytest.approx(200e6)


def test_auto_attenuation_follows_the_reference_level(bench) -> None:
    sa, *_ = bench
    _setup(sa)
    sa.write("DISP:TRAC:Y:RLEV 10 DBM")
    # common practice, no source: RL at -10 dBm at the first mixer → att = RL + 10 dB
    assert float(sa.query("INP:ATT?")) == 20.0
    sa.write("DISP:WIND:TRAC:Y:SCAL:RLEV -40")
    assert float(sa.query("INP:ATT?")) == 10.0


def test_questionable_overload_and_uncalibrated(bench) -> None:
    sa, _, _, feed = bench
    feed.spectrum = InputSpectrum(((70e6, 15.0),), -174.0)
    _setup(sa, "FREQ:CENT 70 MHz;SPAN 1 MHz", "INP:ATT 0", "INIT", "*WAI")
    # SCPI-99 Vol. 1, status reporting (from memory): POWer bit 3, CALibration bit 8
    assert int(sa.query("STAT:QUES:COND?")) & (8 | 256) == 264
    feed.spectrum = InputSpectrum(((70e6, -30.0),), -174.0)
    sa.write("INIT;*WAI")
    assert int(sa.query("STAT:QUES:COND?")) == 0
    assert int(sa.query("STAT:QUES?")) == 264  # the event register latched the earlier sweep
    sa.write("DISP:TRAC:Y:RLEV -50;:INIT;*WAI")
    assert int(sa.query("STAT:QUES:COND?")) == 256
    # the summary reaches the status byte (bit 3) only for enabled bits
    assert int(sa.query("*STB?")) & 8 == 0
    sa.write("STAT:QUES:ENAB 264")
    assert int(sa.query("*STB?")) & 8 == 8


def test_averaged_noise_floor_over_loopback(bench) -> None:
    sa, _, _, feed = bench
    feed.spectrum = InputSpectrum((), -174.0)
    _setup(sa, "FREQ:CENT 1 GHz;SPAN 1 MHz", "BAND 10 kHz", "INP:ATT 10",
           "AVER:COUN 16;STAT ON", "INIT", "*WAI")
    trace = sa.query_ascii_values("TRAC? TRACE1")
    # Pozar, noise chapter: kTB = -174 dBm/Hz + 10·log10(RBW); + NF (14 dB) + attenuation
    expected = -174.0 + 10 * math.log10(10e3) + 14.0 + 10.0
    assert float(np.mean(trace)) == pytest.approx(expected, abs=0.5)


def test_reset_restores_defaults(bench) -> None:
    sa, *_ = bench
    _setup(sa, "FREQ:CENT 70 MHz;SPAN 1 MHz", "BAND 1 kHz", "INP:ATT 30", "FORM REAL,32")
    sa.write("*RST")
    assert sa.query("FORM?") == "ASC"
    assert sa.query("BAND:AUTO?") == "1"
    assert float(sa.query("INP:ATT?")) == 10.0
    assert float(sa.query("FREQ:STOP?")) == 13.6e9


def test_continuous_mode_follows_settings_and_single_mode_keeps_the_trace(bench) -> None:
    sa, _, clock, feed = bench
    sa.write("*RST;:INIT:CONT ON;:FREQ:CENT 70 MHz;SPAN 1 MHz")
    sa.write("CALC:MARK1:X 70 MHz")
    assert float(sa.query("CALC:MARK1:Y?")) == pytest.approx(-20.0, abs=0.05)
    feed.spectrum = InputSpectrum(((70e6, -30.0),), -174.0)
    clock.sleep(1.0)  # longer than a sweep: the display has been refreshed
    assert float(sa.query("CALC:MARK1:Y?")) == pytest.approx(-30.0, abs=0.05)
    assert sa.query("INIT:CONT OFF;:INIT;*OPC?") == "1"  # a reply: the sweep has been taken
    feed.spectrum = InputSpectrum(((70e6, -40.0),), -174.0)
    clock.sleep(1.0)
    assert float(sa.query("CALC:MARK1:Y?")) == pytest.approx(-30.0, abs=0.05)
    sa.write("INIT;*WAI")
    assert float(sa.query("CALC:MARK1:Y?")) == pytest.approx(-40.0, abs=0.05)


def test_the_kept_sweep_settings_follow_every_setting_they_are_made_of(bench) -> None:
    """The sweep settings are kept between requests (a marker reading asks for them at
    every reading) and made again after any of their settings changes, by a command, a
    coupling or *RST: always equal to settings made afresh from the present values."""
    sa, analyzer, _, _ = bench
    _setup(sa)
    kept = analyzer.sweep_settings()
    assert analyzer.sweep_settings() is kept
    sa.write(":CALC:MARK1:X 70 MHz")  # a marker is not a sweep setting
    assert analyzer.sweep_settings() is kept
    for command in ("FREQ:CENT 100 MHz", "FREQ:SPAN 10 MHz", "FREQ:STAR 90 MHz",
                    "FREQ:STOP 95 MHz", "BAND 30 kHz", "BAND:VID 10 kHz", "SWE:POIN 401",
                    "DISP:WIND:TRAC:Y:RLEV -20", "INP:ATT 30", "AVER ON", "AVER:COUN 4",
                    "DET RMS", "BAND:AUTO ON", "INP:ATT:AUTO ON", "*RST"):
        before = analyzer.sweep_settings()
        sa.write(command)
        assert sa.query("SYST:ERR:COUN?") == "0", command
        assert analyzer.sweep_settings() == analyzer._make_sweep_settings(), command
        assert analyzer.sweep_settings() != before or command in ("BAND:AUTO ON",
                                                                  "INP:ATT:AUTO ON"), command
