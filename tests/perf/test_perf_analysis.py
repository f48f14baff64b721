"""Benchmark: reduce a synthetic run of one million readings through every figure function.

Run with ``pytest -m perf tests/perf/test_perf_analysis.py -s``. The work happens in a fresh
child process so that its peak resident memory (``resource.ru_maxrss``) is its own.
Targets (issue 14): 5 s for the reduction and 1 GB peak memory (data included), printed
with the load average beside them, never asserted (a loaded machine is not a failure).
"""

from __future__ import annotations

import json
import os
import resource
import subprocess
import sys
import time
from pathlib import Path

import pytest

ROWS = 1_000_000
TIME_TARGET_S = 5.0
MEMORY_TARGET_MB = 1024.0


def reduce_run(rows: int) -> dict[str, float]:
    """Generate a synthetic run and push it through every figure function and the limits."""
    from sweeprig import analysis as an
    from sweeprig.analysis.figures import collector_paused
    from sweeprig.analysis.synthetic import synthetic_run

    captures = synthetic_run(rows, seed=1)
    start = time.perf_counter()
    cpu_start = time.process_time()
    # as reduce_run does: the whole reduction under one pause of the cyclic collector
    with collector_paused():
        figures, verdict = _reduce(an, captures)
    elapsed = time.perf_counter() - start
    cpu = time.process_time() - cpu_start
    peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0  # Linux: KiB
    return {
        "rows": float(len(captures)),
        "figures": float(len(figures)),
        "judgements": float(len(verdict.judgements)),
        "seconds": elapsed,
        "cpu_s": cpu,
        "peak_mb": peak_mb,
    }


def _reduce(an, captures):  # the analysis package, a capture table
    """Every figure function on ``captures``, then the limits: (figures, assessment)."""
    figures = []
    figures += an.conversion_gain_figures(captures, study="isolation")
    figures += an.gain_flatness_figures(captures, study="isolation", band_hz=(2.0e9, 2.5e9))
    figures += an.gain_tempco_figures(captures, study="isolation")
    figures += an.lo_drive_figures(captures, study="isolation")
    compression = an.compression_figures(captures, study="compression")
    figures += compression
    figures += an.intercept_figures(
        captures, study="two_tone", input_p1db_dbm=an.p1db_matcher(compression)
    )
    figures += an.spur_figures(captures, study="spurs", if_band_hz=(60e6, 80e6))
    figures += an.isolation_figures(captures, study="isolation")
    figures += an.image_rejection_figures(captures, study="isolation")
    figures += an.supply_figures(captures)
    limits = an.limits_from_mapping(
        {
            "iip3": {"min": 10.0},
            "input_p1db": {"min": 0.0},
            "spur_dbc": {"max": -40.0},
            "conversion_gain": {"min": 4.0, "conditions": {"temperature_c": 85.0}},
            "supply_current": {"max": "60 mA"},
        }
    )
    return figures, an.assess(figures, limits)


@pytest.mark.perf
def test_perf_reduce_one_million_readings():
    child = subprocess.run(
        [sys.executable, str(Path(__file__).resolve()), str(ROWS)],
        capture_output=True,
        text=True,
        check=False,
        timeout=600,
    )
    assert child.returncode == 0, child.stderr
    result = json.loads(child.stdout.strip().splitlines()[-1])

    def verdict(value: float, target: float) -> str:
        return "met" if value <= target else "MISSED"

    print(
        f"\nanalysis benchmark: {result['rows']:.0f} readings → {result['figures']:.0f} figures "
        f"({result['judgements']:.0f} limit checks) in {result['seconds']:.2f} s wall, "
        f"{result['cpu_s']:.2f} s CPU: {verdict(result['seconds'], TIME_TARGET_S)} against "
        f"{TIME_TARGET_S:.0f} s (CPU: {verdict(result['cpu_s'], TIME_TARGET_S)}); peak memory "
        f"{result['peak_mb']:.0f} MB: {verdict(result['peak_mb'], MEMORY_TARGET_MB)} against "
        f"{MEMORY_TARGET_MB:.0f} MB (load average {os.getloadavg()[0]:.1f} on "
        f"{os.cpu_count()} cores)"
    )


if __name__ == "__main__":
    print(json.dumps(reduce_run(int(sys.argv[1]) if len(sys.argv) > 1 else ROWS)))
