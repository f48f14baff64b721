"""Benchmark: wall time of the quick demo sequence on the simulated bench, against the bench
time it simulates (the chamber soak passes in simulated time only).

Prints both and their ratio; moved here from the default suite, which asserts no wall times
(tests/engine/test_run_sim.py checks the same run's points, readings and safe state).

Run with ``pytest -m perf -s tests/perf/test_perf_run_sim.py``.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from sweeprig.engine.session import run_sequence, shipped_sequences_dir

QUICK = shipped_sequences_dir() / "demo" / "quick.toml"


@pytest.mark.perf
def test_print_quick_sequence_wall_time_on_the_simulated_bench(tmp_path: Path) -> None:
    outcome = run_sequence(QUICK, sim=True, store_path=tmp_path / "runs.sqlite")
    assert outcome.status == "complete", outcome.reason
    print(f"\nquick.toml on the simulated bench: {outcome.wall_elapsed_s:.2f} s of wall time for "
          f"{outcome.sim_elapsed_s:.0f} s of bench time "
          f"({outcome.sim_elapsed_s / max(outcome.wall_elapsed_s, 1e-9):.0f}× faster than the "
          f"bench; the default suite once required under 60 s of wall time)")
