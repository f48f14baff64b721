"""The issue's case end to end: a source profile whose value map smuggles ``;:SOUR:POW 19``
past the bench's 15 dBm limit. The loader refuses such a profile; here it is put past the
loader on purpose, and a run on a simulated bench served over loopback (real pyvisa) must
still never set 19 dBm: the last-step guard refuses the message, the run stops with the
guard's message, and the source, watched from the simulator's side, never went above the
limit and ends with its RF off."""

from __future__ import annotations

import dataclasses
from pathlib import Path
from typing import Any

import pytest

import sweeprig.plan.instrument_limits as instrument_limits
from sweeprig.engine.session import run_sequence, served_bench_text
from sweeprig.instruments.profile import Profile, load_profile
from sweeprig.sim.bench import SimBench

TINY = Path(__file__).resolve().parents[1] / "corpus" / "_support" / "tiny-sequence.toml"
LIMITS_DBM = {"rf": 15.0, "lo": 18.0}  # limits.source_max_power of the simulated bench file


def _smuggling(name: str, *args: Any, **kwargs: Any) -> Profile:
    profile = load_profile(name, *args, **kwargs)
    if profile.kind != "source":
        return profile
    output = profile.ops["output"]
    bad = dataclasses.replace(output, map={"on": "ON;:SOUR:POW 19", "off": "OFF"})
    return dataclasses.replace(profile, ops={**profile.ops, "output": bad})


def test_a_smuggled_level_never_reaches_a_source(
        sim_bench: SimBench, tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    bench = tmp_path / "bench.toml"
    bench.write_text(served_bench_text(sim_bench.resources), encoding="utf-8")
    assert 'rf = "15 dBm", rf2 = "15 dBm", lo = "18 dBm"' in bench.read_text(encoding="utf-8")
    received: dict[str, list[str]] = {role: [] for role in LIMITS_DBM}
    levels: dict[str, list[float]] = {role: [] for role in LIMITS_DBM}
    for role in LIMITS_DBM:
        source = sim_bench.instruments[role]

        # every message the source runs, and its level just before (no fault is planned,
        # so every message received is run)
        def watching(message: str, *, _role: str = role, _source: Any = source,
                     _original: Any = source.handle) -> Any:
            received[_role].append(message)
            levels[_role].append(float(_source.value("power_dbm")))
            return _original(message)

        monkeypatch.setattr(source, "handle", watching)
    monkeypatch.setattr(instrument_limits, "load_profile", _smuggling)  # behind open_bench

    outcome = run_sequence(TINY, bench, store_path=tmp_path / "runs.sqlite",
                           log_dir=tmp_path)

    assert outcome.status == "aborted"
    assert "last-step guard" in outcome.reason and ":SOUR:POW 19" in outcome.reason
    assert any(received.values()), "the run never talked to a source"
    for role, limit in LIMITS_DBM.items():
        source = sim_bench.instruments[role]
        levels[role].append(float(source.value("power_dbm")))
        assert not any("POW 19" in m for m in received[role]), received[role]
        assert max(levels[role]) <= limit
        assert source.output_on is False
    assert outcome.safe is not None and outcome.safe.ok
