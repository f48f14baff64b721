"""The truth queries: lines by origin, their vector total, and the noise, against what the
served bench shows through plain pyvisa over loopback."""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest
import pyvisa

from sweeprig.sim import truth
from sweeprig.sim.analyzer_display import SweepSettings
from sweeprig.sim.bench import SimBenchDescription, start_sim_bench

LO_HZ, RF_HZ, RF2_HZ = 2.1e9, 2.2e9, 2.201e9
DRIVE = truth.Drive(lo_freq_hz=LO_HZ, lo_power_dbm=2.0, rf_freq_hz=RF_HZ, rf_power_dbm=-17.0,
                    rf2_freq_hz=RF2_HZ, rf2_power_dbm=-11.0)
# The clean bench (kx-2417, harmonics, spurs, leakage phases, analyzer phase noise) at
# 0 dB attenuation: the analyzer's own products are comparable to the part's.
HOSTILE = SweepSettings.centered(99e6, 20e3, rbw_hz=100.0, attenuation_db=0.0)


def _mag(dbm: float) -> float:
    return 10 ** (dbm / 20) if math.isfinite(dbm) else 0.0


def test_components_bound_the_total_as_a_vector_sum() -> None:
    lines = truth.port_lines("clean", DRIVE, "if", HOSTILE)
    assert lines == tuple(sorted(lines, key=lambda line: line.freq_hz))
    checked = 0
    for line in lines:
        if not math.isfinite(line.total_dbm) or line.total_dbm < -150:
            continue
        mags = [_mag(line.part_dbm), _mag(line.source_harmonic_dbm), _mag(line.leakage_dbm),
                _mag(line.analyzer_dbm)]
        # |Σ a_k| ≤ Σ |a_k| (vector sum of coherent signals); the display's compression
        # (< 0.01 dB here) is the only other change
        assert _mag(line.total_dbm) <= sum(mags) * 1.002, line
        checked += 1
    assert checked > 20
    # with analyzer settings the port level is its own figure: total at the port less the
    # cable
    wanted = truth.nearest_line(lines, 100e6)
    assert wanted is not None and wanted.orders == (-1, 1, 0)
    assert wanted.port_dbm - wanted.cable_loss_db == pytest.approx(
        truth.line_at("clean", DRIVE, "if", 100e6).total_dbm)


def test_a_clean_bench_has_only_part_made_lines() -> None:
    clean = SimBenchDescription.model_validate({
        "part": "kx-2417", "sources": {"level_error": False, "harmonics": [], "spurious": []}})
    line = truth.line_at(clean, DRIVE, "if", 99e6)
    assert line is not None
    assert line.source_harmonic_dbm == -math.inf and line.analyzer_dbm == -math.inf
    assert line.total_dbm == pytest.approx(line.part_dbm, abs=1e-9)
    # LO at the IF port: the core's own LO line plus the LO→IF path, as voltages
    lo = truth.line_at(clean, DRIVE, "if", LO_HZ)
    assert lo is not None and math.isfinite(lo.leakage_dbm) and math.isfinite(lo.part_dbm)
    assert abs(_mag(lo.part_dbm) - _mag(lo.leakage_dbm)) <= _mag(lo.total_dbm) * 1.000001
    assert _mag(lo.total_dbm) <= (_mag(lo.part_dbm) + _mag(lo.leakage_dbm)) * 1.000001


def test_an_unpowered_part_only_leaks() -> None:
    dead = truth.Drive(lo_freq_hz=LO_HZ, lo_power_dbm=2.0, rf_freq_hz=RF_HZ,
                       rf_power_dbm=-17.0, supply_v=0.0)
    lines = truth.port_lines("clean", dead, "if")
    assert lines and all(line.part_dbm == -math.inf for line in lines)
    assert {round(line.freq_hz) for line in lines} >= {LO_HZ, RF_HZ}


def test_part_figures_come_from_the_reference_extraction() -> None:
    figures = truth.part_figures("clean", DRIVE)  # tones 1 MHz apart: IM2 below the IF band
    in_band = truth.part_figures("clean", replace(DRIVE, rf2_freq_hz=RF_HZ + 20e6))
    # the datasheet IIP2, with the difference line in the IF band (its high-pass: 10 MHz)
    assert 45.0 <= in_band.iip2_dbm <= 60.0 < figures.iip2_dbm
    assert figures.lo_power_dbm == pytest.approx(2.0 - 2.0, abs=0.2)  # 2 dB LO cable


class _Served:
    def __init__(self, bench) -> None:
        self.rm = pyvisa.ResourceManager("@py")
        self.bench = bench
        self.open = {}

    def __getitem__(self, role: str):
        if role not in self.open:
            self.open[role] = self.rm.open_resource(
                self.bench.resources[role], read_termination="\n", write_termination="\n",
                timeout=10000)
        return self.open[role]

    def cmd(self, role: str, message: str) -> None:
        assert self[role].query(f"{message};*OPC?") == "1"

    def close(self) -> None:
        for resource in self.open.values():
            resource.close()
        self.rm.close()


@pytest.fixture(scope="module")
def served():
    with start_sim_bench("default") as bench:
        s = _Served(bench)
        try:
            s.cmd("dc", "CURR 0.2;VOLT 3.3;OUTP ON")
            s.cmd("lo", f"FREQ {LO_HZ};POW 2 DBM;OUTP ON")
            s.cmd("rf", f"FREQ {RF_HZ};POW -17 DBM;OUTP ON")
            s.cmd("rf2", f"FREQ {RF2_HZ};POW -11 DBM;OUTP ON")
            s.cmd("switch", "ROUT:CLOS (@1)")
            yield s
        finally:
            s.close()


def _sweep(s: _Served, settings: SweepSettings, averages: int = 1) -> None:
    sa = s["sa"]
    sa.write(f"INIT:CONT OFF;:FREQ:CENT {settings.center_hz};SPAN {settings.span_hz};"
             f":BAND {settings.rbw_hz}")
    sa.write(f"INP:ATT {settings.attenuation_db};:AVER:COUN {averages};"
             f"STAT {'ON' if averages > 1 else 'OFF'}")
    assert sa.query("INIT;*OPC?") == "1"


def _marker(s: _Served, freq_hz: float) -> float:
    s["sa"].write(f"CALC:MARK1:X {freq_hz}")
    return float(s["sa"].query("CALC:MARK1:Y?"))


@pytest.mark.parametrize("freq_hz", [100e6, 99e6, 102e6])
def test_truth_totals_equal_what_the_served_analyzer_reads(served, freq_hz) -> None:
    settings = SweepSettings.centered(freq_hz, 20e3, rbw_hz=100.0, attenuation_db=0.0)
    _sweep(served, settings)
    read = _marker(served, freq_hz)
    line = truth.line_at("default", DRIVE, "if", freq_hz, settings)
    floor = truth.noise_dbm("default", DRIVE, "if", freq_hz, settings)
    assert line is not None and line.total_dbm - floor > 40.0
    # a line 40 dB over the noise: the noise moves the reading by < 0.05 dB (power sum)
    assert read == pytest.approx(line.total_dbm, abs=0.05)
    # the served bench's own truth query gives the same numbers
    reply = served["simctl"].query(f"SIM:TRUT:LINE? IF,{freq_hz}")
    values = [float(v) for v in reply.split(",")]
    assert values[0] == pytest.approx(line.total_dbm, abs=1e-5)
    assert values[1] == pytest.approx(line.part_dbm, abs=1e-5)
    assert values[4] == pytest.approx(line.analyzer_dbm, abs=1e-5)


def test_truth_noise_equals_the_served_floor_near_a_strong_tone(served) -> None:
    # 1 kHz RBW, 400 kHz around the wanted line: reciprocal mixing of the −17 dBm line
    settings = SweepSettings.centered(100.2e6, 200e3, rbw_hz=1e3, attenuation_db=10.0)
    _sweep(served, settings, averages=16)
    trace = np.array([float(v) for v in served["sa"].query("TRAC? TRACE1").split(",")])
    freqs = settings.freqs_hz()
    pick = np.arange(500, 1001, 10)  # 100.2 to 100.3 MHz: no line within 5 RBW
    expected = np.array([truth.noise_dbm("default", DRIVE, "if", float(f), settings)
                         for f in freqs[pick]])
    danl = truth.noise("default", DRIVE, "if", float(freqs[700]), settings)
    assert danl.reciprocal_dbm > danl.danl_dbm  # the tone's phase noise is what shows
    # the simulated trace's log-detector offsets have zero mean in dB (the model adds back
    # the 2.51 dB bias of log-detected noise), so the trace averages to the truth's level;
    # 51 points × 16 averages: 5.57 dB/sqrt(816) = 0.2 dB rms
    diff = trace[pick] - expected
    assert float(np.mean(diff)) == pytest.approx(0.0, abs=0.6)
    reply = served["simctl"].query(f"SIM:TRUT:NOIS? IF,{freqs[700]}")
    assert float(reply.split(",")[0]) == pytest.approx(danl.total_dbm, abs=1e-5)
