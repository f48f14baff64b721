"""Small helpers shared by several test modules (plain functions, no fixtures)."""

from __future__ import annotations

import os
import sqlite3
from pathlib import Path
from typing import TYPE_CHECKING

import pytest

if TYPE_CHECKING:
    pass


def points_stored(store_path: Path) -> int:
    """Points in a run store as another process sees it (0 before the store exists)."""
    if not store_path.exists():
        return 0
    try:
        with sqlite3.connect(store_path, timeout=1) as db:
            return db.execute("SELECT COUNT(*) FROM points").fetchone()[0]
    except sqlite3.Error:  # not created yet, or mid-creation
        return 0


def skip_unless_permissions_hold(folder: Path) -> None:
    """Root (with its override capability) writes to read-only files: nothing to test then."""
    probe = folder / "permission-probe"
    probe.write_text("")
    probe.chmod(0o444)
    if os.access(probe, os.W_OK):
        pytest.skip("this user writes whatever the permissions say (root)")


def check_app():
    """A root Typer app with just the check/plan/schema commands registered."""
    import typer

    from sweeprig.cli.check_cmd import register

    root = typer.Typer(no_args_is_help=True, add_completion=False)

    @root.callback()
    def _root() -> None:
        """test root"""

    register(root)
    return root


def invoke(app, *args: object, columns: int = 200):
    """Run ``app`` with ``args`` in a wide virtual terminal (table cells not wrapped); a
    traceback (any exception other than the CLI's own exit) fails the test."""
    from typer.testing import CliRunner

    result = CliRunner().invoke(app, [str(a) for a in args], env={"COLUMNS": str(columns)})
    assert not isinstance(result.exception, Exception) or isinstance(
        result.exception, SystemExit), result.exception  # never a traceback
    return result


def catches_sigterm(pid: int) -> bool:
    """True once process ``pid`` catches SIGTERM (Linux: the SigCgt mask in /proc); True when
    the process is gone, so a poll on it ends."""
    import signal

    try:
        with open(f"/proc/{pid}/status", encoding="ascii") as status:
            for line in status:
                if line.startswith("SigCgt:"):
                    return bool(int(line.split()[1], 16) & (1 << (signal.SIGTERM - 1)))
    except OSError:
        return True
    return False


#: A simulated bench whose analyzer reports one error (at its 30th command): with a stopping
#: recovery policy (:data:`STOP_ON_ERROR`) a run of the quick sequence ends ``aborted``.
FAULTY_SIM_BENCH = ('part = "kx-2417"\n[[faults]]\nrole = "sa"\nkind = "error"\n'
                    'at_command = 30\ncode = -222\ntext = "Data out of range"\n')
STOP_ON_ERROR = '\n[recovery]\non_error = "stop"\npoint_attempts = 1\n'


def aborting_run_files(folder: Path, sequence_text: str) -> tuple[Path, Path]:
    """``sequence_text`` with a stopping recovery policy, and the faulty simulated bench,
    written into ``folder``: (sequence, sim-bench description) for a run that aborts."""
    sequence = folder / "seq.toml"
    sequence.write_text(sequence_text + STOP_ON_ERROR, encoding="utf-8")
    sim_bench = folder / "faulty.toml"
    sim_bench.write_text(FAULTY_SIM_BENCH, encoding="utf-8")
    return sequence, sim_bench


def run_of_figures(figures):
    """A complete simulated run holding only ``figures`` (no limits, captures or studies):
    for the report's readers of figures."""
    from datetime import UTC, datetime

    from sweeprig.analysis.limits import assess
    from sweeprig.analysis.reduce import RunFigures

    return RunFigures(
        run_id=1, title="t", part="KX-2417", serial="s", operator="o", state="complete",
        status="complete", reason=None, simulated=True, created=datetime.now(UTC),
        finished=None, points_done=1, points_total=1, sequence_path="s.toml",
        sequence_sha256="", sequence_sha256_ok=True, bench_path=None, bench_sha256=None,
        instruments=(), duration_sim_s=None, duration_wall_s=None, figures=figures, limits=(),
        assessment=assess(figures, ()), verdict="inconclusive", studies=(), conditions={},
        events=(), notes=(), captures=None)  # type: ignore[arg-type]


def reduced_with_blocks(store: tuple[Path, int], least: int):
    """Run ``store`` (path, run id) reduced with blocks of at least ``least`` figures (1:
    every figure it can hold as columns; a huge number: none)."""
    from sweeprig.analysis import figure_block
    from sweeprig.analysis.reduce import reduce_run
    from sweeprig.store.sqlite import SqliteRunStore

    with pytest.MonkeyPatch.context() as patch:
        patch.setattr(figure_block, "BLOCK_MIN_FIGURES", least)
        path, run_id = store
        with SqliteRunStore(path, create=False) as opened:
            return reduce_run(opened, run_id)
