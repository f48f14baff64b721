"""Port mismatch on the simulated bench: a reflection coefficient per connection, so the
part, the power sensor and the calibration thru each get the wave their own junction lets
through, within the published mismatch limits."""

from __future__ import annotations

import math

import numpy as np
import pytest

from sweeprig.analysis.uncertainty import mismatch_limits_db
from sweeprig.sim.bench import build_sim_instruments, resolve_description
from sweeprig.sim.mismatch import PortMatch

BAND = np.linspace(1.7e9, 2.7e9, 2001)


def test_a_junction_stays_within_the_mismatch_limits_and_reaches_them() -> None:
    match = PortMatch((("source_rf", 0.2), ("part_rf", 0.3)), seed=4, delay_s=5e-9)
    moved = match.junction_db_array("source_rf", "part_rf", BAND)
    # Pozar, Microwave Engineering, mismatch uncertainty: 20·log10(1 ± |Γs||ΓL|), recomputed
    # here from the formula (the project's helper is checked against it too).
    low, high = 20 * math.log10(1 - 0.06), 20 * math.log10(1 + 0.06)
    assert mismatch_limits_db(0.2, 0.3) == pytest.approx((low, high))
    # the junction moves the power by −20·log10|1 − ΓaΓb|: between −high and −low (a reading
    # corrected for a matched port is then off by the limits themselves)
    assert -high - 1e-12 <= moved.min() and moved.max() <= -low + 1e-12
    # the phase turns across the band, so both limits are nearly reached
    assert moved.min() < -0.95 * high and moved.max() > -0.95 * low
    assert match.junction_db("source_rf", "part_rf", 2.2e9) == pytest.approx(
        float(match.junction_db_array("source_rf", "part_rf", np.array([2.2e9]))[0]))
    assert match.junction_db("source_rf", "sensor", 2.2e9) == 0.0  # a matched sensor


def _drive(parts, f: float = 2.2e9) -> None:
    for role, freq, level in (("rf", f, -10.0), ("lo", f - 100e6, 2.0)):
        source = parts.instruments[role]
        source.put_value("freq_hz", freq)
        source.put_value("power_dbm", level)
        source.put_value("output_on", True)
    dc = parts.instruments["dc"]
    dc.put_value("voltage_v", 3.3)
    dc.put_value("output_on", True)


def test_the_part_and_the_sensor_each_get_their_own_junctions_wave() -> None:
    parts = build_sim_instruments("bench-errors")
    world, match = parts.world, parts.world.config.match
    assert match is not None and match.magnitude("part_rf") == 0.1
    _drive(parts)
    z0 = world.rf_inputs()[0]  # what a matched (Z0) load would absorb: the truth's drive
    response = world.response()
    given = world.evaluation_inputs(response)
    assert given is not None
    expected = z0.power_dbm + match.junction_db("source_rf", "part_rf", z0.freq_hz)
    assert given.rf[0].power_dbm == pytest.approx(expected)
    assert given.rf[0].power_dbm != pytest.approx(z0.power_dbm, abs=1e-6)
    # the sensor's junction: its own Γ against the RF feed's
    sensed = world.sensed_power_dbm()
    clean = 10 * math.log10(sum(10 ** ((z0.power_dbm + h) / 10) for h in (0.0,
                                                                         *z0.harmonics_dbc)))
    assert sensed == pytest.approx(
        clean + match.junction_db("source_rf", "sensor", z0.freq_hz), abs=1e-3)


def test_the_clean_bench_has_no_mismatch() -> None:
    assert resolve_description("clean").world_config().match is None
    errors = resolve_description(None).match
    # padded test ports: the gain tolerance stays reachable (docs/sim-bench.md)
    worst = sum(20 * math.log10(1 + a * b) for a, b in (
        (errors.source_rf, errors.part_rf), (errors.source_rf, errors.sensor),
        (errors.part_if, errors.load_if), (errors.source_rf, errors.load_if)))
    assert worst < 0.05
