"""The state of the machine beside a benchmark's figures: its load average, and how fast one
of its cores runs plain Python just now.

A shared virtual machine can run the same code a third slower for minutes at a time with
its load average unchanged: on 2026-12-04 a 10k-point simulated run took 33.6 s and, minutes
later, 22.4 s (the same code, load 0.9 both times; the cause cannot be seen from inside,
presumably the host's other work). So each
benchmark that prints a wall time prints this too: a fixed pure-Python loop's time per step,
best of five, beside a reference taken on this kind of machine (22 ns on 2026-12-04, in the
hour the 10k-point run took 22.4 s and the 100k-point report 16.8 s). Higher means the
figures beside it are slower than the code is. It does not catch every slowdown: later the
same day it read 20 ns while the 10k-point run took 24 to 29 s (interleaved runs of two
commits agreed with each other), so what slows this machine is not always the core's own
speed. Interleave two commits before calling a difference a change.
"""

from __future__ import annotations

import os
import time

#: Steps of the probe's loop (about 0.05 s).
PROBE_STEPS = 2_000_000
#: The probe's reference, ns a step (2 cores, 2026-12-04: see the module docstring).
REFERENCE_NS = 22.0


def core_ns_per_step() -> float:
    """A fixed pure-Python loop's time per step on this core, ns (best of five)."""
    best = float("inf")
    for _ in range(5):
        start = time.perf_counter()
        total = 0
        for i in range(PROBE_STEPS):
            total += i
        best = min(best, time.perf_counter() - start)
    return best / PROBE_STEPS * 1e9


def machine_text() -> str:
    """``load average 0.9 on 2 cores; a core: 23 ns a loop step (reference 22)``."""
    return (f"load average {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores; a core: "
            f"{core_ns_per_step():.0f} ns a loop step (reference {REFERENCE_NS:.0f})")
