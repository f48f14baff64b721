"""Benchmark: the demo with its sources on their own crystals at ±2 ppm against the same
bench locked to one reference, and against a bench file without a [timebase].

Prints: the share of products the locked run found that the unlocked run found too, the
readings whose level moved more than 1 dB without a flag (wrong readings), bench time, wall
time, the summed sweep time of the analyzer readings, and SCPI transactions per point (bus
log). Issue figure: 100 % found, 0 wrong, unlocked at most 20 % slower than locked.

Run with ``pytest -m perf -s tests/perf/test_perf_timebase.py``.
"""

from __future__ import annotations

import json
import sqlite3
from pathlib import Path

import pytest

from sweeprig.engine.session import run_sequence, shipped_sequences_dir
from sweeprig.store.sqlite import SqliteRunStore
from tests.engine.test_timebase_run import (
    LOCKED_SIM,
    LOCKED_TIMEBASE,
    SIM_BENCH,
    UNLOCKED_TIMEBASE,
)

DEMO = shipped_sequences_dir() / "demo" / "kx2417-characterisation.toml"
#: ±2 ppm, signs mixed so that the wanted output moves by the sum (the worst case)
UNLOCKED_SIM = """\
[references]
crystal = { rf = "2 ppm", rf2 = "-2 ppm", lo = "-2 ppm", sa = "0 ppm" }
"""


def _run(folder: Path, sim_text: str, timebase: str) -> dict[str, object]:
    folder.mkdir(parents=True)
    bench = folder / "bench.toml"
    bench.write_text(SIM_BENCH.read_text(encoding="utf-8") + timebase, encoding="utf-8")
    desc = folder / "sim-bench.toml"
    desc.write_text(sim_text, encoding="utf-8")
    store = folder / "runs.sqlite"
    outcome = run_sequence(DEMO, bench, sim=True, sim_description=desc, store_path=store,
                           bus_log=True)
    assert outcome.status == "complete", outcome.reason
    with SqliteRunStore(store) as s:
        frame = s.readings_frame(outcome.run_id)
    with sqlite3.connect(store) as db:
        transactions = db.execute("SELECT COUNT(*) FROM bus_log WHERE run_id = ?",
                                  (outcome.run_id,)).fetchone()[0]
    readings = {}
    sweep_s = 0.0
    for _, row in frame.iterrows():
        extra = json.loads(row["extra_json"] or "{}")
        sweep_s += float(extra.get("sweep_s") or 0.0)
        if "search" in extra:
            readings[(row["point_index"], row["name"])] = (
                row["level_dbm"], extra["search"]["found"], extra.get("search_flags", []),
                row["noise_floor_dbm"], extra["search"])
    return {"outcome": outcome, "readings": readings, "sweep_s": sweep_s,
            "transactions": transactions}


@pytest.mark.perf
def test_print_unlocked_references_against_locked(tmp_path: Path) -> None:
    plain = _run(tmp_path / "plain", "", "")
    locked = _run(tmp_path / "locked", UNLOCKED_SIM + LOCKED_SIM.split("\n", 2)[2],
                  LOCKED_TIMEBASE)
    unlocked = _run(tmp_path / "unlocked", UNLOCKED_SIM, UNLOCKED_TIMEBASE)
    lr, ur = locked["readings"], unlocked["readings"]
    # a product clearly there on the locked bench: found, unflagged, 20 dB above its floor
    # (noise 20 dB down moves a level by under 1 dB: 20·log10(1 + 0.1)); weaker ones scatter
    # by the noise alone between any two runs
    clear = [k for k, (lv, found, flags, floor, *_r) in lr.items()
             if found and not flags and lv - floor >= 20.0]
    found = [k for k in clear if ur[k][1] and not ur[k][2]]
    wrong = [k for k in clear if not ur[k][2] and abs(ur[k][0] - lr[k][0]) > 1.0]
    present = clear
    flagged = sum(1 for v in ur.values() if v[2])
    n = locked["outcome"].points_done  # type: ignore[attr-defined]
    print(f"\n{DEMO.name}, {n} points, {len(lr)} searched analyzer readings per run")
    print(f"  products found: {len(found)} of {len(present)} the locked run found 20 dB clear "
          f"({100.0 * len(found) / max(len(present), 1):.1f} %); wrong readings (moved > 1 dB "
          f"without a flag): {len(wrong)}; flagged readings unlocked: {flagged}, locked: "
          f"{sum(1 for v in lr.values() if v[2])}")
    for label, r in (("no [timebase]", plain), ("locked", locked), ("unlocked ±2 ppm", unlocked)):
        o = r["outcome"]
        print(f"  {label:16s} bench {o.sim_elapsed_s:9.1f} s, wall {o.wall_elapsed_s:6.1f} s, "  # type: ignore[attr-defined]
              f"sweeps {r['sweep_s']:8.2f} s, transactions/point "
              f"{r['transactions'] / max(o.points_done, 1):.2f}")  # type: ignore[attr-defined]
    slower = unlocked["outcome"].sim_elapsed_s / locked["outcome"].sim_elapsed_s - 1.0  # type: ignore[attr-defined]
    sweeps = unlocked["sweep_s"] / max(locked["sweep_s"], 1e-9) - 1.0  # type: ignore[operator]
    print(f"  unlocked vs locked: bench time {100 * slower:+.1f} %, summed sweep time "
          f"{100 * sweeps:+.1f} %")
    share = len(found) / max(len(present), 1)
    print(f"  issue figures: 100 % found: {'met' if share == 1.0 else 'MISSED'} "
          f"({100.0 * share:.1f} %); 0 wrong readings: {'met' if not wrong else 'MISSED'} "
          f"({len(wrong)}); at most 20 % slower than locked: "
          f"{'met' if slower <= 0.20 else 'MISSED'} ({100 * slower:+.1f} % bench time)")
    aimed = sum(1 for v in ur.values() if v[4].get("aimed"))
    print(f"  unlocked searches aimed from earlier finds: {aimed} of {len(ur)}")
    for k in [k for k in clear if k not in found][:8]:
        print("  missed:", k, "locked", lr[k], "unlocked", ur[k])
    for k in wrong[:10]:
        print("  wrong:", k, "locked", lr[k], "unlocked", ur[k])
    assert not wrong
