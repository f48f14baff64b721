"""A driver that polls for completion waits on the bench's clock: on a bench served by the
simulator (its instruments on a virtual clock, reached through its control instrument), an
analyzer sweep completed by event-status polling (``*OPC``, then ``*ESR?`` until bit 0,
IEEE 488.2-1992 10.18 and 11.5.1.2, from memory) ends in simulated time instead of asking
while simulated time stands still (the poll used the wall clock and hung until its timeout)."""

from __future__ import annotations

from pathlib import Path

from sweeprig.clock import VirtualClock, WallClock
from sweeprig.engine.connect import open_bench
from sweeprig.engine.session import served_bench_text
from sweeprig.formats.bench import load_bench
from sweeprig.instruments import make_driver
from sweeprig.instruments.profile import load_profile
from sweeprig.sim.bench import start_sim_bench

EVENT_PROFILE = """\
[profile]
name = "sa-event-completion"
extends = "scpi-analyzer"
kind = "analyzer"
description = "the generic analyzer, its sweep completed by event-status polling"
idn_pattern = '^[^,]+,[^,]+,'

[ops.sweep]
command = "INIT:IMM"
complete = { method = "event", interval_s = 0.01, timeout_s = 30 }
"""


def test_an_event_polled_sweep_ends_in_the_simulators_time(tmp_path: Path) -> None:
    profile = tmp_path / "sa-event-completion.toml"
    profile.write_text(EVENT_PROFILE, encoding="utf-8")
    sim_clock = VirtualClock()
    with start_sim_bench(None, clock=sim_clock) as sim:
        bench_path = tmp_path / "bench.toml"
        bench_path.write_text(served_bench_text(sim.resources), encoding="utf-8")
        # as the session opens a served bench: the wall clock until the simulator is found
        drivers = open_bench(load_bench(bench_path), {"sa": "the sweep"}, clock=WallClock())
        try:
            assert drivers.sa is not None and drivers.simctl is not None
            # the same connection and the clock open_bench gave the analyzer's driver
            sa = make_driver(load_profile(profile), "sa", drivers.transports["sa"],
                             clock=drivers.sa.clock)
            sa.set_value("span", 1e6)
            sa.set_value("points", 1001)
            sweep_s = float(sa.transport.query("SENS:SWE:TIME?"))
            t_sim = sim_clock.now()
            sa.sweep()  # polling on the wall clock, a frozen simulator would reach the timeout
            assert sim_clock.now() - t_sim >= sweep_s  # the simulated sweep ran to its end
        finally:
            drivers.close()
