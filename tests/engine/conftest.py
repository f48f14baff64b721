"""Fixtures for engine tests: a simulated bench served in this process, reached by the
engine over real pyvisa/TCP exactly as it reaches hardware."""

from __future__ import annotations

from collections.abc import Iterator

import pytest

from sweeprig.clock import VirtualClock
from sweeprig.sim.bench import SimBench, start_sim_bench


@pytest.fixture
def sim_bench() -> Iterator[SimBench]:
    with start_sim_bench(clock=VirtualClock()) as bench:
        yield bench
