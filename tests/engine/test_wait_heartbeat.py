"""A run that waits (chamber ramp, soak) keeps its heartbeat fresh and says what it waits
for: `runs` and `status` show it live however long the soak, with the set point, the probe
and the time left; a point's own commit is its heartbeat (no extra write per point)."""

from __future__ import annotations

import itertools
from pathlib import Path

from typer.testing import CliRunner

from sweeprig.cli.main import app
from sweeprig.engine import runner
from sweeprig.engine.runner import WAIT_HEARTBEAT_S, WaitReporter, soak
from sweeprig.engine.session import run_sequence, shipped_sequences_dir
from sweeprig.store.base import HEARTBEAT_STALE_S
from sweeprig.store.sqlite import SqliteRunStore

QUICK = shipped_sequences_dir() / "demo" / "quick.toml"


class _RealTimeBench:
    """A wall clock in a box: bench time and 'wall' time (time.monotonic, patched) advance
    together when the run sleeps, so a 30 min soak is simulated in no time."""

    def __init__(self) -> None:
        self.t = 0.0

    def now(self) -> float:
        return self.t

    def sleep(self, seconds: float) -> None:
        self.t += max(seconds, 0.0)


class _Beats:
    """The store side of heartbeats: when each was written (bench time) and what it said."""

    def __init__(self, clock: _RealTimeBench) -> None:
        self.clock = clock
        self.beats: list[tuple[float, dict]] = []

    def heartbeat(self, run_id: int, activity=None) -> None:
        self.beats.append((self.clock.t, dict(activity or {})))


def test_a_30_minute_soak_is_never_silent_for_long(monkeypatch):
    clock = _RealTimeBench()
    monkeypatch.setattr(runner.time, "monotonic", clock.now)
    store = _Beats(clock)
    shown: list[str] = []
    probe = itertools.count(8500)
    soak(clock, 1800.0, 85.0, lambda: next(probe) / 100.0,
         WaitReporter(store, 1, lambda a: shown.append(a["label"])))  # type: ignore[arg-type]
    times = [t for t, _ in store.beats]
    assert times[0] == 0.0 and clock.t == 1800.0
    gaps = [b - a for a, b in itertools.pairwise([*times, clock.t])]
    # never longer than the heartbeat period plus one sleep slice: far inside the 120 s after
    # which another host would call the run interrupted
    assert max(gaps) <= WAIT_HEARTBEAT_S + runner.WAIT_SLICE_S < HEARTBEAT_STALE_S
    first, last = store.beats[0][1], store.beats[-1][1]
    assert first["what"] == "soak" and first["setpoint_c"] == 85.0
    assert first["left_s"] == 1800.0 and last["left_s"] <= WAIT_HEARTBEAT_S
    assert last["probe_c"] is not None and last["probe_c"] > first["probe_c"]  # read fresh
    assert shown[0] == "soak at 85 °C, probe at 85.00 °C, 30:00 left of 30:00"
    assert len(shown) == len(store.beats)


def test_status_shows_what_a_live_run_waits_for(tmp_path: Path):
    store_path = tmp_path / "runs.sqlite"
    seen: list[dict] = []

    def look(activity) -> None:  # while the run waits, another reader opens the store
        with SqliteRunStore(store_path, create=False) as db:
            info = db.run(1)
            seen.append({"status": info.status, "activity": dict(info.activity or {})})
        if activity["what"] == "soak" and len(seen) < 3:
            result = CliRunner().invoke(app, ["status", "1", "--store", str(store_path)])
            seen.append({"output": result.output})

    outcome = run_sequence(QUICK, sim=True, store_path=store_path, on_wait=look)
    assert outcome.status == "complete", outcome.reason
    waits = [s for s in seen if "status" in s]
    assert waits and all(s["status"] == "running" for s in waits)
    kinds = {s["activity"]["what"] for s in waits}
    assert "soak" in kinds
    (status_output,) = [s["output"] for s in seen if "output" in s][:1]
    assert "waiting" in status_output and "soak at 25 °C" in status_output
    # the whole run's ETA during the soak, never "-:--:--"
    assert "left for the whole run" in status_output and "-:--:--" not in status_output
    with SqliteRunStore(store_path, create=False) as db:
        assert db.run(1).activity is None  # measuring, then finished: nothing waited for
