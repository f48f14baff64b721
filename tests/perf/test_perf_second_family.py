"""Benchmark: the whole demo characterisation on a bench of the second simulated family
(FR-SA20 analyzer, FR-SG8 sources, FR-PM4 meter; their profiles and the [timebase] their
sources need) against the first family's bench, both served over loopback.

Both benches state the same [timebase] (every source and the analyzer on the house 10 MHz),
so the family is the only difference; figures with a suspect flag are left out (a flagged
figure claims no value within its uncertainty), and a figure of one run is held against the
figure of the same name and conditions of the other
(:func:`sweeprig.analysis.run_agreement.agreement`; pairing the k-th unflagged figure of a
name compared different drive points wherever one bench flagged a point the other did not).
Also holds the first family's bench without a [timebase] (marker at the computed frequency)
against the same bench with one (windowed search): the two reading paths. Prints: figures
compared, the largest difference against the larger expanded uncertainty of the two
(JCGM 100:2008 6.2, k = 2), how many differ by more than it (issue figure: none, "the same
figures within uncertainty"; for the two reading paths also none), bench and wall time and
SCPI exchanges of each run.

Run with ``pytest -m perf -s tests/perf/test_perf_second_family.py``.
"""

from __future__ import annotations

import sqlite3
from pathlib import Path

import pytest

from sweeprig.analysis.figures import Figure
from sweeprig.analysis.reduce import reduce_run
from sweeprig.analysis.run_agreement import agreement
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
         ) -> tuple[tuple[Figure, ...], object, int]:
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
    return tuple(run.figures), outcome, exchanges


def _shown(pair: tuple[Figure, Figure]) -> tuple[object, ...]:
    a, b = pair
    return (a.name, dict(a.conditions).get("temperature_c"),
            dict(a.conditions).get("rf_power_dbm"), round(a.value, 2), round(b.value, 2),
            round(a.uncertainty_db, 2), round(b.uncertainty_db, 2))


@pytest.mark.perf
def test_print_the_demo_on_both_families(tmp_path: Path) -> None:
    first, o1, x1 = _run(tmp_path, "tarnwick")
    second, o2, x2 = _run(tmp_path, "farrowmere")
    families = agreement(first, second)
    beyond = families.beyond
    print(f"\n{DEMO.name}: {len(families.pairs)} figures claimed on both families "
          f"(same name and conditions; unflagged, with an uncertainty)")
    print(f"  largest |difference| / max(U): {families.worst_ratio:.2f}; beyond U: "
          f"{len(beyond)} ({'met' if not beyond else 'MISSED'})")
    for label, o, x in (("first (TW)", o1, x1), ("second (FR)", o2, x2)):
        print(f"  {label:12s} bench {o.sim_elapsed_s:8.1f} s, wall {o.wall_elapsed_s:6.1f} s, "  # type: ignore[attr-defined]
              f"SCPI exchanges {x}")
    for pair in beyond[:10]:
        print("  beyond:", _shown(pair))
    # the first family's bench as shipped (no [timebase]: products read at their computed
    # frequency, no search) against the same bench with one (a windowed search): the two
    # reading paths must agree on every figure both claim
    plain, _, _ = _run(tmp_path, "tarnwick", timebase=False)
    paths = agreement(plain, first)
    print(f"  first family without [timebase] against with: {len(paths.pairs)} figures "
          f"claimed on both, {len(paths.beyond)} differ beyond U "
          f"(largest |difference| / max(U) {paths.worst_ratio:.2f})")
    for pair in paths.beyond[:6]:
        print("  differs:", _shown(pair))
    assert not beyond
    assert not paths.beyond
