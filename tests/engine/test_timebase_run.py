"""Frequency references on the simulated bench: sources on their own crystals move every
product, and the windowed peak search still reads each at its level; a locked bench reads
them where computed; a lock the bench cannot hold is refused at connect with a clear message.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from sweeprig.engine.session import run_sequence, shipped_sequences_dir
from sweeprig.errors import InstrumentError
from sweeprig.store.sqlite import SqliteRunStore

SIM_BENCH = shipped_sequences_dir() / "benches" / "sim.toml"

SEQUENCE = """\
format = 1
[about]
title = "Reference offsets (fictional part)"
[part]
id = "KX-2407 (fictional)"
expected_gain = "12 dB"
expected_lo_if_isolation = "35 dB"
expected_rf_if_isolation = "30 dB"
[mixing]
conversion = "down"
lo_side = "low"
if_frequency = "70 MHz"
[conditions]
temperature = "25 degC"
supply = "3.3 V"
soak = "0 s"
settle = "20 ms"
[[study]]
name = "two-tone"
rf_frequency = "2.4 GHz"
tone_spacing = "1 MHz"
rf_power = "-20 dBm"
lo_power = "7 dBm"
read = ["wanted", "lo_at_if", "im3"]
"""

#: Sources on their own crystals at ±2 ppm (the issue's figure), the analyzer exact.
UNLOCKED_SIM = """\
[references]
crystal = { rf = "2 ppm", rf2 = "2 ppm", lo = "-2 ppm", sa = "0 ppm" }
"""
UNLOCKED_TIMEBASE = """
[timebase]
rf = { internal = "2 ppm" }
rf2 = { internal = "2 ppm" }
lo = { internal = "2 ppm" }
sa = { internal = "0.1 ppm" }
"""
#: The same crystals, every source's reference input cabled to the analyzer's 10 MHz out.
LOCKED_SIM = UNLOCKED_SIM + 'ref_in = { rf = "sa", rf2 = "sa", lo = "sa" }\n'
LOCKED_TIMEBASE = """
[timebase]
rf = { lock = "sa" }
rf2 = { lock = "sa" }
lo = { lock = "sa" }
sa = { internal = "0.1 ppm" }
"""


def files(folder: Path, sim_text: str, timebase: str) -> tuple[Path, Path, Path]:
    folder.mkdir(parents=True, exist_ok=True)
    seq = folder / "sequence.toml"
    seq.write_text(SEQUENCE, encoding="utf-8")
    bench = folder / "bench.toml"
    bench.write_text(SIM_BENCH.read_text(encoding="utf-8") + timebase, encoding="utf-8")
    desc = folder / "sim-bench.toml"
    desc.write_text(sim_text, encoding="utf-8")
    return seq, bench, desc


def run(folder: Path, sim_text: str, timebase: str) -> dict[str, dict]:
    seq, bench, desc = files(folder, sim_text, timebase)
    store = folder / "runs.sqlite"
    outcome = run_sequence(seq, bench, sim=True, sim_description=desc, store_path=store)
    assert outcome.status == "complete", outcome.reason
    with SqliteRunStore(store) as s:
        frame = s.readings_frame(outcome.run_id)
    return {row["name"]: {"level": row["level_dbm"], "span": row["span_hz"],
                          **json.loads(row["extra_json"])}
            for _, row in frame.iterrows() if row["port"] == "if"}


def test_unlocked_sources_move_the_products_and_the_search_finds_them(tmp_path: Path) -> None:
    unlocked = run(tmp_path / "u", UNLOCKED_SIM, UNLOCKED_TIMEBASE)
    locked = run(tmp_path / "l", LOCKED_SIM, LOCKED_TIMEBASE)
    for name in ("wanted", "im3.lower"):
        search = unlocked[name]["search"]
        step = unlocked[name]["span"] / 1000  # the trace's point spacing (1001 points)
        # IF = RF − LO: +2 ppm of 2.4 GHz and −(−2 ppm) of 2.33 GHz (ppm × frequency); the
        # lower IM3 (2·RF1 − RF2 − LO) moves the same
        assert search["offset_hz"] == pytest.approx(2e-6 * 2.4e9 + 2e-6 * 2.33e9,
                                                    abs=step), name
        assert abs(search["offset_hz"]) <= search["bound_hz"]
        assert abs(locked[name]["search"]["offset_hz"]) <= step
    for name in ("wanted", "wanted.tone2", "im3.lower", "im3.upper"):
        assert unlocked[name]["search"]["found"], name
        assert "search_flags" not in unlocked[name], name
        # the same level as on the locked bench (the log-detected noise around a strong line
        # is far below 0.5 dB)
        assert unlocked[name]["level"] == pytest.approx(locked[name]["level"], abs=0.5), name


def test_a_lock_the_bench_cannot_hold_is_refused_at_connect(tmp_path: Path) -> None:
    # the lo's reference input is not cabled: set to external it reports FREQuency unlocked
    sim_text = UNLOCKED_SIM + 'ref_in = { rf = "sa", rf2 = "sa" }\n'
    seq, bench, desc = files(tmp_path, sim_text, LOCKED_TIMEBASE)
    with pytest.raises(InstrumentError) as info:
        run_sequence(seq, bench, sim=True, sim_description=desc,
                     store_path=tmp_path / "runs.sqlite")
    message = info.value.message()
    assert "'lo'" in message and "unlocked" in message
    assert "bench.toml:" in message and "timebase.lo.lock" in message
