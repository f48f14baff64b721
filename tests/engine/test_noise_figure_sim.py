"""Noise figure by the Y-factor method on the simulated bench, through real pyvisa, against
the model's own truth (sweeprig.sim.noise_truth)."""

from __future__ import annotations

import statistics
from collections.abc import Iterator

import pytest

from sweeprig.clock import VirtualClock
from sweeprig.engine.noise_figure import NoiseBench
from sweeprig.errors import InstrumentError
from sweeprig.sim.bench import SimBench, start_sim_bench
from tests.engine.noise_support import IF_HZ, measure, open_noise_bench

BAND_HZ = (1.7e9, 1.95e9, 2.2e9, 2.45e9, 2.7e9)
LO_DRIVES_DBM = (-6.0, 0.0, 6.0)


@pytest.fixture(scope="module")
def calibrated() -> Iterator[tuple[SimBench, NoiseBench, object]]:
    with start_sim_bench(clock=VirtualClock()) as sim:
        nb, drivers = open_noise_bench(sim)
        nb.system_calibration([IF_HZ])
        try:
            yield sim, nb, drivers
        finally:
            nb.off()
            drivers.close()


def test_noise_figure_within_0p2_db_across_band_and_lo_drives_and_covered(
    calibrated: tuple[SimBench, NoiseBench, object],
) -> None:
    sim, nb, drivers = calibrated
    outcomes = [measure(sim, nb, drivers, rf, lo) for lo in LO_DRIVES_DBM for rf in BAND_HZ]
    for o in outcomes:
        assert abs(o.error_db) <= 0.2, (o.rf_hz, o.lo_dbm, o.error_db)
        assert o.result.flags == ()
        assert o.result.sideband == "dsb"
    covered = [abs(o.error_db) <= o.result.expanded_db for o in outcomes]
    assert sum(covered) / len(covered) >= 0.95
    assert all(o.result.expanded_db < 0.5 for o in outcomes)
    # a switching mixer's noise figure rises as its LO drive falls
    at = {o.lo_dbm: o.result.nf_dsb_db for o in outcomes if o.rf_hz == 2.2e9}
    assert at[6.0] < at[0.0] < at[-6.0]


def test_repeatability_over_ten_repeats(calibrated: tuple[SimBench, NoiseBench, object]) -> None:
    sim, nb, drivers = calibrated
    values = [measure(sim, nb, drivers, 2.2e9, 0.0).result.nf_dsb_db for _ in range(10)]
    assert statistics.stdev(values) <= 0.05


def test_drive_is_read_back_and_left_off(calibrated: tuple[SimBench, NoiseBench, object]
                                         ) -> None:
    sim, nb, _ = calibrated
    nb.source(True)
    assert sim.world.noise_source_on()
    nb.source(False)
    assert not sim.world.noise_source_on()
    assert sim.instruments["nsdc"].handle("OUTP?").strip() in ("0", "OFF")


def test_a_drive_in_current_limit_is_refused(calibrated: tuple[SimBench, NoiseBench, object]
                                             ) -> None:
    sim, nb, _ = calibrated
    spec = nb.spec
    nb.spec = spec.model_copy(update={"current_limit": 0.005})  # 5 mA: the drive collapses
    try:
        with pytest.raises(InstrumentError, match="not hot"):
            nb.source(True)
        assert not sim.world.noise_source_on()
    finally:
        nb.spec = spec
        nb.off()
