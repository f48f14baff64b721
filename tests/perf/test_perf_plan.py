"""Benchmark: planning the demo (every point's readings with their predictions and risks).

Prints the time to plan all points of the demo characterisation on the built-in simulated
bench, and the time of the risk survey `check` and `plan` add. Before the planner predicted
noise, distortion and contamination per reading, planning the demo took about 0.05 s on a
two-core development machine; with the predictions about 0.2-0.5 s (same machine, loaded).
Run with ``pytest -m perf -s tests/perf/test_perf_plan.py``.
"""

from __future__ import annotations

import time
from pathlib import Path

import pytest

from sweeprig.cli.check_cmd import _load_bench_or_sim
from sweeprig.formats.sequence import load_sequence
from sweeprig.plan import iter_points
from sweeprig.plan.risks import survey_risks

DEMO = Path(__file__).resolve().parents[2] / "sequences" / "demo" / \
    "kx2417-characterisation.toml"


@pytest.mark.perf
def test_plan_time_of_the_demo() -> None:
    bench, _ = _load_bench_or_sim(None)
    sequence = load_sequence(DEMO)
    start = time.perf_counter()
    readings = sum(sum(1 for r in p.readings if r.instrument in ("sa", "noise"))
                   for p in iter_points(sequence, bench))
    plan_s = time.perf_counter() - start
    start = time.perf_counter()
    survey = survey_risks(sequence, bench)
    survey_s = time.perf_counter() - start
    print(f"demo: {readings} analyzer readings planned in {plan_s:.3f} s "
          f"({plan_s / readings * 1e3:.3f} ms per reading); risk survey {survey_s:.3f} s; "
          f"{survey.readings_at_risk} readings at risk")
    assert survey.readings_total == readings
    assert plan_s < 10.0  # a guard against a pathological slowdown, far above the figure
