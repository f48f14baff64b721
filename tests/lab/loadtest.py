"""The lab load and fault test, at any size (the default suite runs a short one, tests/perf
the full one): simulated benches served by separate processes (``sweeprig sim serve``), one
worker process per bench (``sweeprig lab worker``), runs queued, workers killed with SIGKILL
mid-run and started again, the database server restarted once; then every run is checked.

Two kinds of bench and of run, so that a run on a wrong bench would show: ``strong`` benches
(the built-in simulated bench's limits) and ``weak`` ones (LO source limited to 5 dBm);
sequence ``A`` (the quick demo: 7 dBm at the LO port plus a 2 dB cable, so only strong benches
can serve it) and ``B`` (the same at 2 dBm of LO: every bench can).
"""

from __future__ import annotations

import os
import random
import signal
import subprocess
import sys
import time
from dataclasses import dataclass
from pathlib import Path

import psycopg

from sweeprig.engine.session import shipped_sequences_dir
from sweeprig.lab.queue import LabQueue

QUICK = shipped_sequences_dir() / "demo" / "quick.toml"


@dataclass
class LoadFigures:
    """What the load test measured."""

    runs: int
    complete: int
    points: int
    duplicated_points: int
    missing_points: int
    wrong_bench: int
    orphan_runs: int
    kills: int
    db_restarts: int
    resumes: int
    wall_s: float

    @property
    def runs_per_min(self) -> float:
        return 60.0 * self.complete / self.wall_s

    @property
    def points_per_s(self) -> float:
        return self.points / self.wall_s

    def line(self) -> str:
        return (f"{self.complete}/{self.runs} runs complete, {self.points} points, "
                f"{self.duplicated_points} duplicated, {self.missing_points} missing, "
                f"{self.wrong_bench} on a wrong bench, {self.orphan_runs} orphan runs; "
                f"{self.kills} worker kills, {self.db_restarts} database restart(s), "
                f"{self.resumes} resumes; {self.wall_s:.1f} s: "
                f"{self.runs_per_min:.1f} runs/min, {self.points_per_s:.1f} points/s")


def _sweeprig(*args: str, env: dict[str, str] | None = None, log: Path | None = None
              ) -> subprocess.Popen[bytes]:
    argv = [sys.executable, "-m", "sweeprig", *args]
    if log is None:
        return subprocess.Popen(argv, stdout=subprocess.DEVNULL, stderr=subprocess.STDOUT,
                                env=env or dict(os.environ))
    with open(log, "ab") as out:  # the child has its own copy of the descriptor
        return subprocess.Popen(argv, stdout=out, stderr=subprocess.STDOUT,
                                env=env or dict(os.environ))


def _serve(folder: Path, name: str) -> tuple[subprocess.Popen[bytes], Path]:
    """Start serving bench ``name``; returns the process and where its bench file will be."""
    path = folder / f"{name}.served.toml"
    return _sweeprig("sim", "serve", "--write-bench", str(path),
                     log=folder / f"{name}.sim.log"), path


def _bench_file(folder: Path, name: str, proc: subprocess.Popen[bytes], served: Path,
                weak: bool) -> Path:
    """Wait for the served bench's file; write the bench file its worker uses."""
    deadline = time.monotonic() + 90
    while not served.exists() or "simctl" not in served.read_text():
        assert proc.poll() is None, (folder / f"{name}.sim.log").read_text()
        assert time.monotonic() < deadline, f"bench {name} never came up"
        time.sleep(0.1)
    time.sleep(0.2)  # written in one go, but let it land
    bench = folder / f"{name}.toml"
    text = served.read_text()
    if weak:
        text = text.replace('lo = "18 dBm"', 'lo = "5 dBm"')
    bench.write_text(text)
    return bench


class Lab:
    """The benches, their workers and the queue of one load test."""

    def __init__(self, url: str, folder: Path, benches: int, *, poll_s: float = 0.3) -> None:
        self.url = url
        self.folder = folder
        self.poll_s = poll_s
        self.names = [f"b{k}" for k in range(benches)]
        self.weak = {name for k, name in enumerate(self.names) if k % 2 == 1}
        self.sims: dict[str, subprocess.Popen[bytes]] = {}
        self.bench_files: dict[str, Path] = {}
        self.workers: dict[str, subprocess.Popen[bytes]] = {}
        served = {}
        for name in self.names:  # all start at once; then each is waited for
            self.sims[name], served[name] = _serve(folder, name)
        for name in self.names:
            self.bench_files[name] = _bench_file(folder, name, self.sims[name], served[name],
                                                 name in self.weak)

    def start_worker(self, name: str) -> None:
        env = dict(os.environ, SWEEPRIG_LOCK_DIR=str(self.folder / f"locks-{name}"))
        self.workers[name] = _sweeprig(
            "lab", "worker", "--bench", str(self.bench_files[name]), "--name", name,
            "--db", self.url, "--log-dir", str(self.folder / f"logs-{name}"),
            "--poll", str(self.poll_s), env=env, log=self.folder / f"{name}.worker.log")

    def close(self) -> None:
        for proc in [*self.workers.values(), *self.sims.values()]:
            if proc.poll() is None:
                proc.send_signal(signal.SIGTERM)
        for proc in [*self.workers.values(), *self.sims.values()]:
            try:
                proc.wait(timeout=20)
            except subprocess.TimeoutExpired:
                proc.kill()
                proc.wait()


def sequences(folder: Path) -> tuple[Path, Path]:
    """Sequence A (strong benches only) and B (every bench)."""
    a = folder / "seq-a.toml"
    a.write_text(QUICK.read_text())
    b = folder / "seq-b.toml"
    b.write_text(QUICK.read_text().replace('lo_power = "7 dBm"', 'lo_power = "2 dBm"'))
    return a, b


def _state(url: str) -> dict[str, int]:
    with psycopg.connect(url, connect_timeout=3) as conn:
        return dict(conn.execute("SELECT state, COUNT(*) FROM lab_runs GROUP BY state"
                                 ).fetchall())


def _busy_benches(url: str) -> list[str]:
    """Benches measuring a run that has at least one point stored."""
    with psycopg.connect(url, connect_timeout=3) as conn:
        return [r[0] for r in conn.execute(
            "SELECT l.bench FROM lab_runs l JOIN runs r ON r.id = l.run_id WHERE "
            "l.state = 'running' AND EXISTS (SELECT 1 FROM points p WHERE p.run_id = r.id)")]


def run_load(url: str, server: object, folder: Path, *, benches: int, runs: int, kills: int,
             db_restart: bool, timeout_s: float, seed: int = 17) -> LoadFigures:
    """Queue ``runs`` runs on ``benches`` benches, kill workers ``kills`` times and restart
    the server once (``db_restart``, when ``server`` can), wait for the queue to drain, then
    check every run."""
    rng = random.Random(seed)
    seq_a, seq_b = sequences(folder)
    lab = Lab(url, folder, benches)
    killed = restarts = 0
    try:
        with LabQueue(url) as queue:
            for k in range(runs):
                queue.submit(seq_a if k % 2 == 0 else seq_b, part="KX-2407", serial=f"U{k:03d}",
                             lot="L1", priority=rng.randint(0, 3))
        t0 = time.monotonic()
        for name in lab.names:
            lab.start_worker(name)
        deadline = t0 + timeout_s
        restart_at = runs // 2
        while True:
            try:
                states = _state(url)
            except psycopg.Error:
                time.sleep(0.2)
                continue
            finished = states.get("done", 0) + states.get("failed", 0)
            if finished >= runs:
                break
            assert time.monotonic() < deadline, f"not drained in {timeout_s} s: {states}"
            for name, proc in lab.workers.items():  # a worker that died on its own: restart
                if proc.poll() is not None and proc.returncode not in (-9,):
                    lab.start_worker(name)
            if db_restart and not restarts and finished >= restart_at and \
                    hasattr(server, "restart"):
                server.restart()
                restarts += 1
                continue
            if killed < kills and finished >= killed * runs / (kills + 1):
                try:
                    busy = _busy_benches(url)
                except psycopg.Error:
                    busy = []
                if busy:
                    name = rng.choice(busy)
                    lab.workers[name].send_signal(signal.SIGKILL)
                    lab.workers[name].wait()
                    killed += 1
                    time.sleep(rng.uniform(0.0, 0.5))
                    lab.start_worker(name)
            time.sleep(0.1)
        wall = time.monotonic() - t0
    finally:
        lab.close()
    return _check(url, lab, runs, killed, restarts, wall)


def _check(url: str, lab: Lab, runs: int, kills: int, restarts: int, wall: float
           ) -> LoadFigures:
    with psycopg.connect(url) as conn:
        rows = conn.execute(
            "SELECT l.id, l.state, l.bench, l.sequence_path, l.run_id, r.status, "
            "r.points_total, (SELECT COUNT(*) FROM points p WHERE p.run_id = r.id), "
            "(SELECT COUNT(DISTINCT point_index) FROM points p WHERE p.run_id = r.id), "
            "r.tags_json FROM lab_runs l LEFT JOIN runs r ON r.id = l.run_id").fetchall()
        orphans = conn.execute("SELECT COUNT(*) FROM runs WHERE id NOT IN (SELECT run_id FROM "
                               "lab_runs WHERE run_id IS NOT NULL)").fetchone()[0]
        resumed = conn.execute("SELECT COUNT(*) FROM events WHERE kind = 'resume'"
                               ).fetchone()[0]
        resources = {  # the served instruments each run's bench has
            run_id: {r for (r,) in conn.execute(
                "SELECT resource FROM instruments WHERE run_id = %s", (run_id,))}
            for run_id in [r[4] for r in rows if r[4] is not None]}
    complete = points = duplicated = missing = wrong = 0
    for _id, state, bench, seq, run_id, status, total, n, distinct, tags in rows:
        if state == "done" and status == "complete" and n == total:
            complete += 1
        points += n or 0
        duplicated += (n or 0) - (distinct or 0)
        missing += max(0, (total or 0) - (distinct or 0))
        served = lab.bench_files.get(bench or "")
        if (bench in lab.weak and seq.endswith("seq-a.toml")) or served is None or \
                f'"bench:{bench}"' not in (tags or "") or \
                not resources.get(run_id, set()) <= _resources(served):
            wrong += 1
    return LoadFigures(runs, complete, points, duplicated, missing, wrong, orphans, kills,
                       restarts, resumed, wall)


def _resources(bench_file: Path) -> set[str]:
    import re

    return set(re.findall(r'resource = "([^"]+)"', bench_file.read_text()))
