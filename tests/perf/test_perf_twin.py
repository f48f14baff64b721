"""Benchmarks of the twin fit's honesty and cost, printing their figures:

* Monte-Carlo coverage of the fit's 95 % intervals on figures the model makes itself, with
  Gaussian scatter (tests/twin/montecarlo.py): about 95 % of repeats should hold the truth;
* recovery on the simulated bench: the small twin sequence run on the built-in bench with
  several seeds (its analyzer noise and leakage phases change with the seed), fitted, and
  the shipped part's parameters held against the stated intervals; with the fit's time.

* the full demo upconverter (KX-5860U) run on the clean bench, fitted, and run again on its
  twin: the fit's time, the parameters against the part's truth, and the worst twin −
  measured difference of each figure against the twin's targets.

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


@pytest.mark.perf
def test_print_the_demo_upconverters_twin(tmp_path):
    from sweeprig.analysis.reduce import reduce_run
    from sweeprig.engine.session import shipped_sequences_dir
    from sweeprig.sim.bench import prepare_part, resolve_description
    from sweeprig.store.sqlite import SqliteRunStore
    from sweeprig.twin.compare import compare_figures
    from sweeprig.twin.partfile import write_part_file

    demo = shipped_sequences_dir() / "demo" / "kx5860u-upconverter.toml"
    (tmp_path / "part").mkdir()
    store = run_on_sim(demo, tmp_path / "part")
    start = time.process_time()
    twin = fit_stored_run(store, 1)
    took = time.process_time() - start
    truth = prepare_part(resolve_description("clean").model_copy(update={"part": "kx-5860u"}))
    true_values = {
        "core.tail_current": truth.tail_current_a,
        "core.emitter_degeneration": truth.emitter_degeneration_ohm,
        "ports.if.highpass": truth.if_port.highpass_hz,
        "ports.if.lowpass": truth.if_port.lowpass_hz,
        "core.aux_current": truth.aux_current_a,
        "isolation.lo_to_rf": truth.isolation_lo_rf_db,
        "isolation.lo_to_if": truth.isolation_lo_if_db,
    }
    print(f"\nKX-5860U demo upconverter twin (fit {took:.1f} s processor, "
          f"{twin.fit.observations} figures):")
    for key, value in true_values.items():
        p = twin.fit.parameter(key)
        k = p.display_scale
        print(f"  {key}: {p.value * k:.4g} [{p.low * k:.4g}, {p.high * k:.4g}] {p.unit}, "
              f"truth {value * k:.4g}: {'inside' if p.covers(value) else 'OUTSIDE'}"
              f"{' (weakly identified)' if p.weakly_identified else ''}")
    write_part_file(twin.text, tmp_path / "twin.toml")
    sequence = tmp_path / "on-twin.toml"
    sequence.write_text(demo.read_text(encoding="utf-8").replace(
        'sim_part = "kx-5860u"', 'sim_part = "twin.toml"', 1), encoding="utf-8")
    (tmp_path / "twin").mkdir()
    twin_store = run_on_sim(sequence, tmp_path / "twin")
    figures = []
    for path in (store, twin_store):
        with SqliteRunStore(path, create=False) as db:
            figures.append(reduce_run(db, 1).figures)
    pairs = compare_figures(*figures)
    for name in dict.fromkeys(p.name for p in pairs):
        diffs = [p.difference for p in pairs if p.name == name]
        worst = max(diffs, key=abs)
        target = next(p.target for p in pairs if p.name == name)
        print(f"  {name} ×{len(diffs)}: worst twin − measured {worst:+.3f} (target ±{target:g})")
    assert all(p.within for p in pairs), [p for p in pairs if not p.within][:3]
