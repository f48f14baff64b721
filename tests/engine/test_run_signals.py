"""Stop signals at random moments: any number of SIGINT/SIGTERM/SIGHUP, at any spacing, end a
``sweeprig run`` process in exactly one clean shutdown.

Each trial starts ``sweeprig run`` (on the in-process simulated bench, or on a bench served
by this test process over real pyvisa/TCP), waits for a random moment — counted from when
the process has its stop handlers in place, or from when its run is recorded in the store
— then sends 1 to 5 signals of random kinds 0 to 50 ms apart. Then: the process exits on its
own (not killed by a signal), non-zero unless the run had already completed; no traceback;
the store never shows the run ``running`` and an aborted run has its reason; a served bench
is left safe (RF and supply outputs off).

The default suite runs a short version (about 20 trials); ``-m soak`` runs 1,000.
Signals sent before the interpreter has run any sweeprig code (its first few milliseconds)
are outside what a program can handle and are not sent.
"""

from __future__ import annotations

import os
import random
import signal
import sqlite3
import subprocess
import sys
import time
from collections import Counter
from collections.abc import Iterator
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path

import pytest

from sweeprig import signals as stop_signals
from sweeprig.clock import VirtualClock
from sweeprig.engine.session import served_bench_text
from sweeprig.sim.bench import SimBench, start_sim_bench
from tests.support import catches_sigterm

SEQUENCE = Path(__file__).parent / "data" / "signals.toml"
KINDS = stop_signals.STOP_SIGNALS
WORKERS = 4


@dataclass
class Trial:
    """One trial's random choices (reproducible from its seed) and what it saw."""

    seed: int
    served: bool
    anchor: str  # "start": from the stop handlers being installed; "running": the run recorded
    delay_s: float
    kinds: list[signal.Signals]
    gaps_s: list[float]
    report: bool
    sent: list[str] = field(default_factory=list)
    ended: str = ""  # how it ended, for the summary: "<exit code> <run statuses>"

    @classmethod
    def draw(cls, seed: int, served: bool) -> Trial:
        rng = random.Random(seed)
        anchor = rng.choice(["start", "running"])
        count = rng.randint(1, 5)
        return cls(
            seed=seed, served=served, anchor=anchor,
            delay_s=rng.uniform(0.0, 3.0 if anchor == "start" else 0.8),
            kinds=[rng.choice(KINDS) for _ in range(count)],
            gaps_s=[rng.uniform(0.0, 0.050) for _ in range(count)],
            report=rng.random() < 0.25,
        )




def _runs(store: Path) -> list[tuple[int, str, str | None]]:
    if not store.exists():
        return []
    try:
        with sqlite3.connect(f"file:{store}?mode=ro", uri=True, timeout=2) as db:
            return db.execute("SELECT id, status, reason FROM runs").fetchall()
    except sqlite3.Error:
        return []


def _wait_for_anchor(proc: subprocess.Popen[str], trial: Trial, store: Path) -> None:
    deadline = time.monotonic() + 60
    if sys.platform.startswith("linux"):
        while proc.poll() is None and not catches_sigterm(proc.pid):
            assert time.monotonic() < deadline, "the handlers were never installed"
            time.sleep(0.001)
    else:  # no SigCgt to read: give the interpreter time to start
        time.sleep(0.3)
    if trial.anchor == "running":
        while proc.poll() is None and not _runs(store):
            assert time.monotonic() < deadline, "the run was never recorded"
            time.sleep(0.002)
    time.sleep(trial.delay_s)


def run_trial(trial: Trial, folder: Path, bench: SimBench | None) -> str | None:
    """Run one trial; returns what went wrong, or None."""
    folder.mkdir(parents=True)
    store = folder / "runs.sqlite"
    command = [sys.executable, "-m", "sweeprig", "run", str(SEQUENCE), "--store", str(store),
               "--quiet"]
    if bench is not None:
        bench_file = folder / "bench.toml"
        bench_file.write_text(served_bench_text(bench.resources), encoding="utf-8")
        command += ["--bench", str(bench_file)]
    else:
        command += ["--sim"]
    if not trial.report:
        command += ["--no-report"]
    env = {**os.environ, "SWEEPRIG_LOCK_DIR": str(folder / "locks"), "COLUMNS": "200"}
    proc = subprocess.Popen(command, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            text=True, env=env)
    try:
        _wait_for_anchor(proc, trial, store)
        for kind, gap in zip(trial.kinds, trial.gaps_s, strict=True):
            if proc.poll() is not None:
                break
            proc.send_signal(kind)
            trial.sent.append(kind.name)
            time.sleep(gap)
        out, err = proc.communicate(timeout=180)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.communicate()
    problems: list[str] = []
    runs = _runs(store)
    statuses = {status for _, status, _ in runs}
    trial.ended = f"exit {proc.returncode}, run {'/'.join(sorted(statuses)) or 'not recorded'}"
    if "Traceback" in err or "Traceback" in out:
        problems.append("a traceback")
    if proc.returncode < 0:
        problems.append(f"killed by signal {-proc.returncode}")
    if "running" in statuses:
        problems.append("the run is left 'running'")
    if any(status == "aborted" and not reason for _, status, reason in runs):
        problems.append("an aborted run without a reason")
    if trial.sent and statuses != {"complete"} and proc.returncode == 0:
        problems.append("exit code 0 for a stopped run")
    if not trial.sent and (proc.returncode != 0 or statuses != {"complete"}):
        problems.append("no signal was sent, yet the run did not complete")
    if bench is not None:
        on = [role for role in ("rf", "rf2", "lo", "dc") if bench.instruments[role].output_on]
        if on:
            problems.append(f"outputs left on: {on}")
    if not problems:
        return None
    return (f"seed {trial.seed} ({'served bench' if trial.served else '--sim'}, from "
            f"{trial.anchor} +{trial.delay_s:.3f} s, sent {trial.sent}): "
            f"{'; '.join(problems)}; exit {proc.returncode}; runs {runs}; "
            f"stderr tail: {err[-600:]!r}")


@pytest.fixture
def served_benches() -> Iterator[list[SimBench]]:
    benches = [start_sim_bench(clock=VirtualClock()) for _ in range(WORKERS)]
    try:
        yield benches
    finally:
        for bench in benches:
            bench.close()


def _run_trials(count: int, base_seed: int, tmp_path: Path,
                benches: list[SimBench]) -> list[str]:
    trials: list[Trial] = []

    def worker(slot: int) -> list[str]:
        failures = []
        for k in range(slot, count, WORKERS):
            served = k % 2 == 1
            trial = Trial.draw(base_seed + k, served)
            trials.append(trial)
            failure = run_trial(trial, tmp_path / f"trial-{k}",
                                benches[slot] if served else None)
            if failure:
                print(f"\nFAILED {failure}", flush=True)
                failures.append(failure)
        return failures

    with ThreadPoolExecutor(WORKERS) as pool:
        results = list(pool.map(worker, range(WORKERS)))
    endings = Counter(t.ended for t in trials)
    print(f"\n{count} trials, {sum(len(t.sent) for t in trials)} signals; endings: "
          + ", ".join(f"{n} x {e}" for e, n in endings.most_common()))
    return [failure for failures in results for failure in failures]


def test_signals_at_random_moments_end_in_one_clean_shutdown(tmp_path, served_benches):
    failures = _run_trials(20, 8000, tmp_path, served_benches)
    assert not failures, "\n".join(failures)


@pytest.mark.soak
@pytest.mark.timeout(4 * 3600)
def test_a_thousand_signal_trials(tmp_path, served_benches):
    count = int(os.environ.get("SWEEPRIG_SIGNAL_TRIALS", "1000"))
    failures = _run_trials(count, 100_000, tmp_path, served_benches)
    assert not failures, f"{len(failures)} of {count} trials failed:\n" + "\n".join(failures)
