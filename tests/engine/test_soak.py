"""Soak test: a simulated overnight run with randomly injected faults of every kind and two
hard kills (SIGKILL) with resumes, against a fault-free run of the same sequence.

Checks: the run ends complete with every point stored exactly once; every reading matches
the fault-free run within the simulator's noise; the bench is left with RF off; and the
engine's events account for every injected fault (each fault observed as a failed attempt,
a reconnection, a reset or an error-queue entry), except faults injected while a killed
process could no longer record them.

The short version runs in the default suite; the full one (several thousand points, a few
hundred faults) with ``pytest -m soak``.
"""

from __future__ import annotations

import os
import re
import signal
import sqlite3
import subprocess
import sys
import time
from collections import Counter
from pathlib import Path

import numpy as np
import pytest

from sweeprig.clock import VirtualClock
from sweeprig.engine.session import run_sequence, served_bench_text
from sweeprig.sim.bench import resolve_description, start_sim_bench
from sweeprig.sim.faults import FaultSpec
from sweeprig.store.sqlite import SqliteRunStore

KINDS = ("timeout", "drop", "error", "garble", "reset")
LINK_KINDS = ("timeout", "drop", "garble")

SEQUENCE = """\
format = 1

[about]
title = "Soak: {points} points at two temperatures (fictional part)"

[part]
id = "KX-2417"
expected_gain = "12 dB"
expected_lo_if_isolation = "30 dB"

[mixing]
conversion = "down"
lo_side = "low"
if_frequency = "100 MHz"

[conditions]
temperature = ["25 degC", "85 degC"]
supply = "3.3 V"
soak = "30 min"
settle = "1 s"

[recovery]
point_attempts = 15
reconnect_attempts = 6
backoff = "0.1 s"

[[study]]
name = "band"
rf_frequency = {{ start = "1.7 GHz", stop = "2.7 GHz", points = {per_temperature} }}
rf_power = "-25 dBm"
lo_power = "0 dBm"
read = ["wanted"]
"""


def _faults(rate: float) -> tuple[FaultSpec, ...]:
    specs = []
    for i, role in enumerate(("sa", "rf", "lo", "dc", "chamber")):
        scale = 1.0 if role == "sa" else 2.0  # the other roles see fewer commands per point
        for j, kind in enumerate(KINDS):
            specs.append(FaultSpec(role=role, kind=kind, rate=rate * scale,
                                   seed=1000 + 10 * i + j, code=-350 if kind == "error" else -200,
                                   text="soak fault" if kind == "error" else None))
    return tuple(specs)


def _stored(store_path: Path) -> int:
    if not store_path.exists():
        return 0
    try:
        with sqlite3.connect(store_path, timeout=1) as db:
            return db.execute("SELECT COUNT(*) FROM points").fetchone()[0]
    except sqlite3.Error:
        return 0


def _sweeprig(*args: str) -> subprocess.Popen[str]:
    return subprocess.Popen([sys.executable, "-m", "sweeprig", *args, "--quiet"],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            env=dict(os.environ))


def _run_until(proc: subprocess.Popen[str], store_path: Path, points: int | None) -> None:
    """Let ``proc`` store ``points`` points, then SIGKILL it (None: let it finish)."""
    deadline = time.monotonic() + 300
    try:
        while points is None or _stored(store_path) < points:
            if proc.poll() is not None:
                out, err = proc.communicate()
                assert points is None, f"the run ended early: {out}\n{err}"
                assert proc.returncode == 0, f"{out}\n{err}"
                return
            assert time.monotonic() < deadline, "the soak run stalled"
            time.sleep(0.02)
        proc.send_signal(signal.SIGKILL)
    finally:
        if proc.poll() is None and points is None:
            proc.kill()
        proc.communicate(timeout=60)


def soak(tmp_path: Path, per_temperature: int, rate: float) -> dict[str, object]:
    sequence = tmp_path / "soak.toml"
    total = 2 * per_temperature
    sequence.write_text(SEQUENCE.format(points=total, per_temperature=per_temperature))
    store_path = tmp_path / "soak.sqlite"
    description = resolve_description(None).model_copy(update={"faults": _faults(rate)})
    with start_sim_bench(description, clock=VirtualClock()) as sim:
        bench = tmp_path / "bench.toml"
        # Each injected timeout costs this much; 0.15 s lost real replies on a loaded machine
        # (load average 15) and failed the soak for want of a reply, not for a fault.
        bench.write_text(served_bench_text(sim.resources).replace('timeout = "5 s"',
                                                                    'timeout = "0.4 s"'))
        _run_until(_sweeprig("run", str(sequence), "--bench", str(bench), "--store",
                             str(store_path)), store_path, total // 3)
        with SqliteRunStore(store_path) as store:
            run_id = store.runs()[0].id
            assert store.runs()[0].status == "interrupted"
        _run_until(_sweeprig("resume", str(run_id), "--store", str(store_path)), store_path,
                   2 * total // 3)
        _run_until(_sweeprig("resume", str(run_id), "--store", str(store_path)), store_path,
                   None)
        injected = sim.faults.log.events()
        resources = dict(sim.resources)
        outputs_on = [r for r in ("rf", "lo") if sim.instruments[r].output_on]
        sim_hours = sim.clock.now() / 3600
    reference = run_sequence(sequence, sim=True, store_path=tmp_path / "reference.sqlite")
    assert reference.status == "complete"
    with SqliteRunStore(store_path) as store:
        info = store.run(run_id)
        points = store.points_frame(run_id)
        readings = store.readings_frame(run_id)
        events = store.events(run_id)
    with SqliteRunStore(tmp_path / "reference.sqlite") as store:
        ref = store.readings_frame(reference.run_id)
    return {"info": info, "points": points, "readings": readings, "events": events,
            "reference": ref, "injected": injected, "resources": resources, "total": total,
            "outputs_on": outputs_on, "sim_hours": sim_hours}


def _observed(events, resources: dict[str, str]) -> Counter[tuple[str, str]]:
    """(role, category) → how many faults the engine's events show it noticed."""
    by_resource = {res: role for role, res in resources.items()}
    seen: Counter[tuple[str, str]] = Counter()
    for e in events:
        text = e.message
        role_match = re.search(r"role '(\w+)'", text)
        role = role_match.group(1) if role_match else next(
            (by_resource[r] for r in by_resource if r in text), None)
        if role is None:
            continue
        if e.kind == "reset":
            seen[(role, "reset")] += 1
        elif e.kind in ("error", "error_queue"):
            seen[(role, "error")] += text.count("soak fault")
        if e.kind in ("link", "reconnect", "probe") or (e.kind == "error" and "soak" not in text):
            seen[(role, "link")] += 1
    return seen


def _check(result: dict[str, object]) -> None:
    info, points, readings = result["info"], result["points"], result["readings"]
    total = result["total"]
    assert info.status == "complete", info.reason
    assert sorted(points["point_index"]) == list(range(total))  # each point exactly once
    assert readings.groupby("point_index").size().eq(1).all()
    ref = result["reference"].set_index("point_index")["level_dbm"]
    got = readings.set_index("point_index")["level_dbm"]
    # The wanted IF sits ~90 dB above the analyzer noise: the simulator's noise moves it by
    # far less than 0.05 dB, so a larger difference would be a wrong point, not noise.
    np.testing.assert_allclose(got.sort_index(), ref.sort_index(), atol=0.05)
    assert result["outputs_on"] == []
    assert result["sim_hours"] > 1.0
    injected = result["injected"]
    assert {f.kind for f in injected} == set(KINDS)
    wanted: Counter[tuple[str, str]] = Counter(
        (f.role, "link" if f.kind in LINK_KINDS else f.kind) for f in injected)
    seen = _observed(result["events"], result["resources"])
    # A fault injected into a process just before its SIGKILL cannot be recorded by it;
    # allow a couple per kill and category, nothing more.
    slack = 2 * 2
    for key, count in wanted.items():
        assert seen[key] >= count - slack, (key, count, seen[key])
    assert sum(seen[k] for k in wanted) >= sum(wanted.values()) - 3 * slack


def test_short_soak_with_faults_and_two_kills(tmp_path):
    # A retry after a fault re-opens and re-prepares instruments, so it sends many more
    # messages than a clean point (~65 transactions since the readings read back their
    # sweep time and axis); at 0.002 per message a point failed all 10 attempts about once
    # in seven runs (every attempt a distinct injected fault). 0.0015 and 15 attempts keep
    # ~30 faults per run while a run of bad luck that long stays rare.
    result = soak(tmp_path, per_temperature=100, rate=0.0015)
    assert len(result["injected"]) >= 20
    _check(result)


@pytest.mark.soak
def test_overnight_soak_with_hundreds_of_faults_and_two_kills(tmp_path):
    # a point now costs fewer messages (each source's status leads its next settings), so
    # the rate per message is higher than it was for the same few hundred faults
    result = soak(tmp_path, per_temperature=1200, rate=0.0013)
    print(f"\nsoak: {result['total']} points, {len(result['injected'])} faults injected, "
          f"{result['sim_hours']:.1f} h simulated")
    assert len(result["injected"]) >= 200
    _check(result)
