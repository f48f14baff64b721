"""Benchmark: a large table's CSV text, formatted by Python against written by polars.

Run with ``pytest -m perf -s tests/perf/test_perf_csv_writer.py``. A frame shaped like a large
run's figure table (200k rows: figure numbers, values and uncertainties, texts with commas
and quotes, flags, a category, condition columns repeating a few values, whole numbers
with empty cells) is written by :func:`sweeprig.report.csv_table.write_frame_rows` both
ways, interleaved, three times each; printed: processor time of each (polars may use
both cores: processor time, not wall time, is what the report's helper process pays) and
their ratio, and whether the two texts are the same bytes (they must be: the report's
tables never depend on whether polars is installed).

Measured (2026-12-05, 2 cores, a core at about 50 ns a loop step): the 100k-point report's
figure table (700k rows) took 4.1 s formatted by Python, 2.0 s through polars fed from
pandas, 0.2 + 0.7 s through polars fed from the Arrow table its Parquet file needs.
"""

from __future__ import annotations

import io
import statistics
import time

import numpy as np
import pandas as pd
import pytest
from machine_state import machine_text

from sweeprig.report.csv_table import polars_module, write_frame_rows

pytestmark = pytest.mark.perf

ROWS = 200_000
REPEATS = 3


def _figure_like(rows: int) -> pd.DataFrame:
    rng = np.random.default_rng(14)
    value = rng.normal(5.0, 20.0, rows)
    uncertainty = rng.uniform(0.1, 2.0, rows)
    sweeps = pd.Series(np.where(rng.random(rows) < 0.3, None, rng.integers(1, 64, rows)),
                       dtype=object)
    return pd.DataFrame({
        "figure": np.arange(rows, dtype=np.int64),
        "name": rng.choice(["small_signal_gain", "iip3", "spur_dbc"], rows).astype(object),
        "value": value,
        "unit": "dB",
        "uncertainty_db": uncertainty,
        "text": [f"{v:.3f} ± {u:.3f} dB (k = 2)" for v, u in zip(value.tolist(),
                                                                uncertainty.tolist(),
                                                                strict=True)],
        "flags": rng.choice(["", "in_noise", 'say "x", then'], rows).astype(object),
        "study": pd.Categorical(rng.choice(["compression", "two-tone", "spurs"], rows)),
        "temperature_c": rng.choice([-40.0, 25.0, 85.0], rows),
        "rf_freq_hz": rng.choice(np.linspace(1.7e9, 2.7e9, 31), rows),
        "averages": sweeps,
        "overload": rng.random(rows) < 0.01,
    })


def _written(frame: pd.DataFrame, polars_from_rows: int | None) -> tuple[float, str]:
    out = io.StringIO()
    start = time.process_time()
    write_frame_rows(out, frame, header=True, polars_from_rows=polars_from_rows)
    return time.process_time() - start, out.getvalue()


def test_print_csv_text_formatted_here_against_polars() -> None:
    assert polars_module() is not None, "the fast extra (polars, pyarrow) is not installed"
    frame = _figure_like(ROWS)
    here_s, polars_s = [], []
    same = True
    for _ in range(REPEATS):
        seconds, here = _written(frame, None)
        here_s.append(seconds)
        seconds, fast = _written(frame, 0)
        polars_s.append(seconds)
        same &= fast == here
    here, fast = statistics.median(here_s), statistics.median(polars_s)
    print(f"\nCSV text of a {ROWS:,}-row figure-like table, processor time (median of "
          f"{REPEATS}, interleaved): formatted by Python {here:.2f} s, through polars "
          f"{fast:.2f} s (the frame made an Arrow table first), ratio {fast / here:.2f}; "
          f"the same bytes: {same} ({machine_text()})")
    assert same
