"""Benchmark: every bounded case of the bad-input corpus refused within 5 s and 300 MB.

Each case marked ``bounded = true`` in ``tests/corpus/expected.toml`` is refused by a fresh
Python process, the way a user meets it (``sweeprig check`` for sequences, benches and loss
tables; the loader for profiles, parts and simulated-bench descriptions). Printed per case:
wall time (interpreter start and imports included) and the process's peak resident memory,
read from ``os.wait4``, with the processor time it used. Floors: under 5 s of processor time
(user + system: on a shared machine wall time measures the neighbours) and under 300 MB each,
refused with the expected exit code and no traceback. Linux reports a child's peak as at
least its parent's size when it was started, so the memory figure is an upper bound.

Run with ``pytest -m perf -s tests/perf/test_perf_corpus.py``.
"""

from __future__ import annotations

import importlib.util
import os
import subprocess
import sys
import threading
import time
from pathlib import Path
from types import ModuleType

import pytest

from sweeprig.engine.session import shipped_sequences_dir

MAX_CPU_S = 5.0
MAX_RSS_BYTES = 300 * 1024 * 1024
#: ru_maxrss is in kilobytes on Linux, in bytes on macOS.
RSS_UNIT = 1 if sys.platform == "darwin" else 1024


def _corpus_module() -> ModuleType:
    """The corpus test module (its expectations and the generator of special files)."""
    loaded = sys.modules.get("test_corpus")
    if loaded is not None:
        return loaded
    path = Path(__file__).resolve().parents[1] / "robustness" / "test_corpus.py"
    spec = importlib.util.spec_from_file_location("corpus_for_perf", path)
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = module  # dataclasses look their module up there
    spec.loader.exec_module(module)
    return module


CORPUS = _corpus_module()
BOUNDED = sorted(rel for rel, spec in CORPUS.EXPECTED.items() if spec.get("bounded"))

_LOADER = """
import sys
from sweeprig.errors import SweeprigError
from {module} import {function} as load
try:
    load(sys.argv[1])
except SweeprigError as exc:
    print(exc.message())
    sys.exit(exc.exit_code)
"""
LOADERS = {"profiles": ("sweeprig.instruments.profile", "load_profile"),
           "parts": ("sweeprig.sim.mixer", "load_part"),
           "simbench": ("sweeprig.sim.bench", "load_sim_bench_description")}


def _command(rel: str, path: Path, tmp_path: Path) -> list[str]:
    kind = rel.split("/", 1)[0]
    cli = [sys.executable, "-m", "sweeprig"]
    if kind == "sequences":
        return [*cli, "check", str(path)]
    if kind == "benches":
        return [*cli, "check", str(CORPUS.QUICK), "--bench", str(path)]
    if kind in ("pathloss", "touchstone"):
        template = (shipped_sequences_dir() / "benches" / "sim.toml").read_text(encoding="utf-8")
        bench = tmp_path / "bench.toml"
        key = "csv" if kind == "pathloss" else "touchstone"
        bench.write_text(CORPUS._bench_with_rf_loss(template, key, path), encoding="utf-8")
        return [*cli, "check", str(CORPUS.QUICK), "--bench", str(bench)]
    module, function = LOADERS[kind]
    return [sys.executable, "-c", _LOADER.format(module=module, function=function), str(path)]


@pytest.mark.perf
@pytest.mark.parametrize("rel", BOUNDED)
def test_bounded_case_is_refused_quickly_in_little_memory(rel: str, tmp_path: Path) -> None:
    spec = CORPUS.EXPECTED[rel]
    path = CORPUS.CORPUS / rel
    if "generate" in spec:
        path = CORPUS._generate(spec["generate"], rel, tmp_path / "generated")
    command = _command(rel, path, tmp_path)
    log = tmp_path / "output.txt"
    with log.open("wb") as out:
        start = time.perf_counter()
        process = subprocess.Popen(command, stdout=out, stderr=subprocess.STDOUT,
                                   env={**os.environ, "COLUMNS": "200"})
        watchdog = threading.Timer(60, process.kill)  # a hang fails the case, not the suite
        watchdog.start()
        try:
            _, status, usage = os.wait4(process.pid, 0)  # this child's own peak memory
        finally:
            watchdog.cancel()
        elapsed = time.perf_counter() - start
    process.returncode = exit_code = os.waitstatus_to_exitcode(status)
    rss = usage.ru_maxrss * RSS_UNIT
    cpu_s = usage.ru_utime + usage.ru_stime
    text = log.read_text(encoding="utf-8", errors="replace")
    print(f"{rel:<55} {cpu_s:5.2f} s processor ({elapsed:5.2f} s wall)  "
          f"{rss / 2**20:6.1f} MB  exit {exit_code}")
    assert exit_code == spec["exit"], text[-2000:]
    assert "Traceback" not in text
    assert cpu_s < MAX_CPU_S
    assert rss < MAX_RSS_BYTES
