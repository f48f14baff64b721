"""Benchmark: the per-drive two-tone figures (``im3_low``/``im3_high`` in dBc,
``iip3_point_low``/``iip3_point_high``) of the demo's two-tone study at its three
temperatures, held against the simulated part's own values
(:func:`sweeprig.sim.figure_truth.figure_truth`, the two-tone relation of FIELD-NOTES:
Razavi; Pozar), on the default simulated bench (uncalibrated: its tones reach the part up to
about 1 dB off) served over loopback, read both ways: without a ``[timebase]`` (a marker at
each product's computed frequency) and with every source and the analyzer locked to the house
10 MHz (a windowed peak search).

Every figure that claims a value (a number with an expanded uncertainty and no suspect flag,
:func:`sweeprig.analysis.run_agreement.claimed_figures`) must lie within its U of the part's
(JCGM 100:2008 6.2, k = 2); the two paths must agree within U figure for figure. Prints the
figures checked, the largest |error| / U and the largest |error|, per path.
Measured when this was written: 19 of the IM3 dBc figures were off by more than U (up to
1.7 dB with U 0.67 dB) before the budget carried the drive level twice; none after.

Run with ``pytest -m perf -s tests/perf/test_perf_im3_truth.py``.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from sweeprig.analysis.figures import Figure
from sweeprig.analysis.reduce import RunFigures, reduce_run
from sweeprig.analysis.run_agreement import agreement, claimed_figures
from sweeprig.clock import VirtualClock
from sweeprig.engine.session import run_sequence, served_bench_text
from sweeprig.engine.sim_specs import SECOND_FAMILY_TIMEBASE_TOML
from sweeprig.sim.bench import prepare_part, resolve_description, start_sim_bench
from sweeprig.sim.figure_truth import PER_DRIVE, figure_truth
from sweeprig.store.sqlite import SqliteRunStore

SEQUENCE = Path(__file__).parent / "data" / "two_tone_three_temperatures.toml"


def _run(tmp_path: Path, timebase: bool) -> RunFigures:
    description = resolve_description(None)
    with start_sim_bench(description, clock=VirtualClock()) as sim:
        text = served_bench_text(sim.resources, description)
        if timebase and "[timebase]" not in text:
            text += "\n" + SECOND_FAMILY_TIMEBASE_TOML
        bench = tmp_path / f"bench-{timebase}.toml"
        bench.write_text(text, encoding="utf-8")
        store = tmp_path / f"runs-{timebase}.sqlite"
        outcome = run_sequence(SEQUENCE, bench, store_path=store)
        assert outcome.status == "complete", outcome.reason
    with SqliteRunStore(store, create=False) as s:
        return reduce_run(s, outcome.run_id)


def _errors(run: RunFigures) -> list[tuple[Figure, float]]:
    part = prepare_part(resolve_description(None))
    out = []
    for f in claimed_figures(run.figures).values():
        if f.name not in PER_DRIVE:
            continue
        rows = run.captures[run.captures["point"].isin(f.points)].drop_duplicates("point")
        out.append((f, f.value - figure_truth(part, f.name, rows)))
    return out


@pytest.mark.perf
def test_print_the_per_drive_two_tone_figures_against_the_part(tmp_path: Path) -> None:
    runs = {label: _run(tmp_path, timebase) for label, timebase in
            (("marker (no [timebase])", False), ("search ([timebase])", True))}
    print(f"\n{SEQUENCE.name} on the default simulated bench:")
    off_all = []
    for label, run in runs.items():
        errors = _errors(run)
        off = [(f.name, f.conditions.get("temperature_c"), f.conditions.get("rf_power_dbm"),
                round(f.value, 2), round(e, 2), round(f.uncertainty_db, 2))
               for f, e in errors if abs(e) > f.uncertainty_db]
        off_all += off
        print(f"  {label:24s} {len(errors)} figures claimed; largest |error|/U "
              f"{max(abs(e) / f.uncertainty_db for f, e in errors):.2f}, largest |error| "
              f"{max(abs(e) for _, e in errors):.2f} dB; beyond U: {len(off)}")
        for item in off[:6]:
            print("    beyond:", item)
    paths = agreement(*(run.figures for run in runs.values()))
    print(f"  the two paths: {len(paths.pairs)} figures claimed on both, "
          f"{len(paths.beyond)} differ beyond U (largest |difference|/U "
          f"{paths.worst_ratio:.2f})")
    assert not off_all
    assert not paths.beyond
