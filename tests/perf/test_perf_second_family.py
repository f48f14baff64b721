"""Benchmark: the whole demo characterisation on a bench of the second simulated family
(FR-SA20 analyzer, FR-SG8 sources, FR-PM4 meter; their profiles and the [timebase] their
sources need) against the first family's bench, both served over loopback.

Both benches state the same [timebase] (every source and the analyzer on the house 10 MHz),
so the family is the only difference; figures with a suspect flag are left out (a flagged
figure claims no value within its uncertainty). Prints: figures compared, the largest
difference against the larger expanded uncertainty of the two (JCGM 100:2008 6.2, k = 2), how
many differ by more than it (issue figure: none, "the same figures within uncertainty"),
bench and wall time and SCPI exchanges of each run.

Run with ``pytest -m perf -s tests/perf/test_perf_second_family.py``.
"""

from __future__ import annotations

import math
import sqlite3
from pathlib import Path

import pytest

from sweeprig.analysis.figures import SUSPECT_FLAGS
from sweeprig.analysis.reduce import reduce_run
from sweeprig.clock import VirtualClock
from sweeprig.engine.session import run_sequence, served_bench_text, shipped_sequences_dir
from sweeprig.engine.sim_specs import SECOND_FAMILY_TIMEBASE_TOML
from sweeprig.sim.bench import SimBenchDescription, resolve_description, start_sim_bench
from sweeprig.store.sqlite import SqliteRunStore

DEMO = shipped_sequences_dir() / "demo" / "kx2417-characterisation.toml"


def _description(family: str) -> SimBenchDescription:
    base = resolve_description(None)
    return base.model_copy(update={
        part: getattr(base, part).model_copy(update={"family": family})
        for part in ("analyzer", "sources", "power_meter")})


def _run(tmp_path: Path, family: str, *, timebase: bool = True
         ) -> tuple[dict[tuple[str, int], tuple[float, float]], object, int]:
    description = _description(family)
    with start_sim_bench(description, clock=VirtualClock()) as sim:
        bench = tmp_path / f"bench-{family}-{timebase}.toml"
        text = served_bench_text(sim.resources, description)
        if timebase and "[timebase]" not in text:  # the same references on both benches:
            text += "\n" + SECOND_FAMILY_TIMEBASE_TOML  # only the family differs
        bench.write_text(text, encoding="utf-8")
        store = tmp_path / f"{family}-{timebase}.sqlite"
        outcome = run_sequence(DEMO, bench, store_path=store, bus_log=True)
        assert outcome.status == "complete", outcome.reason
    with SqliteRunStore(store, create=False) as s:
        run = reduce_run(s, outcome.run_id)
    with sqlite3.connect(store) as db:
        exchanges = db.execute("SELECT COUNT(*) FROM bus_log").fetchone()[0]
    figures: dict[tuple[str, int], tuple[float, float]] = {}
    counts: dict[str, int] = {}
    for f in run.figures:
        if not (math.isfinite(f.value) and math.isfinite(f.uncertainty_db)):
            continue
        if set(f.flags) & SUSPECT_FLAGS:  # a flagged figure claims no value within its U
            continue
        k = counts.get(f.name, 0)
        counts[f.name] = k + 1
        figures[(f.name, k)] = (f.value, f.uncertainty_db)
    return figures, outcome, exchanges


@pytest.mark.perf
def test_print_the_demo_on_both_families(tmp_path: Path) -> None:
    first, o1, x1 = _run(tmp_path, "tarnwick")
    second, o2, x2 = _run(tmp_path, "farrowmere")
    common = sorted(set(first) & set(second))
    worst, beyond = 0.0, []
    for key in common:
        (a, ua), (b, ub) = first[key], second[key]
        ratio = abs(a - b) / max(ua, ub, 1e-9)
        worst = max(worst, ratio)
        if ratio > 1.0:
            beyond.append((key, a, b, ua, ub))
    print(f"\n{DEMO.name}: {len(common)} figures with an uncertainty on both families "
          f"({len(first)} first, {len(second)} second, unflagged)")
    print(f"  largest |difference| / max(U): {worst:.2f}; beyond U: {len(beyond)} "
          f"({'met' if not beyond else 'MISSED'})")
    for label, o, x in (("first (TW)", o1, x1), ("second (FR)", o2, x2)):
        print(f"  {label:12s} bench {o.sim_elapsed_s:8.1f} s, wall {o.wall_elapsed_s:6.1f} s, "  # type: ignore[attr-defined]
              f"SCPI exchanges {x}")
    for item in beyond[:10]:
        print("  beyond:", item)
    # for information: the first family's bench as shipped (no [timebase]: products read at
    # their computed frequency, no search) against the second family's
    plain, _, _ = _run(tmp_path, "tarnwick", timebase=False)
    both = sorted(set(plain) & set(second))
    off = [k for k in both if abs(plain[k][0] - second[k][0]) > max(plain[k][1], second[k][1])]
    print(f"  first family without [timebase] against the second: {len(both)} unflagged "
          f"figures on both, {len(off)} differ beyond U")
    for k in off[:6]:
        print("  differs:", k, plain[k], second[k])
    assert not beyond
