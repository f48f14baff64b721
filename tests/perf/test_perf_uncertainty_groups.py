"""Benchmark: the uncertainty budgets of a 10k-point run, per group against per figure.

Run with ``pytest -m perf tests/perf/test_perf_uncertainty_groups.py -s``. A synthetic store
of 10,000 points (``synthetic_store.py``, a fictional part) is reduced once; its figures and
captures are then given to the per-figure reference (``reference_budget`` of
tests/analysis/test_uncertainty_groups.py: every figure's whole budget, one at a time, as
earlier versions made them) and to the grouped path (``grouped_budgets``, what
``attach_uncertainty`` uses: a shared part per kind, the noise per figure with numpy),
interleaved, three times each. Printed: the CPU time of each (median of 3), their ratio,
the CPU time of ``reduce_run`` (median of 3), the number of figures with a budget and of
distinct shared parts, and the load average (a shared machine).
Asserted: every figure's budget is the reference's, line for line, and its expanded
uncertainty within 1e-12 dB (no time is asserted).
"""

from __future__ import annotations

import os
import statistics
import time
from pathlib import Path

import pytest
from synthetic_store import write_synthetic_store

from sweeprig.analysis.budget_groups import grouped_budgets
from sweeprig.analysis.reduce import reduce_run
from sweeprig.analysis.uncertainty import (
    UNCALIBRATED,
    InstrumentSpecs,
    PointLevels,
    small_signal_gain_u,
)
from sweeprig.store.sqlite import SqliteRunStore
from tests.analysis.test_uncertainty_groups import assert_same_budgets, reference_budget

POINTS = 10_000


@pytest.mark.perf
def test_perf_uncertainty_budgets_grouped_against_per_figure(tmp_path: Path) -> None:
    path = tmp_path / "runs.sqlite"
    run_id = int(write_synthetic_store(path, POINTS)["run_id"])
    reduce_cpu = []
    with SqliteRunStore(path, create=False) as store:
        for _ in range(3):
            start = time.process_time()
            run = reduce_run(store, run_id)
            reduce_cpu.append(time.process_time() - start)
    figures, captures = list(run.figures), run.captures
    specs = InstrumentSpecs()
    with_budget = assert_same_budgets(figures, captures, specs)
    levels = PointLevels.from_captures(captures)
    small_signal_u = small_signal_gain_u(figures, levels)
    cpu: dict[str, list[float]] = {"per figure": [], "grouped": []}
    distinct = 0
    for _ in range(3):
        start = time.process_time()
        for f in figures:
            reference_budget(f, levels, specs, UNCALIBRATED, small_signal_u)
        cpu["per figure"].append(time.process_time() - start)
        start = time.process_time()
        budgets = grouped_budgets(figures, captures, specs, UNCALIBRATED)
        cpu["grouped"].append(time.process_time() - start)
        distinct = len({id(b.shared) for b in budgets if b is not None})
    per, grouped = (statistics.median(cpu[k]) for k in ("per figure", "grouped"))
    print(f"\n{len(figures)} figures, {with_budget} with a budget, {distinct} distinct "
          f"shared parts (grouped); load average {os.getloadavg()[0]:.2f}")
    print(f"budgets, CPU s (median of 3): per figure {per:.3f}, grouped {grouped:.3f}, "
          f"ratio grouped/per figure {grouped / per:.2f}")
    print(f"reduce_run, CPU s (median of 3): {statistics.median(reduce_cpu):.3f} "
          f"({', '.join(f'{t:.3f}' for t in reduce_cpu)})")
