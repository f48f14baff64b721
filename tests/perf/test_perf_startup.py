"""Benchmark: how fast the command starts and how much memory it takes.

Prints, for ``sweeprig --help`` and ``sweeprig check sequences/demo/quick.toml`` (each run
three times in a fresh process, median shown), the wall time, the processor time (what a
loaded machine distorts least) and the peak resident memory of the process, beside the
figures issue 14 sets (``--help`` ≤ 0.3 s, ``check`` ≤ 0.8 s, both ≤ 60 MB; measured on a
quiet machine), with met or MISSED. Each command runs once first, uncounted, so that the
package's bytecode is cached as it is in an installed copy. Nothing is asserted about the
times: a loaded machine would fail it. Which modules start-up loads is pinned by
tests/cli/test_startup_imports.py.

Run with ``pytest -m perf -s tests/perf/test_perf_startup.py``.
"""

from __future__ import annotations

import os
import statistics
import subprocess
import sys
import time
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
QUICK = ROOT / "sequences" / "demo" / "quick.toml"
RUNS = 3

#: (what, arguments, target wall time s, target peak resident MB)
CASES = (
    ("sweeprig --help", ["--help"], 0.3, 60.0),
    ("sweeprig check sequences/demo/quick.toml", ["check", str(QUICK)], 0.8, 60.0),
)


#: Run in the child: the command itself, then its own peak resident memory (VmHWM of
#: /proc/self/status, Linux) on stderr at exit. ``ru_maxrss`` from ``wait4`` would count
#: the copy of this pytest process the child is between fork and exec (about 60 MB).
_CHILD = """
import atexit, runpy, sys
def _peak():
    try:
        with open('/proc/self/status', encoding='ascii') as status:
            for line in status:
                if line.startswith('VmHWM:'):
                    sys.stderr.write('\\n@peak-kb ' + line.split()[1] + '\\n')
    except OSError:
        pass
atexit.register(_peak)
sys.argv = ['sweeprig', *sys.argv[1:]]
runpy.run_module('sweeprig', run_name='__main__', alter_sys=True)
"""


#: The children may write bytecode (an installed package has it: pip compiles on install);
#: with PYTHONDONTWRITEBYTECODE set every start compiles the whole package from source.
_ENV = {k: v for k, v in os.environ.items() if k != "PYTHONDONTWRITEBYTECODE"}


def _once(args: list[str]) -> tuple[float, float, float]:
    """Wall time (s), processor time (user + system, s) and peak resident memory (MB) of
    one ``sweeprig`` process."""
    command = [sys.executable, "-c", _CHILD, *args]
    start = time.perf_counter()
    process = subprocess.Popen(command, cwd=ROOT, stdout=subprocess.DEVNULL,
                               stderr=subprocess.PIPE, env=_ENV)
    _, status, usage = os.wait4(process.pid, 0)
    wall_s = time.perf_counter() - start
    process.returncode = os.waitstatus_to_exitcode(status)
    stderr = process.stderr.read().decode(errors="replace") if process.stderr else ""
    if process.stderr:
        process.stderr.close()
    assert process.returncode == 0, stderr
    peaks = [line.split()[1] for line in stderr.splitlines() if line.startswith("@peak-kb ")]
    peak_mb = int(peaks[-1]) / 1024.0 if peaks else usage.ru_maxrss / 1024.0  # Linux: kB
    return wall_s, usage.ru_utime + usage.ru_stime, peak_mb


@pytest.mark.perf
def test_print_start_up_time_and_memory() -> None:
    print()
    for what, args, target_s, target_mb in CASES:
        _once(args)  # writes the bytecode, as installing the package does; not counted
        runs = [_once(args) for _ in range(RUNS)]
        wall_s = statistics.median(r[0] for r in runs)
        cpu_s = statistics.median(r[1] for r in runs)
        peak_mb = statistics.median(r[2] for r in runs)
        verdict = "met" if wall_s <= target_s and peak_mb <= target_mb else "MISSED"
        print(f"{what}: {wall_s:.3f} s (target ≤ {target_s} s, {wall_s / target_s:.2f}× the "
              f"target; {cpu_s:.3f} s of processor time), {peak_mb:.0f} MB peak resident "
              f"(target ≤ {target_mb:.0f} MB, {peak_mb / target_mb:.2f}×): {verdict}; median "
              f"of {RUNS}, load average {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores")
