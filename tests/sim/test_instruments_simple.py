"""The simple simulated instruments, through pyvisa over loopback, per docs/instruments.md."""

from __future__ import annotations

import math
import statistics
from collections.abc import Iterator

import numpy as np
import pytest
import pyvisa
from scipy.integrate import solve_ivp

from sweeprig.clock import VirtualClock, WallClock
from sweeprig.sim.instruments import (
    DcSupply,
    PowerMeter,
    RfSwitch,
    SignalSource,
    SimControl,
    ThermalChamber,
    default_level_error_db,
    no_level_error_db,
)
from sweeprig.sim.instruments.powermeter import sensor_cal_factor_percent
from sweeprig.sim.server import ServedBench, serve

Resource = pyvisa.resources.MessageBasedResource
LOAD_OHM = 20.0


class Sensor:
    """What the world would tell the power meter: the true power at the sensor, dBm."""

    def __init__(self) -> None:
        self.power_dbm = -10.0

    def __call__(self) -> float:
        return self.power_dbm


@pytest.fixture
def clock() -> VirtualClock:
    return VirtualClock()


@pytest.fixture
def sensor() -> Sensor:
    return Sensor()


@pytest.fixture
def bench(clock: VirtualClock, sensor: Sensor) -> Iterator[ServedBench]:
    instruments = {
        "rf": SignalSource(clock),
        "lo": SignalSource(clock, "SG6-10002", level_error_db=no_level_error_db,
                           harmonics_dbc=(-30.0, -40.0, -50.0)),
        "pm": PowerMeter(clock, sense=sensor, seed=5),
        "dc": DcSupply(clock, load=lambda v: v / LOAD_OHM),
        "chamber": ThermalChamber(clock),
        "switch": RfSwitch(clock),
        "simctl": SimControl(clock),
    }
    with serve(instruments) as served:
        yield served


@pytest.fixture
def rm() -> Iterator[pyvisa.ResourceManager]:
    manager = pyvisa.ResourceManager("@py")
    yield manager
    manager.close()


@pytest.fixture
def open_role(rm: pyvisa.ResourceManager, bench: ServedBench):
    def opener(role: str) -> Resource:
        return rm.open_resource(bench.resources[role], read_termination="\n",
                                write_termination="\n", timeout=2000)

    return opener


def _advance(simctl: Resource, amount: str) -> None:
    """Let simulated time pass; the query makes it complete before we talk to another role."""
    assert simctl.query(f"SIM:TIME:ADV {amount};*OPC?") == "1"
    assert simctl.query("SYST:ERR?") == '0,"No error"'


def _send(inst: Resource, command: str) -> None:
    """Write and wait until the instrument has executed it (``*OPC?``)."""
    assert inst.query(f"{command};*OPC?") == "1"


def _errors(inst: Resource) -> list[str]:
    found = []
    while not (entry := inst.query("SYST:ERR?")).startswith("0,"):
        found.append(entry)
    return found


def test_identities(open_role) -> None:
    expected = {
        "rf": "Tarnwick Labs,TW-SG6,SG6-10001,1.0",
        "pm": "Tarnwick Labs,TW-PM18,PM18-20001,1.0",
        "dc": "Tarnwick Labs,TW-PS30,PS30-30001,1.0",
        "chamber": "Kelderhall Thermal,KT-C70,C70-40001,1.0",
        "switch": "Tarnwick Labs,TW-RS2,RS2-50001,1.0",
        "simctl": "Tarnwick Labs,TW-SIMCTL,SIMCTL-1,1.0",
    }
    for role, idn in expected.items():
        assert open_role(role).query("*IDN?") == idn


# ---------------------------------------------------------------- signal source
def test_source_commands_and_views(open_role, bench: ServedBench) -> None:
    rf = open_role("rf")
    source = bench.instruments["rf"]
    assert rf.query("OUTP?") == "0"  # power-on: RF off
    rf.write("SOUR:FREQ:CW 2.4 GHz;:SOUR:POW:LEV:IMM:AMPL -15 DBM;:OUTP:STAT ON")
    assert rf.query("FREQ?;POW?;:OUTP?") == "2400000000;-15;1"
    assert (source.freq_hz, source.power_dbm, source.output_on) == (2.4e9, -15.0, True)
    assert source.delivered_power_dbm == pytest.approx(-15.0 + default_level_error_db(2.4e9))
    assert source.harmonics_dbc == (-35.0, -45.0)
    rf.write("FREQ 8 kHz")
    rf.write("FREQ 6.000001 GHz")
    rf.write("POW -131")
    rf.write("POW 20.5")
    assert rf.query("FREQ?;POW?") == "2400000000;-15"
    errors = _errors(rf)
    assert [e.split(",")[0] for e in errors] == ["-222"] * 4
    assert "caution" in errors[3]
    rf.write("POW 20;:FREQ 9 kHz")  # the limits themselves are allowed
    assert rf.query("FREQ?;POW?") == "9000;20"
    _send(rf, "OUTP OFF")
    assert not source.output_on


def test_source_level_error_options(bench: ServedBench) -> None:
    lo = bench.instruments["lo"]
    lo.handle("FREQ 3.3e9;POW 7")
    assert lo.delivered_power_dbm == 7.0
    assert lo.harmonics_dbc == (-30.0, -40.0, -50.0)
    freqs = np.linspace(9e3, 6e9, 20001)
    ripple = np.array([default_level_error_db(f) for f in freqs])
    assert np.max(np.abs(ripple)) <= 0.15
    assert np.max(np.abs(ripple)) > 0.05  # a ripple, not flat


def test_source_settling_advances_the_clock_on_opc(open_role, clock: VirtualClock) -> None:
    rf = open_role("rf")
    rf.write("FREQ 2e9")
    assert rf.query("*OPC?") == "1"
    assert 0 < clock.now() < 0.01


# ---------------------------------------------------------------- power meter
def test_power_meter_reading_units_and_averaging(open_role, sensor: Sensor,
                                                 clock: VirtualClock) -> None:
    pm = open_role("pm")
    assert pm.query("FREQ?;AVER:COUN?;:UNIT:POW?") == "1000000000;4;DBM"
    pm.write("SENS:FREQ 2.4GHZ;AVER:COUN 1")
    assert pm.query("SENS:FREQ?") == "2400000000"
    sensor.power_dbm = -10.0
    one = [float(pm.query("MEAS?")) for _ in range(200)]
    pm.write("AVER:COUN 64")
    many = [float(pm.query("READ?")) for _ in range(200)]
    # the sensor indicates its calibration factor's fraction of the power (software corrects)
    indicated = -10.0 + 10 * math.log10(sensor_cal_factor_percent(2.4e9) / 100)
    assert statistics.mean(one) == pytest.approx(indicated, abs=0.01)
    assert statistics.mean(many) == pytest.approx(indicated, abs=0.005)
    assert statistics.stdev(many) < statistics.stdev(one) / 4
    assert clock.now() > 200 * 0.005  # each reading took simulated time
    pm.write("UNIT:POW W")
    assert float(pm.query("MEAS:SCAL:POW:AC?")) == pytest.approx(
        1e-3 * 10 ** (indicated / 10), rel=0.01)
    assert _errors(pm) == []


def test_power_meter_range(open_role, sensor: Sensor) -> None:
    pm = open_role("pm")
    sensor.power_dbm = -100.0  # below range: the reading is noise, far above the truth
    low = [float(pm.query("MEAS?")) for _ in range(20)]
    assert all(-95.0 < r < -60.0 for r in low)
    sensor.power_dbm = -60.0  # bottom of the range: still close
    assert float(pm.query("MEAS?")) == pytest.approx(-60.0, abs=0.5)
    sensor.power_dbm = 21.0
    assert float(pm.query("MEAS?")) == 9.91e37
    (error,) = _errors(pm)
    assert error.startswith('-222,"Data out of range;') and "caution" in error


def test_power_meter_zeroing(sensor: Sensor) -> None:
    """CAL:ZERO removes a sensor's offset, read back by CAL:ZERO:STAT?; with a signal at the
    sensor it is refused (error -200, state 0), and a faulty sensor's zeroing does not take."""
    clock = VirtualClock()
    sensor.power_dbm = -200.0
    pm = PowerMeter(clock, sense=sensor, seed=3, zero_offset_dbm=-35.0)
    assert pm.handle("CAL:ZERO:STAT?") == "0" and pm.read_dbm() == pytest.approx(-35.0, abs=0.1)
    pm.handle("CAL:ZERO")
    assert pm.handle("CAL:ZERO:STAT?") == "1" and pm.read_dbm() < -60.0
    assert clock.now() >= 4.0  # zeroing takes time
    sensor.power_dbm = -20.0
    pm.handle("CAL:ZERO")
    assert pm.handle("CAL:ZERO:STAT?") == "0"
    assert pm.handle("SYST:ERR?").startswith("-200,")
    sensor.power_dbm = -200.0
    faulty = PowerMeter(clock, sense=sensor, zero_offset_dbm=-35.0, zero_holds=False)
    faulty.handle("CAL:ZERO")
    assert faulty.read_dbm() == pytest.approx(-35.0, abs=0.1)


def test_power_meter_is_repeatable_with_its_seed(sensor: Sensor) -> None:
    readings = []
    for _ in range(2):
        pm = PowerMeter(VirtualClock(), sense=sensor, seed=9)
        readings.append([pm.handle("MEAS?") for _ in range(5)])
    assert readings[0] == readings[1]


# ---------------------------------------------------------------- dc supply
def test_supply_power_on_state_and_constant_voltage(open_role, bench: ServedBench) -> None:
    dc = open_role("dc")
    supply = bench.instruments["dc"]
    assert dc.query("OUTP?;:VOLT?;:CURR?") == "0;0;0.1"
    dc.write("VOLT 5;CURR 0.5")
    assert dc.query("MEAS:VOLT?;:MEAS:CURR?") == "0;0"  # output still off
    dc.write("OUTP ON")
    assert float(dc.query("MEAS:VOLT:DC?")) == 5.0
    assert float(dc.query("MEAS:SCAL:CURR?")) == pytest.approx(5.0 / LOAD_OHM)
    assert supply.output_on and supply.output_voltage_v == 5.0
    assert dc.query("STAT:QUES:COND?") == "0"


def test_supply_constant_current(open_role, bench: ServedBench) -> None:
    dc = open_role("dc")
    dc.write("VOLT 12 V;CURR 200 MA;:OUTP ON")
    # Ohm's law: a 20-ohm load at the 0.2 A limit sits at 4 V
    assert float(dc.query("MEAS:VOLT?")) == pytest.approx(0.2 * LOAD_OHM, abs=1e-6)
    assert float(dc.query("MEAS:CURR?")) == pytest.approx(0.2)
    assert dc.query("STAT:QUES:COND?") == "2"
    assert bench.instruments["dc"].output_voltage_v == pytest.approx(4.0, abs=1e-6)
    dc.write("CURR 1")  # out of current limit again: 12 V across 20 ohm is 0.6 A
    assert float(dc.query("MEAS:VOLT?")) == 12.0
    assert dc.query("STAT:QUES:COND?") == "0"
    assert dc.query("STAT:QUES?") == "2"  # the event register latched, and reading clears it
    assert dc.query("STAT:QUES?") == "0"
    dc.write("VOLT 31")
    dc.write("CURR 3.5")
    assert [e.split(",")[0] for e in _errors(dc)] == ["-222", "-222"]
    dc.write("*RST")
    assert dc.query("OUTP?;:VOLT?") == "0;0"
    assert bench.instruments["dc"].output_voltage_v == 0.0


# ---------------------------------------------------------------- chamber
def _probe_numeric(air_c, t_end_s: float, probe0_c: float, tau_s: float) -> float:
    """Integrate dP/dt = (A(t) − P)/τ numerically (independent check of the closed form)."""
    sol = solve_ivp(lambda t, p: (air_c(t) - p) / tau_s, (0.0, t_end_s), [probe0_c],
                    rtol=1e-9, atol=1e-9, max_step=5.0)
    return float(sol.y[0, -1])


def test_chamber_ramp_and_probe_lag(open_role, clock: VirtualClock) -> None:
    chamber, simctl = open_role("chamber"), open_role("simctl")
    assert chamber.query("THER:CONT?;SETP?;RAMP?") == "0;23;5"
    assert float(chamber.query("THER:AIR?")) == 23.0
    _send(chamber, "THER:SETP 85 CEL;RAMP 10;CONT ON")
    _advance(simctl, "180 S")
    assert float(chamber.query("THER:AIR?")) == pytest.approx(53.0)

    def air(t: float) -> float:  # 10 degC/min from 23 to 85, then hold
        return min(23.0 + 10.0 * t / 60.0, 85.0)

    expected = _probe_numeric(air, 180.0, 23.0, 120.0)
    assert float(chamber.query("THER:PROB?")) == pytest.approx(expected, abs=1e-4)
    _advance(simctl, "600")
    assert float(chamber.query("THER:AIR?")) == 85.0
    expected = _probe_numeric(air, 780.0, 23.0, 120.0)
    assert float(chamber.query("THER:PROB?")) == pytest.approx(expected, abs=1e-4)
    _advance(simctl, "3600")
    assert float(chamber.query("THER:PROB?")) == pytest.approx(85.0, abs=1e-6)


def test_chamber_cooling_and_drift_when_off(open_role, bench: ServedBench) -> None:
    chamber, simctl = open_role("chamber"), open_role("simctl")
    model = bench.instruments["chamber"]
    _send(chamber, "THER:SETP -40;RAMP 5;CONT ON")
    _advance(simctl, "7200")
    assert float(chamber.query("THER:PROB?")) == pytest.approx(-40.0, abs=1e-6)
    _send(chamber, "THER:CONT OFF")
    _advance(simctl, "600")
    # air relaxes to ambient with τa = 600 s: −40 + (23 + 40)(1 − e^−1)
    air_c = 23.0 + (-40.0 - 23.0) * math.exp(-1.0)
    assert float(chamber.query("THER:AIR?")) == pytest.approx(air_c, abs=1e-9)
    expected = _probe_numeric(lambda t: 23.0 - 63.0 * math.exp(-t / 600.0), 600.0, -40.0, 120.0)
    assert model.probe_temperature_c() == pytest.approx(expected, abs=1e-4)
    _advance(simctl, "36000")
    assert model.probe_temperature_c() == pytest.approx(23.0, abs=1e-3)


def test_chamber_limits_and_reset(open_role, bench: ServedBench) -> None:
    chamber, simctl = open_role("chamber"), open_role("simctl")
    _send(chamber, "THER:SETP 181")
    _send(chamber, "THER:SETP -71")
    _send(chamber, "THER:RAMP 0")
    assert chamber.query("THER:SETP?;RAMP?") == "23;5"
    assert [e.split(",")[0] for e in _errors(chamber)] == ["-222"] * 3
    _send(chamber, "THER:SETP 100;CONT ON")
    _advance(simctl, "120")
    hot_c = float(chamber.query("THER:AIR?"))
    assert hot_c == pytest.approx(33.0)
    _send(chamber, "*RST")  # idle again; the air does not jump
    assert chamber.query("THER:CONT?") == "0"
    assert float(chamber.query("THER:AIR?")) == pytest.approx(hot_c)
    _advance(simctl, "60")
    assert float(chamber.query("THER:AIR?")) < hot_c


# ---------------------------------------------------------------- switch and simctl
def test_switch(open_role, bench: ServedBench) -> None:
    switch = open_role("switch")
    view = bench.instruments["switch"]
    assert view.channel == 1
    assert switch.query("ROUT:CLOS? (@1,2,3)") == "1,0,0"
    switch.write("ROUTE:CLOSE (@2)")
    assert switch.query("ROUT:CLOS? (@2)") == "1"
    assert view.channel == 2
    switch.write("ROUT:CLOS (@8)")
    switch.write("ROUT:CLOS (@1,3)")
    switch.write("ROUT:CLOS 1")
    assert [e.split(",")[0] for e in _errors(switch)] == ["-222", "-221", "-104"]
    assert view.channel == 2
    # The calibration sections: the sensor (4 RF plane, 5 LO plane) and the DUT position
    # (6 the part, 7 the thru) each keep one channel closed, apart from the analyzer's.
    assert switch.query("ROUT:CLOS? (@4:7)") == "1,0,1,0"
    switch.write("ROUT:CLOS (@5)")
    switch.write("ROUT:CLOS (@7)")
    assert switch.query("ROUT:CLOS? (@1:7)") == "0,1,0,0,1,0,1"
    assert (view.channel, view.sensor_channel, view.thru) == (2, 5, True)
    switch.write("*RST")
    assert switch.query("ROUT:CLOS? (@1:7)") == "1,0,0,1,0,1,0"


def test_simctl(open_role, clock: VirtualClock) -> None:
    simctl = open_role("simctl")
    assert simctl.query("SIM:MODE?") == "VIRT"
    assert simctl.query("SIM:TIME?") == "0"
    simctl.write("SIMULATION:TIME:ADVANCE 1.5 S")
    _advance(simctl, "250 MS")
    assert float(simctl.query("SIM:TIME?")) == pytest.approx(1.75)
    assert clock.now() == pytest.approx(1.75)
    simctl.write("SIM:TIME:ADV -1")
    assert [e.split(",")[0] for e in _errors(simctl)] == ["-222"]


def test_simctl_real_mode() -> None:
    assert SimControl(WallClock()).handle("SIM:MODE?") == "REAL"
