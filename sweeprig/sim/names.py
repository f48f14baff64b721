"""The simulated bench's names and limits that the command line shows in its help: its roles,
its shipped descriptions and its connection limits (a light module: ``sweeprig --help`` lists
them without loading the simulator)."""

from __future__ import annotations

from pathlib import Path

#: Roles served, in their fixed order (consecutive ports from ``--port-base``).
ROLES: tuple[str, ...] = (
    "rf", "rf2", "lo", "sa", "pm", "dc", "chamber", "switch", "simctl", "nsdc",
)
BENCHES_DIR = Path(__file__).resolve().parent / "benches"
#: The shipped description served when none is named (``BENCHES_DIR / "default.toml"``).
DEFAULT_BENCH_NAME = "default"
PARTS_DIR = Path(__file__).resolve().parent / "parts"
#: Clients one instrument serves at once by default; one more is refused.
DEFAULT_MAX_CONNECTIONS = 16
MAX_CONNECTIONS_LIMIT = 4096


def shipped_benches() -> list[str]:
    """Names of the sim-bench descriptions shipped in ``sweeprig/sim/benches``."""
    return sorted(p.stem for p in BENCHES_DIR.glob("*.toml"))


def shipped_parts() -> list[str]:
    """Names of the parts shipped in ``sweeprig/sim/parts`` (file stems)."""
    return sorted(p.stem for p in PARTS_DIR.glob("*.toml"))
