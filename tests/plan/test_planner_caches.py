"""The reading planner's caches across points (merged analyzer settings, source-harmonic
contributions, answers kept within one reading's attenuation search) change no reading:
points planned one after another by one builder equal each point planned alone by a fresh
planner, on the shipped sequences against the shipped simulated bench."""

from __future__ import annotations

from pathlib import Path

import pytest

from sweeprig.engine.session import shipped_sequences_dir
from sweeprig.formats.bench import load_bench
from sweeprig.formats.sequence import load_sequence
from sweeprig.plan.expand import PointBuilder, point_at

SHIPPED = sorted((shipped_sequences_dir() / "demo").glob("*.toml"))
BENCH = shipped_sequences_dir() / "benches" / "sim.toml"
#: points compared per sequence, spread over it (each fresh planner costs a few ms)
SAMPLES = 25


@pytest.mark.parametrize("path", SHIPPED, ids=lambda p: p.stem)
def test_points_planned_in_turn_equal_points_planned_alone(path: Path) -> None:
    sequence = load_sequence(path)
    bench = load_bench(BENCH)
    builder = PointBuilder(sequence, bench)
    total = builder.layout.total
    step = max(total // SAMPLES, 1)
    warm = [builder.point(i) for i in range(total)]  # one planner, caches filled in turn
    for index in range(0, total, step):
        alone = point_at(sequence, index, bench)
        assert repr(warm[index]) == repr(alone), f"{path.name} point {index}"
