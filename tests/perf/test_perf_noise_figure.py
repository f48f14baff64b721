"""Benchmark: the Y-factor noise figure on the simulated bench against the model's truth.

Prints the issue's figures: the error (figure − model truth) of the double-sideband noise
figure across the demo band (1.7-2.7 GHz, 9 points) at three LO drives (−6, 0, +6 dBm), the
share of points whose stated k = 2 uncertainty covers the error, the repeatability (standard
deviation of 10 repeats at 2.2 GHz, 0 dBm LO), and the wall time of one point. The targets:
|error| ≤ 0.2 dB everywhere, σ ≤ 0.05 dB, coverage ≥ 95 %. The flags' planted cases are in
tests/planted (noise-figure-*) and tests/engine/test_noise_figure_flags.py.
"""

from __future__ import annotations

import statistics
import time

import pytest

from sweeprig.clock import VirtualClock
from sweeprig.sim.bench import start_sim_bench
from tests.engine.noise_support import IF_HZ, measure, open_noise_bench

pytestmark = pytest.mark.perf

BAND_HZ = tuple(1.7e9 + k * 125e6 for k in range(9))
LO_DRIVES_DBM = (-6.0, 0.0, 6.0)


def test_noise_figure_accuracy_repeatability_and_coverage() -> None:
    with start_sim_bench(clock=VirtualClock()) as sim:
        nb, drivers = open_noise_bench(sim)
        try:
            nb.system_calibration([IF_HZ])
            start = time.perf_counter()
            outcomes = [measure(sim, nb, drivers, rf, lo)
                        for lo in LO_DRIVES_DBM for rf in BAND_HZ]
            per_point_s = (time.perf_counter() - start) / len(outcomes)
            repeats = [measure(sim, nb, drivers, 2.2e9, 0.0).result.nf_dsb_db
                       for _ in range(10)]
        finally:
            nb.off()
            drivers.close()
    errors = [o.error_db for o in outcomes]
    covered = sum(abs(o.error_db) <= o.result.expanded_db for o in outcomes) / len(outcomes)
    sigma = statistics.stdev(repeats)
    print(f"\nnoise figure (DSB) on the simulated bench, {len(outcomes)} points "
          f"(9 frequencies x 3 LO drives):")
    for lo in LO_DRIVES_DBM:
        errs = [o.error_db for o in outcomes if o.lo_dbm == lo]
        nfs = [o.result.nf_dsb_db for o in outcomes if o.lo_dbm == lo]
        print(f"  LO {lo:+.0f} dBm: NF {min(nfs):.2f}..{max(nfs):.2f} dB, error "
              f"{min(errs):+.3f}..{max(errs):+.3f} dB")
    print(f"  max |error| {max(map(abs, errors)):.3f} dB (target <= 0.2)")
    print(f"  k = 2 coverage {100 * covered:.0f} % (target >= 95 %); median U "
          f"{statistics.median(o.result.expanded_db for o in outcomes):.3f} dB")
    print(f"  repeatability over 10 repeats: sigma {sigma:.4f} dB (target <= 0.05)")
    print(f"  wall time per point (hot, cold, 20 averages each): {per_point_s * 1e3:.0f} ms")
    assert max(map(abs, errors)) <= 0.2
    assert covered >= 0.95
    assert sigma <= 0.05
