"""Benchmark: the whole shipped sequence set run as tests (``pytest sequences/``, the
sequence-test plugin) on this machine, against the issue's target of 60 s.

Prints the wall and processor time of the whole run and each sequence's duration (pytest's
own ``--durations``). A subprocess, as a user would run it. Run with
``pytest -m perf -s tests/perf/test_perf_sequences.py``.
"""

from __future__ import annotations

import os
import re
import subprocess
import sys
import time

import pytest

from sweeprig.engine.session import shipped_sequences_dir

TARGET_S = 60.0


@pytest.mark.perf
def test_print_the_shipped_sequences_as_tests_wall_time(tmp_path):
    folder = shipped_sequences_dir()
    start = time.perf_counter()
    before = os.times()
    done = subprocess.run(
        [sys.executable, "-m", "pytest", str(folder), "-q", "-p", "no:cacheprovider",
         "--durations=0", "--durations-min=0", f"--basetemp={tmp_path / 'base'}",
         f"--junitxml={tmp_path / 'sequences.xml'}"],
        capture_output=True, text=True, check=False, cwd=tmp_path)
    wall = time.perf_counter() - start
    after = os.times()
    cpu = (after.children_user - before.children_user) + (
        after.children_system - before.children_system)
    assert done.returncode == 0, done.stdout + done.stderr
    print(f"\nshipped sequences as tests: {wall:.1f} s wall, {cpu:.1f} s processor "
          f"(target {TARGET_S:.0f} s wall: {'met' if wall <= TARGET_S else 'MISSED'})")
    for line in done.stdout.splitlines():
        if re.match(r"^\d+\.\d+s call", line):
            print("  " + line)
