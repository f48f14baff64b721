"""Benchmark: `sweeprig check` time against the number of studies (linear, not quadratic).

Prints the wall time of loading and checking sequences of 500 to 4,000 studies and the time
per study; the per-study time must stay flat (floor: the 4,000-study file takes at most
3 times as long per study as the 500-study one; quadratic checking made 2,000 studies take
23 s). Run with ``pytest -m perf -s tests/perf/test_perf_check.py``.
"""

from __future__ import annotations

import time
from pathlib import Path

import pytest

from sweeprig.cli.check_cmd import _load_bench_or_sim, check_file

HEAD = """[part]
id = "KX-0001 (fictional)"
expected_gain = "-7 dB"

[mixing]
if_frequency = "70 MHz"
"""
STUDY = """
[[study]]
name = "s{i}"
rf_frequency = "2.4 GHz"
rf_power = "-20 dBm"
lo_power = "7 dBm"
read = ["wanted"]
analyzer = {{ rbw = "1 kHz" }}
"""


@pytest.mark.perf
def test_check_time_grows_linearly_with_studies(tmp_path: Path) -> None:
    bench, _ = _load_bench_or_sim(None)
    per_study: dict[int, float] = {}
    for n in (500, 1000, 2000, 4000):
        path = tmp_path / f"studies-{n}.toml"
        path.write_text(HEAD + "".join(STUDY.format(i=i) for i in range(n)), encoding="utf-8")
        start = time.perf_counter()
        check_file(path, bench)
        elapsed = time.perf_counter() - start
        per_study[n] = elapsed / n
        print(f"{n:>5} studies: {elapsed:6.2f} s  ({elapsed / n * 1e3:.2f} ms per study)")
    assert per_study[4000] <= 3 * per_study[500]
