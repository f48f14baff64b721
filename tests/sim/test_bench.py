"""The assembled simulated bench through plain pyvisa over loopback.

Physics checks cite their source beside the check; levels that depend on a shipped part's
invented numbers are compared with the model's own response (the world's wiring is what is
under test) and bracketed by physically sensible ranges.
"""

from __future__ import annotations

import math
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import numpy as np
import pytest
import pyvisa

from sweeprig.errors import InputError
from sweeprig.sim.bench import (
    ROLES,
    SimBench,
    SimBenchDescription,
    build_sim_instruments,
    load_sim_bench_description,
    shipped_benches,
    start_sim_bench,
)
from sweeprig.sim.instruments.powermeter import sensor_cal_factor_percent
from sweeprig.sim.mixer import OperatingPoint, load_part
from sweeprig.sim.mixer.part import PARTS_DIR

BOLTZMANN = 1.380649e-23  # J/K, exact (CODATA 2019 SI)
CHARGE = 1.602176634e-19  # C, exact (CODATA 2019 SI)

# A clean bench for physics checks: flat cables, no source level error, no harmonics.
CLEAN = {
    "cables": {"rf": "1 dB", "rf2": "1 dB", "lo": "1 dB", "if": "0.5 dB", "combiner": "3.5 dB",
               "rf_port": "0.7 dB", "lo_port": "0.9 dB"},
    "sources": {"level_error": False, "harmonics": []},
}


def _description(part: str = "kx-2417", **extra: Any) -> SimBenchDescription:
    data: dict[str, Any] = {"part": part, **CLEAN}
    data.update(extra)
    return SimBenchDescription.model_validate(data)


class Session:
    """Open pyvisa resources of a running bench, by role."""

    def __init__(self, bench: SimBench) -> None:
        self.bench = bench
        self.rm = pyvisa.ResourceManager("@py")
        self._open: dict[str, Any] = {}

    def __getitem__(self, role: str) -> Any:
        if role not in self._open:
            self._open[role] = self.rm.open_resource(
                self.bench.resources[role], read_termination="\n", write_termination="\n",
                timeout=10000,
            )
        return self._open[role]

    def close(self) -> None:
        for resource in self._open.values():
            resource.close()
        self.rm.close()

    def cmd(self, role: str, message: str) -> None:
        """Send settings and wait until they are applied (a query synchronises: the
        instruments run in separate server threads, as separate boxes do on a bench)."""
        assert self[role].query(f"{message};*OPC?") == "1"

    def marker_dbm(self, freq_hz: float) -> float:
        sa = self["sa"]
        sa.write(f"CALC:MARK1:X {freq_hz}")
        return float(sa.query("CALC:MARK1:Y?"))

    def sweep(self, center_hz: float, span_hz: float, rbw_hz: float, *, att_db: float = 10.0,
              averages: int = 1) -> None:
        sa = self["sa"]
        sa.write(f"INIT:CONT OFF;:FREQ:CENT {center_hz};SPAN {span_hz};:BAND {rbw_hz}")
        sa.write(f"INP:ATT {att_db};:AVER:COUN {averages};STAT {'ON' if averages > 1 else 'OFF'}")
        # (same connection: the analyzer handles these in order)
        assert sa.query("INIT;*OPC?") == "1"

    def power_up(self, lo_dbm: float = 1.0, volts: float = 3.3) -> None:
        self.cmd("dc", f"CURR 0.2;VOLT {volts};OUTP ON")
        self.cmd("lo", f"FREQ 2.33 GHz;POW {lo_dbm} DBM;OUTP ON")

    def no_errors(self) -> None:
        for role, resource in self._open.items():
            assert resource.query("SYST:ERR?") == '0,"No error"', role


@contextmanager
def running(description: SimBenchDescription | None = None) -> Iterator[Session]:
    with start_sim_bench(description) as bench:
        session = Session(bench)
        try:
            yield session
        finally:
            session.close()


def test_five_line_script_talks_to_every_instrument() -> None:
    with start_sim_bench() as bench:
        rm = pyvisa.ResourceManager("@py")
        for resource in bench.resources.values():
            inst = rm.open_resource(resource, read_termination="\n", write_termination="\n")
            assert inst.query("*IDN?").split(",")[0] in ("Tarnwick Labs", "Kelderhall Thermal")
            inst.close()
        rm.close()
    assert set(bench.resources) == set(ROLES)
    assert all(r.startswith("TCPIP0::127.0.0.1::") and r.endswith("::SOCKET")
               for r in bench.resources.values())


def test_ideal_part_converts_with_the_commutating_gain() -> None:
    with running(_description("ideal")) as s:
        s.power_up(lo_dbm=11.0)  # +10 dBm at the LO port: hard switching
        s.cmd("rf", "FREQ 2.4 GHz;POW -40 DBM;OUTP ON")
        s.sweep(70e6, 100e3, 1e3)
        displayed = s.marker_dbm(70e6)
        probe_c = float(s["chamber"].query("THER:PROB?"))
        s.no_errors()
    # Gilbert cell, ideal commutation: g_v = (2/pi)·G_m·R_L, G_m = I_EE/(2·VT) (Gray & Meyer,
    # analog multiplier; Razavi mixer chapter); transducer gain g_v²·R_in/R_L between the
    # matched 100 ohm input and 200 ohm load of the ideal part (derived).
    vt = BOLTZMANN * (probe_c + 273.15) / CHARGE
    g_v = (2.0 / math.pi) * (4e-3 / (2.0 * vt)) * 200.0
    gain_db = 10.0 * math.log10(g_v**2 * 100.0 / 200.0)
    at_rf_port = -40.0 - 1.0 - 3.5
    assert displayed == pytest.approx(at_rf_port + gain_db - 0.5, abs=0.2)


def test_power_meter_sees_the_dut_rf_plane() -> None:
    with running(_description()) as s:
        s.cmd("rf", "FREQ 2.4 GHz;POW -10 DBM;OUTP ON")
        s.cmd("pm", "FREQ 2.4 GHz;AVER:COUN 16")
        # low by the sensor's calibration factor, which the bench file's table corrects
        factor_db = 10.0 * math.log10(sensor_cal_factor_percent(2.4e9) / 100.0)
        assert float(s["pm"].query("MEAS?")) == pytest.approx(-10.0 - 1.0 - 3.5 + factor_db,
                                                              abs=0.05)
        s.cmd("rf", "OUTP OFF")
        assert float(s["pm"].query("MEAS?")) < -60.0


def test_lo_leakage_at_the_if_and_rf_ports() -> None:
    with running(_description()) as s:
        s.power_up(lo_dbm=1.0)
        s.cmd("rf", "FREQ 2.4 GHz;POW -30 DBM;OUTP ON")
        response = s.bench.world.response()
        s.sweep(2.33e9, 200e3, 1e3)
        at_if = s.marker_dbm(2.33e9)
        s.cmd("switch", "ROUT:CLOS (@2)")
        assert s["switch"].query("ROUT:CLOS? (@2)") == "1"
        s.sweep(2.33e9, 200e3, 1e3)
        at_rf = s.marker_dbm(2.33e9)
        s.no_errors()
    expected_if = next(p.power_dbm for p in response.if_port if p.freq_hz == 2.33e9) - 0.5
    expected_rf = next(p.power_dbm for p in response.rf_port if p.freq_hz == 2.33e9) - 0.7
    assert at_if == pytest.approx(expected_if, abs=0.05)
    assert at_rf == pytest.approx(expected_rf, abs=0.05)
    lo_at_port = 1.0 - 1.0
    # a double-balanced mixer isolates its LO by tens of dB, not by 0 or 100 (sanity bracket)
    assert -70.0 < at_if - lo_at_port < -15.0
    assert -70.0 < at_rf - lo_at_port < -15.0


def test_if_and_rf_spur_follow_the_model_and_move_with_drive() -> None:
    with running(_description()) as s:
        s.power_up()
        levels: dict[float, tuple[float, float]] = {}
        for rf_dbm in (-22.0, -12.0):
            s.cmd("rf", f"FREQ 2.4 GHz;POW {rf_dbm} DBM;OUTP ON")
            s.sweep(70e6, 100e3, 1e3, att_db=20.0)
            if_dbm = s.marker_dbm(70e6)
            s.sweep(210e6, 10e3, 100.0, att_db=20.0, averages=4)  # the 3x3 spur 3RF - 3LO
            levels[rf_dbm] = (if_dbm, s.marker_dbm(210e6))
        response = s.bench.world.response()
        s.no_errors()
    spur_model = next(p.power_dbm for p in response.if_port if p.orders == (-3, 3)) - 0.5
    assert levels[-12.0][1] == pytest.approx(spur_model, abs=0.2)
    # common practice, no source: an n-th order RF spur moves (n - 1) dB per dB of drive
    # relative to the wanted IF (n = 3 here); at these levels the part is near small-signal
    relative_move = (levels[-12.0][1] - levels[-12.0][0]) - (levels[-22.0][1] - levels[-22.0][0])
    assert relative_move / 10.0 == pytest.approx(2.0, abs=0.2)


def _two_tone(s: Session, tone_dbm: float, att_db: float) -> tuple[float, float]:
    s.cmd("rf", f"FREQ 2.4 GHz;POW {tone_dbm} DBM;OUTP ON")
    s.cmd("rf2", f"FREQ 2.401 GHz;POW {tone_dbm} DBM;OUTP ON")
    s.sweep(70e6, 10e3, 100.0, att_db=att_db, averages=4)
    fundamental = s.marker_dbm(70e6)
    s.sweep(69e6, 10e3, 100.0, att_db=att_db, averages=4)  # 2f1 - f2 after the LO
    return fundamental, s.marker_dbm(69e6)


def test_dut_two_tone_products_keep_their_level_with_more_attenuation() -> None:
    with running(_description()) as s:
        s.power_up()
        fund_lo, im3_lo = _two_tone(s, -30.0, 10.0)
        fund_hi, im3_hi = _two_tone(s, -20.0, 10.0)
        _, im3_hi_att = _two_tone(s, -20.0, 20.0)
        s.no_errors()
    # Razavi: below compression the fundamental moves 1 dB/dB and IM3 3 dB/dB
    assert (fund_hi - fund_lo) / 10.0 == pytest.approx(1.0, abs=0.05)
    assert (im3_hi - im3_lo) / 10.0 == pytest.approx(3.0, abs=0.15)
    # common practice, no source: a DUT product keeps its displayed level with +10 dB att
    assert im3_hi_att == pytest.approx(im3_hi, abs=0.3)


def test_analyzer_made_two_tone_products_drop_20db_with_10db_more_attenuation() -> None:
    # An analyzer with a poor first mixer (TOI 0 dBm) makes the IM3 it displays itself.
    with running(_description(analyzer={"toi": "0 dBm"})) as s:
        s.power_up()
        fund_0, im3_0 = _two_tone(s, -30.0, 0.0)
        fund_10, im3_10 = _two_tone(s, -30.0, 10.0)
        s.no_errors()
    # common practice, no source: analyzer-made 3rd order drops ~20 dB per +10 dB att
    assert im3_0 - im3_10 == pytest.approx(20.0, abs=1.0)
    assert fund_0 == pytest.approx(fund_10, abs=0.1)


def test_noise_floor_of_an_unpowered_bench() -> None:
    with running(_description()) as s:
        s.sweep(1e9, 1e6, 10e3, att_db=10.0, averages=16)
        trace = s["sa"].query_ascii_values("TRAC? TRACE1")
        s.no_errors()
    # Pozar, noise chapter: kTB = -174 dBm/Hz + 10·log10(RBW); plus NF 14 dB and attenuation
    expected = -174.0 + 10.0 * math.log10(10e3) + 14.0 + 10.0
    assert float(np.mean(trace)) == pytest.approx(expected, abs=0.5)


def test_real32_trace_and_opc_advance_the_simulated_time() -> None:
    with running(_description()) as s:
        sa, simctl = s["sa"], s["simctl"]
        assert simctl.query("SIM:MODE?") == "VIRT"
        sa.write("INIT:CONT OFF;:FREQ:CENT 70 MHz;SPAN 10 MHz;:BAND 10 kHz;:FORM REAL,32")
        sweep_s = float(sa.query("SWE:TIME?"))
        before = float(simctl.query("SIM:TIME?"))
        assert sa.query("INIT;*OPC?") == "1"
        after = float(simctl.query("SIM:TIME?"))
        trace = sa.query_binary_values("TRAC? TRACE1", datatype="f", is_big_endian=True)
        s.no_errors()
    # common practice, no source: sweep time ≈ 2.5·span/RBW²
    assert sweep_s == pytest.approx(2.5 * 10e6 / 10e3**2)
    assert after - before == pytest.approx(sweep_s)
    assert len(trace) == 1001


def test_chamber_lag_reaches_the_die_and_the_gain() -> None:
    # ideal part, constant tail current: G_m = I_EE/(2·VT) ∝ 1/T, so the power gain falls by
    # 20·log10(T2/T1) dB (Gray & Meyer; G_m = I_C/VT)
    with running(_description("ideal")) as s:
        s.power_up(lo_dbm=11.0)
        s.cmd("rf", "FREQ 2.4 GHz;POW -40 DBM;OUTP ON")
        s.sweep(70e6, 100e3, 1e3)
        cold = s.marker_dbm(70e6)
        t_cold = float(s["chamber"].query("THER:PROB?"))
        s.cmd("chamber", "THER:SETP 85;RAMP 5;CONT ON")
        s.cmd("simctl", "SIM:TIME:ADV 600")
        air = float(s["chamber"].query("THER:AIR?"))
        t_hot = float(s["chamber"].query("THER:PROB?"))
        die = s.bench.world.die_temperature_c()  # the clock stands still between reads
        s.sweep(70e6, 100e3, 1e3)
        hot = s.marker_dbm(70e6)
        s.no_errors()
    assert air == pytest.approx(23.0 + 5.0 * 10.0)  # 10 min at 5 degC/min
    assert t_hot < air - 5.0  # the probe lags the air (time constant 120 s)
    assert die == pytest.approx(t_hot, abs=0.01)
    expected_drop = 20.0 * math.log10((t_hot + 273.15) / (t_cold + 273.15))
    assert cold - hot == pytest.approx(expected_drop, abs=0.1)


def test_supply_current_comes_from_the_model() -> None:
    with running(_description()) as s:
        dc = s["dc"]
        dc.write("CURR 0.2;VOLT 3.3;OUTP ON")
        at_nominal = float(dc.query("MEAS:CURR?"))
        dc.write("VOLT 3.0")
        at_low = float(dc.query("MEAS:CURR?"))
        dc.write("OUTP OFF")
        off = float(dc.query("MEAS:CURR?"))
        s.no_errors()
    part = load_part("kx-2417")
    assert at_nominal == pytest.approx(part.supply_current_at(OperatingPoint(23.0, 3.3)))
    assert at_low == pytest.approx(part.supply_current_at(OperatingPoint(23.0, 3.0)))
    assert 0.005 < at_nominal < 0.5  # an active mixer draws tens of mA
    assert off == 0.0


def test_unpowered_mixer_does_not_convert() -> None:
    with running(_description()) as s:
        s.cmd("lo", "FREQ 2.33 GHz;POW 1 DBM;OUTP ON")
        s.cmd("rf", "FREQ 2.4 GHz;POW -10 DBM;OUTP ON")
        s.sweep(70e6, 100e3, 1e3)
        at_if = s.marker_dbm(70e6)
        s.sweep(2.4e9, 100e3, 1e3)
        rf_feedthrough = s.marker_dbm(2.4e9)
    danl = -174.0 + 30.0 + 14.0 + 10.0  # Pozar: kTB + NF + attenuation
    assert at_if < danl + 10.0  # only noise where the IF would be
    assert rf_feedthrough == pytest.approx(-10.0 - 1.0 - 3.5 - 45.0 - 0.5, abs=0.1)


def test_same_seed_same_traces() -> None:
    def trace(seed: int) -> list[float]:
        parts = build_sim_instruments(_description(seed=seed))
        sa = parts.instruments["sa"]
        sa.handle("INIT:CONT OFF;:FREQ:CENT 1 GHz;SPAN 1 MHz;:INIT;*WAI")
        return [float(v) for v in str(sa.handle("TRAC? TRACE1")).split(",")]

    assert trace(5) == trace(5)
    assert trace(5) != trace(6)


def test_faults_from_the_description_are_injected() -> None:
    faults = [{"role": "sa", "kind": "error", "at_command": 2, "code": -200, "text": "boom"}]
    with running(_description(faults=faults)) as s:
        sa = s["sa"]
        sa.query("*IDN?")
        sa.query("*IDN?")
        assert sa.query("SYST:ERR?").startswith("-200,")
        assert len(s.bench.faults.log) == 1


@pytest.mark.parametrize("name", ["default", "clean"])
def test_default_description_is_shipped_and_valid(name: str) -> None:
    assert name in shipped_benches()
    with start_sim_bench(name) as bench:
        assert bench.description.part == "kx-2417"
        assert bench.description.seed == 1
        cabling = bench.world.config.cabling
    # the totals the engine's built-in simulated bench file states as path losses (the
    # default's cables ripple about them, by up to 0.15 dB)
    ripple = bench.description.cables.ripple
    assert ripple == (0.15 if name == "default" else 0.0)
    assert cabling.rf.at(2.4e9) + cabling.combiner.at(2.4e9) == pytest.approx(3.0, abs=2 * ripple)
    assert cabling.rf2.at(2.4e9) + cabling.combiner.at(2.4e9) == pytest.approx(
        9.0, abs=2 * ripple + 0.4)  # and its combiner's rf2 input loses 0.4 dB more
    assert (cabling.lo.loss_db, cabling.if_.loss_db) == (2.0, 1.5)
    assert (cabling.rf_port.loss_db, cabling.lo_port.loss_db) == (2.5, 2.5)


def _write(tmp_path: Path, text: str) -> Path:
    path = tmp_path / "bench.toml"
    path.write_text(text, encoding="utf-8")
    return path


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ('part = "ideal"\n[cables]\nrf = "2 GHz"\n', "bench.toml:3"),
        ('part = "ideal"\n[cables]\nrff = "2 dB"\n', "rff"),
        ('part = "nonesuch"\n', "bench.toml:1: part"),
        ('part = "parts/missing.toml"\n', "bench.toml:1: part"),
        ('seed = "one"\n', "seed"),
        ('[[faults]]\nrole = "xx"\nkind = "drop"\nat_command = 3\n', "faults"),
        ('[analyzer]\nnoise_figure = "-3 dB"\n', "analyzer.noise_figure"),
        ('part = "ideal"\nseed = \n', "bench.toml:2"),
    ],
)
def test_bad_descriptions_name_file_and_key(tmp_path: Path, text: str, expected: str) -> None:
    with pytest.raises(InputError) as info:
        load_sim_bench_description(_write(tmp_path, text))
    assert expected in info.value.message()


def test_part_path_is_relative_to_the_description(tmp_path: Path) -> None:
    parts_dir = tmp_path / "parts"
    parts_dir.mkdir()
    ideal_text = (PARTS_DIR / "ideal.toml").read_text(encoding="utf-8")
    (parts_dir / "mine.toml").write_text(ideal_text, encoding="utf-8")
    description = load_sim_bench_description(
        _write(tmp_path, 'part = "parts/mine.toml"\nseed = 3\n')
    )
    assert Path(description.part) == parts_dir / "mine.toml"
    parts = build_sim_instruments(description)
    assert parts.world.part.name == "ideal"  # type: ignore[attr-defined]


@pytest.mark.parametrize("name", ["bad\x00name", "x" * 5000])
def test_a_sim_bench_name_no_file_can_have_is_a_located_error(name):
    from sweeprig.errors import InputError
    from sweeprig.sim.bench import resolve_description

    with pytest.raises(InputError):
        resolve_description(name)
