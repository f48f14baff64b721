"""A real-time simulated run with a 30 min soak: ``runs`` and ``status``, asked from another
process every few seconds for the whole run, show it live (``running``) every time.

Wall-clock: about 32 min. Run with ``pytest -m perf tests/perf/test_perf_live_status.py -s``;
``SWEEPRIG_LIVE_SOAK`` shortens the soak (e.g. ``"3 min"``) for a quicker look.
"""

from __future__ import annotations

import os
import re
import subprocess
import sys
import time
from pathlib import Path

import pytest

from sweeprig.engine.session import shipped_sequences_dir

pytestmark = [pytest.mark.perf, pytest.mark.timeout(3 * 3600)]

QUICK = shipped_sequences_dir() / "demo" / "quick.toml"
SAMPLE_EVERY_S = 10.0


def _cli(*args: str) -> str:
    done = subprocess.run([sys.executable, "-m", "sweeprig", *args], capture_output=True,
                          text=True, timeout=120, env={**os.environ, "COLUMNS": "200"})
    return done.stdout + done.stderr


def test_a_live_run_is_shown_live_for_the_whole_soak(tmp_path: Path):
    soak = os.environ.get("SWEEPRIG_LIVE_SOAK", "30 min")
    sequence = tmp_path / "quick-long-soak.toml"
    sequence.write_text(QUICK.read_text(encoding="utf-8").replace(
        'soak = "2 min"', f'soak = "{soak}"'), encoding="utf-8")
    store = tmp_path / "runs.sqlite"
    run = subprocess.Popen([sys.executable, "-m", "sweeprig", "run", str(sequence), "--sim",
                            "--realtime", "--quiet", "--no-report", "--store", str(store)],
                           stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)
    samples: list[tuple[float, str, str]] = []
    t0 = time.monotonic()
    try:
        while run.poll() is None and not re.search(r"\brunning\b", _cli(
                "status", "1", "--store", str(store))):
            time.sleep(0.5)  # until the run is recorded: before that there is nothing to show
        while run.poll() is None:
            status = _cli("status", "1", "--store", str(store))
            runs = _cli("runs", "--store", str(store))
            if run.poll() is not None:
                break  # the run ended while we asked: that sample says nothing about liveness
            samples.append((time.monotonic() - t0, status, runs))
            time.sleep(SAMPLE_EVERY_S)
        out = run.communicate(timeout=60)[0]
    finally:
        if run.poll() is None:
            run.kill()
    assert run.returncode == 0, out
    # live: shown running; a run that has just ended shows complete while its process exits
    # (report, safe state): that is not a live run shown dead. Anything else (interrupted,
    # aborted) while the process lives is a failure.
    live = re.compile(r"\b(running|complete)\b")
    status_live = [bool(live.search(s)) for _, s, _ in samples]
    runs_live = [bool(live.search(r)) for _, _, r in samples]
    waiting = sum("soak" in s for _, s, _ in samples)
    print(f"\nlive status: {len(samples)} samples over {samples[-1][0] / 60:.1f} min "
          f"(soak {soak}); status live {sum(status_live)}/{len(samples)} "
          f"({100 * sum(status_live) / len(samples):.1f} %), runs live {sum(runs_live)}/"
          f"{len(samples)} ({100 * sum(runs_live) / len(samples):.1f} %); "
          f"{waiting} samples named the soak")
    ended = sum(not re.search(r"\brunning\b", s) for _, s, _ in samples)
    print(f"{ended} sample(s) saw the run already complete while its process was exiting")
    bad = [s for (_, s, _), ok in zip(samples, status_live, strict=True) if not ok]
    assert not bad, bad[0]
    bad = [r for (_, _, r), ok in zip(samples, runs_live, strict=True) if not ok]
    assert not bad, bad[0]
