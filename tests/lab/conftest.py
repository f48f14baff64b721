"""Simulated benches served on loopback (real SCPI sockets) and their bench files, for the
queue and worker tests."""

from __future__ import annotations

from collections.abc import Callable, Iterator
from pathlib import Path

import pytest

from sweeprig.clock import VirtualClock
from sweeprig.engine.session import served_bench_text, shipped_sequences_dir
from sweeprig.sim.bench import start_sim_bench

QUICK = shipped_sequences_dir() / "demo" / "quick.toml"


@pytest.fixture
def served_bench(tmp_path: Path) -> Iterator[Callable[[str], Path]]:
    """``served_bench(name)``: serve one more simulated bench; return its bench file."""
    benches = []

    def serve(name: str, *, edit: Callable[[str], str] = lambda text: text) -> Path:
        bench = start_sim_bench(clock=VirtualClock())
        benches.append(bench)
        path = tmp_path / f"{name}.toml"
        path.write_text(edit(served_bench_text(bench.resources)), encoding="utf-8")
        return path

    yield serve
    for bench in benches:
        bench.close()


@pytest.fixture
def quick_copy(tmp_path: Path) -> Path:
    """The quick demo sequence, copied where a test may change it."""
    path = tmp_path / "quick.toml"
    path.write_text(QUICK.read_text(encoding="utf-8"), encoding="utf-8")
    return path
