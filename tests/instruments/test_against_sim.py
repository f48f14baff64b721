"""The generic profiles drive the simulated instruments (docs/instruments.md) unchanged:
in process through FakeTransport(handle), and over loopback sockets through pyvisa-py."""

from __future__ import annotations

import numpy as np
import pytest

from sweeprig.clock import VirtualClock
from sweeprig.errors import InstrumentError
from sweeprig.instruments import make_driver

sim_instruments = pytest.importorskip("sweeprig.sim.instruments")
sim_analyzer = pytest.importorskip("sweeprig.sim.instruments.analyzer")
sim_display = pytest.importorskip("sweeprig.sim.analyzer_display")

from sweeprig.transport import FakeTransport  # noqa: E402

TONE_HZ, TONE_DBM = 70e6, -20.0


def _analyzer(clock):
    spectrum = sim_display.InputSpectrum(lines=((TONE_HZ, TONE_DBM),))
    return sim_analyzer.SpectrumAnalyzer(clock, lambda: spectrum, seed=3)


def _prepared(kind, instrument, role):
    driver = make_driver(kind, role, FakeTransport(instrument.handle, resource=f"sim::{role}"))
    driver.identify()
    driver.reset()
    driver.clear()
    driver.prepare()
    return driver


def test_source_supply_chamber_switch_powermeter_simctl():
    clock = VirtualClock()
    src = _prepared("source", sim_instruments.SignalSource(clock), "rf")
    src.set_frequency(2.4e9)
    src.set_power(-10.0)
    src.set_output(True)
    src.check_errors()
    assert src.query_frequency_hz() == 2.4e9
    assert src.query_power_dbm() == -10.0
    assert src.query_output() is True
    src.safe()
    assert src.query_output() is False

    dc = _prepared("supply", sim_instruments.DcSupply(clock), "dc")
    dc.set_current_limit(0.2)
    dc.set_voltage(5.0)
    dc.set_output(True)
    dc.check_errors()
    assert dc.measure_voltage_v() == pytest.approx(5.0, abs=0.1)
    assert dc.measure_current_a() >= 0.0
    assert dc.in_current_limit() in (True, False)
    dc.safe()
    assert dc.query_output() is False

    chamber = _prepared("chamber", sim_instruments.ThermalChamber(clock), "chamber")
    chamber.set_setpoint_c(40.0)
    chamber.set_control(True)
    chamber.set_ramp_c_per_min(5.0)
    chamber.check_errors()
    assert chamber.probe_temperature_c() == pytest.approx(23.0, abs=1.0)
    clock.sleep(3600)
    assert chamber.air_temperature_c() == pytest.approx(40.0, abs=0.5)
    chamber.safe(idle_setpoint_c=23.0)
    chamber.check_errors()

    switch = _prepared("switch", sim_instruments.RfSwitch(clock), "switch")
    switch.select(2)
    assert switch.is_closed(2) is True
    assert switch.is_closed(1) is False
    switch.check_errors()

    pm = _prepared("powermeter", sim_instruments.PowerMeter(clock, sense=lambda: -12.0), "pm")
    pm.set_frequency(2.4e9)
    pm.set_averages(4)
    assert pm.read_power_dbm() == pytest.approx(-12.0, abs=0.5)
    pm.check_errors()

    simctl = _prepared("simctl", sim_instruments.SimControl(clock), "simctl")
    before = simctl.time_s()
    simctl.advance(30.0)
    assert simctl.time_s() == pytest.approx(before + 30.0)
    assert simctl.mode() in ("VIRT", "REAL")
    simctl.check_errors()


def test_analyzer_marker_peak_trace():
    clock = VirtualClock()
    sa = _prepared("analyzer", _analyzer(clock), "sa")
    sa.configure(centre_hz=TONE_HZ, span_hz=1e6, rbw_hz=10e3, ref_level_dbm=0.0,
                 attenuation_db=10.0, averages=1, points=1001)
    sa.sweep()
    sa.check_errors()
    assert sa.marker_level_dbm(TONE_HZ) == pytest.approx(TONE_DBM, abs=1.0)
    freq_hz, level_dbm = sa.peak()
    assert freq_hz == pytest.approx(TONE_HZ, abs=2e3)
    assert level_dbm == pytest.approx(TONE_DBM, abs=1.0)
    binary = sa.trace(binary=True)
    ascii_ = sa.trace(binary=False)
    assert binary.shape == ascii_.shape == (1001,)
    np.testing.assert_allclose(binary, ascii_, atol=1e-3)
    assert sa.sweep_flags()[0] is False
    sa.check_errors()
    assert sa.sweep_time_s() > 0


def test_refused_setting_is_reported_by_check_errors():
    clock = VirtualClock()
    sa = _prepared("analyzer", _analyzer(clock), "sa")
    # the profile's span limit is the instrument's, so provoke a device error another way
    sa.write("SENS:FREQ:CENT 99 GHZ")
    with pytest.raises(InstrumentError) as err:
        sa.check_errors()
    assert "-222" in str(err.value) and "SENS:FREQ:CENT 99 GHZ" in str(err.value)


def test_over_loopback_sockets_with_pyvisa():
    server = pytest.importorskip("sweeprig.sim.server")
    from sweeprig.transport.visa import VisaTransport, open_resource_manager

    clock = VirtualClock()
    instruments = {"rf": sim_instruments.SignalSource(clock), "sa": _analyzer(clock)}
    rm = open_resource_manager("@py")
    with server.serve(instruments) as bench:
        transports = {
            role: VisaTransport(resource, resource_manager=rm, timeout_s=5.0)
            for role, resource in bench.resources.items()
        }
        try:
            rf = make_driver("scpi-source", "rf", transports["rf"])
            sa = make_driver("scpi-analyzer", "sa", transports["sa"])
            for driver in (rf, sa):
                driver.identify()
                driver.reset()
                driver.clear()
                driver.prepare()
            rf.set_frequency(1e9)
            rf.set_power(-15.0)
            rf.set_output(True)
            rf.check_errors()
            sa.configure(centre_hz=TONE_HZ, span_hz=1e6, rbw_hz=10e3, ref_level_dbm=0.0,
                         attenuation_db=10.0, averages=1)
            sa.sweep()
            assert sa.marker_level_dbm(TONE_HZ) == pytest.approx(TONE_DBM, abs=1.0)
            assert sa.trace().size == 1001
            sa.check_errors()
            rf.safe()
        finally:
            for transport in transports.values():
                transport.close()
    rm.close()
