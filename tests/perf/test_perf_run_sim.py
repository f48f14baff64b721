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


#: Points of the large simulated run (issue 14: 10k points in at most 20 s of wall time).
LARGE_RUN_POINTS = 10_000


def large_sequence(points: int) -> str:
    """quick.toml with its gain study swept over ``points`` RF frequencies (wanted output
    only) and no two-tone study: a long run on the simulated bench, one reading per point."""
    text = QUICK.read_text(encoding="utf-8")
    head, _, _ = text.partition('[[study]]\nname = "two-tone"')
    gain = 'rf_frequency = { start = "2.3 GHz", stop = "2.5 GHz", step = "100 MHz" }'
    assert gain in head
    head = head.replace(gain, f'rf_frequency = {{ start = "2.3 GHz", stop = "2.5 GHz", '
                              f'points = {points} }}')
    head = head.replace('read = ["wanted", "lo_at_if", "rf_at_if", "supply_current"]',
                        'read = ["wanted"]')
    spec_at = text.index("[[spec]]")
    return head + text[spec_at:].split("[[spec]]\nfigure = \"iip3_dbm\"")[0]


@pytest.mark.perf
@pytest.mark.timeout(3600)  # a loaded machine takes well over the suite's 600 s
def test_print_large_simulated_run_wall_time(tmp_path: Path) -> None:
    import os

    sequence = tmp_path / "large.toml"
    sequence.write_text(large_sequence(LARGE_RUN_POINTS), encoding="utf-8")
    outcome = run_sequence(sequence, sim=True, store_path=tmp_path / "runs.sqlite")
    assert outcome.status == "complete", outcome.reason
    print(f"\n{LARGE_RUN_POINTS:,}-point simulated run (one reading per point): "
          f"{outcome.wall_elapsed_s:.1f} s of wall time, "
          f"{outcome.wall_elapsed_s / LARGE_RUN_POINTS * 1e3:.2f} ms per point (target 20 s; "
          f"load average {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores)")
