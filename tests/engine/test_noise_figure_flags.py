"""The noise-figure flags catch planted trouble on the simulated bench: an analyzer whose own
noise dominates, a hot source that compresses the analyzer, an interferer in the noise band."""

from __future__ import annotations

from typing import Any

import pytest

from sweeprig.clock import VirtualClock
from sweeprig.sim.bench import InterfererSpec, resolve_description, start_sim_bench
from tests.engine.noise_support import IF_HZ, measure, open_noise_bench


def _planted(**changes: Any) -> Any:
    desc = resolve_description(None)
    update: dict[str, Any] = {}
    if "analyzer" in changes:
        update["analyzer"] = desc.analyzer.model_copy(update=changes["analyzer"])
    if "interferers" in changes:
        update["interferers"] = changes["interferers"]
    return desc.model_copy(update=update)


@pytest.mark.parametrize(("label", "changes", "flag"), [
    ("analyzer noise dominates", {"analyzer": {"noise_figure": 32.0}},
     "analyzer_noise_dominates"),
    ("hot-source compression", {"analyzer": {"p1db": -60.0}}, "hot_compression"),
    ("interferer", {"interferers": (InterfererSpec(frequency=101e6, level=-80.0),)},
     "interferer"),
])
def test_planted_trouble_is_flagged(label: str, changes: dict[str, Any], flag: str) -> None:
    with start_sim_bench(_planted(**changes), clock=VirtualClock()) as sim:
        nb, drivers = open_noise_bench(sim)
        try:
            nb.system_calibration([IF_HZ])
            outcome = measure(sim, nb, drivers, 2.2e9, 0.0, check_compression=True)
        finally:
            nb.off()
            drivers.close()
    assert flag in outcome.result.flags, (label, outcome.result)
    # a flagged figure may be wrong; an unflagged one on the clean bench is right (below)


def test_the_clean_bench_raises_no_flag_with_the_compression_check() -> None:
    with start_sim_bench(clock=VirtualClock()) as sim:
        nb, drivers = open_noise_bench(sim)
        try:
            nb.system_calibration([IF_HZ])
            outcome = measure(sim, nb, drivers, 2.2e9, 0.0, check_compression=True)
        finally:
            nb.off()
            drivers.close()
    assert outcome.result.flags == ()
    assert outcome.result.dut_over_receiver_db > 3.0
