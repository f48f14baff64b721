"""Benchmarks of the twin fit's honesty and cost, printing their figures:

* Monte-Carlo coverage of the fit's 95 % intervals on figures the model makes itself, with
  Gaussian scatter (tests/twin/montecarlo.py): about 95 % of repeats should hold the truth;
* recovery on the simulated bench: the small twin sequence run on the built-in bench with
  several seeds (its analyzer noise and leakage phases change with the seed), fitted, and
  the shipped part's parameters held against the stated intervals; with the fit's time.

Run with ``pytest -m perf -s tests/perf/test_perf_twin.py``.
"""

from __future__ import annotations

import time

import pytest

from sweeprig.sim.mixer import load_part
from sweeprig.sim.names import BENCHES_DIR
from sweeprig.twin.from_run import fit_stored_run
from tests.twin.montecarlo import coverage
from tests.twin.runs import SMALL, run_on_sim

REPEATS = 40
SEEDS = (3, 5, 7, 9)


@pytest.mark.perf
def test_print_monte_carlo_coverage_of_the_intervals():
    start = time.process_time()
    hits = coverage(range(REPEATS))
    n = hits.pop("repeats")
    print(f"\nMonte-Carlo coverage of the 95 % intervals over {n} repeats "
          f"({time.process_time() - start:.0f} s processor):")
    for key, k in hits.items():
        print(f"  {key}: {k}/{n} = {100 * k / n:.0f} %")
        assert k >= 0.8 * n, (key, k, n)  # far below 95 % would mean the intervals lie


@pytest.mark.perf
def test_print_recovery_on_the_simulated_bench_over_seeds(tmp_path):
    truth = load_part("kx-2417")
    true_values = {
        "core.tail_current": truth.tail_current_a,
        "core.emitter_degeneration": truth.emitter_degeneration_ohm,
        "ports.lo.resistance": truth.lo_port.resistance_ohm,
        "core.aux_current": truth.aux_current_a,
        "isolation.lo_to_if": truth.isolation_lo_if_db,
        "isolation.lo_to_rf": truth.isolation_lo_rf_db,
        "mismatch.load": truth.load_mismatch,
    }
    covered = dict.fromkeys(true_values, 0)
    print("\nrecovery of the KX-2417 on the simulated bench (small twin sequence):")
    for seed in SEEDS:
        folder = tmp_path / f"seed-{seed}"
        folder.mkdir()
        description = folder / "bench.toml"
        text = (BENCHES_DIR / "default.toml").read_text(encoding="utf-8")
        description.write_text(text.replace("\nseed = 1\n", f"\nseed = {seed}\n", 1),
                               encoding="utf-8")
        store = run_on_sim(SMALL, folder, str(description))
        start = time.process_time()
        twin = fit_stored_run(store, 1, sim_description=description)
        took = time.process_time() - start
        row = []
        for key, value in true_values.items():
            p = twin.fit.parameter(key)
            covered[key] += p.covers(value)
            row.append(f"{key.split('.')[-1]} {p.value * p.display_scale:.4g} "
                       f"[{p.low * p.display_scale:.4g}, {p.high * p.display_scale:.4g}]")
        print(f"  seed {seed} (fit {took:.1f} s processor): " + "; ".join(row))
    for key, k in covered.items():
        print(f"  {key}: truth inside the interval in {k}/{len(SEEDS)} seeds")
