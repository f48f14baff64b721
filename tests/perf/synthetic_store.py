"""A run store of any size, written synthetically for the report benchmarks.

The readings come from :func:`sweeprig.analysis.synthetic.synthetic_run` (a fictional part: a
cubic per condition plus seeded noise), turned back into the store's vocabulary (the inverse
of :mod:`sweeprig.analysis.load`: ``if`` → a ``wanted`` reading, ``im3_low`` → ``im3.lower``,
``spur`` → ``mxn.<m>x<n>``, an attenuation repeat → ``<name>.att10``) and written with one
bulk insert per table, so a million points take seconds to write instead of a million
transactions. The run row is made through the store's own ``create_run`` with a sequence
whose studies, conditions and limits match the synthetic points, so the reduction judges the
figures as it would a measured run.
"""

from __future__ import annotations

import json
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

#: The corners of the synthetic run: three temperatures, one supply, three LO drives.
TEMPERATURES_C = (-40.0, 25.0, 85.0)
SUPPLIES_V = (3.3,)
LO_POWERS_DBM = (-3.0, 0.0, 3.0)
#: Points and readings :func:`synthetic_run` makes per corner and RF frequency.
POINTS_PER_FREQUENCY_AND_CORNER = 41 + 26 + 2 + 2
READINGS_PER_FREQUENCY_AND_CORNER = (41 * 2 + 5) + 26 * 10 + 2 * 24 + 6
#: RF band of the synthetic run, Hz.
BAND_HZ = (1.8e9, 2.7e9)
#: Frequencies written per slice (one synthetic_run call, one bulk insert), bounding memory.
SLICE_FREQUENCIES = 40

#: A sequence matching the synthetic studies (fictional part; its limits are what the
#: reduction judges). The RF frequency axis is filled in per size.
SEQUENCE_TEMPLATE = """\
format = 1

[about]
title = "Synthetic characterisation for the report benchmark (fictional part)"
operator = "benchmark"

[part]
id = "KX-2417 (fictional)"
serial = "SYN-{points}"
expected_gain = "7 dB"

[mixing]
conversion = "down"
lo_side = "low"
if_frequency = "70 MHz"

[conditions]
temperature = ["-40 degC", "25 degC", "85 degC"]
supply = "3.3 V"

[[study]]
name = "compression"
rf_frequency = {rf}
rf_power = {{ start = "-30 dBm", stop = "10 dBm", step = "1 dB" }}
lo_power = ["-3 dBm", "0 dBm", "3 dBm"]
read = ["wanted", "supply_current"]

[[study]]
name = "two_tone"
rf_frequency = {rf}
tone_spacing = "1 MHz"
rf_power = {{ start = "-30 dBm", stop = "-5 dBm", step = "1 dB" }}
lo_power = ["-3 dBm", "0 dBm", "3 dBm"]
read = ["wanted", "im3", "im2"]

[[study]]
name = "spurs"
rf_frequency = {rf}
rf_power = ["-20 dBm", "-10 dBm"]
lo_power = ["-3 dBm", "0 dBm", "3 dBm"]
read = ["wanted", {{ kind = "mxn", order = 8 }}]

[[study]]
name = "isolation"
rf_frequency = {rf}
rf_power = "-20 dBm"
lo_power = ["-3 dBm", "0 dBm", "3 dBm"]
read = ["wanted", "lo_at_if", "lo_at_rf", "rf_at_if", "image", "supply_current"]

[[spec]]
figure = "conversion_gain_db"
min = "4 dB"
max = "9 dB"

[[spec]]
figure = "iip3_dbm"
min = "8 dBm"

[[spec]]
figure = "input_p1db_dbm"
min = "-5 dBm"

[[spec]]
figure = "spur_dbc"
max = "-30 dBc"

[[spec]]
figure = "supply_current_a"
max = "60 mA"
"""

_DIRECT = {"if": ("wanted", "wanted"), "lo_at_if": ("lo_at_if", "lo_at_if"),
           "lo_at_rf": ("lo_at_rf", "lo_at_rf"), "rf_at_if": ("rf_at_if", "rf_at_if"),
           "image": ("image", "image"), "supply_current": ("supply_current", "supply_current"),
           "im3_low": ("im3", "im3.lower"), "im3_high": ("im3", "im3.upper"),
           "im2_low": ("im2", "im2.diff"), "im2_high": ("im2", "im2.sum")}
_PORTS = {"lo_at_rf": "rf"}


def write_synthetic_store(path: Path, points: int, seed: int = 1) -> dict[str, float]:
    """Write a complete run of about ``points`` points into a new SQLite store at ``path``
    (in slices of :data:`SLICE_FREQUENCIES` RF frequencies, so memory stays bounded); return
    its run id, point and reading counts."""
    from sweeprig.analysis.synthetic import synthetic_run
    from sweeprig.files import sha256_text
    from sweeprig.store.sql import INSERT_POINT_SQL, INSERT_READING_SQL
    from sweeprig.store.sqlite import SqliteRunStore

    corners = len(TEMPERATURES_C) * len(SUPPLIES_V) * len(LO_POWERS_DBM)
    n_freq = max(1, round(points / (POINTS_PER_FREQUENCY_AND_CORNER * corners)))
    freqs = np.linspace(*BAND_HZ, n_freq)
    low, high = freqs[0] / 1e9, freqs[-1] / 1e9
    rf = (f'{{ start = "{low:.9g} GHz", stop = "{high:.9g} GHz", points = {n_freq} }}'
          if n_freq > 1 else f'"{low:.9g} GHz"')
    total = n_freq * POINTS_PER_FREQUENCY_AND_CORNER * corners
    text = SEQUENCE_TEMPLATE.format(points=total, rf=rf)
    with SqliteRunStore(path) as store:
        run_id = store.create_run(sequence_path="synthetic.toml", sequence_text=text,
                                  simulated=True, operator="benchmark",
                                  part="KX-2417 (fictional)", serial="SYN",
                                  title="Synthetic report benchmark",
                                  points_total=total, status="running")
    conn = sqlite3.connect(path)
    written_points = written_readings = 0
    try:
        for first in range(0, n_freq, SLICE_FREQUENCIES):
            band = freqs[first:first + SLICE_FREQUENCIES]
            captures = synthetic_run(
                band.size * READINGS_PER_FREQUENCY_AND_CORNER * corners, seed=seed + first,
                temperatures_c=TEMPERATURES_C, supplies_v=SUPPLIES_V,
                lo_powers_dbm=LO_POWERS_DBM, rf_band_hz=(band[0], band[-1]),
                first_point=written_points)
            point_rows = captures.drop_duplicates("point")
            _insert(conn, run_id, captures, point_rows, INSERT_POINT_SQL, INSERT_READING_SQL)
            written_points += len(point_rows)
            written_readings += len(captures)
        conn.execute("UPDATE runs SET status = 'complete', finished_utc = created_utc, "
                     "sequence_sha256 = ? WHERE id = ?", (sha256_text(text), run_id))
        conn.commit()
    finally:
        conn.close()
    return {"run_id": float(run_id), "points": float(written_points),
            "readings": float(written_readings)}


def _insert(conn: sqlite3.Connection, run_id: int, captures, point_rows, point_sql: str,
            reading_sql: str) -> None:
    def cell(value: object) -> object:
        if isinstance(value, float) and value != value:
            return None
        return value

    conditions = ("temperature_c", "supply_v", "lo_freq_hz", "lo_power_dbm", "rf_freq_hz",
                  "rf_power_dbm", "rf2_freq_hz", "rf2_power_dbm")
    cols = [point_rows[c].to_numpy() for c in ("point", "study", *conditions)]
    # the DUT probe at the set point (a soaked part: one off it would flag temperature_off)
    conn.executemany(point_sql, (
        (run_id, int(p), s, *(cell(float(x)) for x in rest), float(rest[0]), None,
         float(p), float(p) + 0.5, None, None, "{}")
        for p, s, *rest in zip(*cols, strict=True)))
    reading = captures["reading"].to_numpy()
    atten = captures["atten_check"].to_numpy()
    m = captures["m"].to_numpy()
    n = captures["n"].to_numpy()
    value = captures["value"].to_numpy()
    point = captures["point"].to_numpy()
    order = np.argsort(point, kind="stable")
    reading_no = np.empty(len(point), dtype=np.int64)
    starts = np.r_[0, np.flatnonzero(np.diff(point[order])) + 1]
    counts = np.diff(np.r_[starts, len(point)])
    reading_no[order] = np.arange(len(point)) - np.repeat(starts, counts)
    freq = captures["freq_hz"].to_numpy()
    level = captures["level_dbm"].to_numpy()
    floor = captures["noise_floor_dbm"].to_numpy()
    att_db = captures["attenuation_db"].to_numpy()

    def rows():
        for i in range(len(point)):
            short = reading[i]
            if short == "spur":
                kind, name = "mxn", f"mxn.{int(m[i])}x{int(n[i])}"
                mm, nn = int(m[i]), int(n[i])
            else:
                kind, name = _DIRECT[short]
                mm, nn = (1, -1) if short == "if" else (None, None)
            if atten[i]:
                name += ".att10"
            extra = (json.dumps({"current_a": float(value[i])}) if short == "supply_current"
                     else "{}")
            yield (run_id, int(point[i]), int(reading_no[i]), name, kind,
                   _PORTS.get(short, "if"), cell(float(freq[i])), cell(float(level[i])),
                   cell(float(floor[i])), mm, nn, 1e6, 1e3, cell(float(att_db[i])), 0.0, 1,
                   0, 1 if atten[i] else None, extra)

    conn.executemany(reading_sql, rows())


# -- what the report benchmarks share -----------------------------------------------------


def run_child(script: Path, *args: str) -> dict[str, float]:
    """Run benchmark ``script`` in a fresh interpreter with ``args`` and return the JSON of
    its last output line (a child of its own, so its peak resident memory is its own)."""
    child = subprocess.run([sys.executable, str(script), *args], capture_output=True,
                           text=True, check=False, timeout=3600)
    assert child.returncode == 0, child.stderr
    return json.loads(child.stdout.strip().splitlines()[-1])


def timed_store(path: str, points: str) -> dict[str, float]:
    """:func:`write_synthetic_store` of ``points`` points at ``path``, with its ``seconds``."""
    start = time.perf_counter()
    out = write_synthetic_store(Path(path), int(points))
    out["seconds"] = time.perf_counter() - start
    return out


def verdict(value: float, target: float) -> str:
    """``met`` or ``MISSED`` against a ceiling."""
    return "met" if value <= target else "MISSED"
