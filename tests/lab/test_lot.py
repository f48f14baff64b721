"""Lab views on the lab database: runs filtered across benches, and a lot report made with
the run analysis (real PostgreSQL, simulated bench, real HTML checked for its content)."""

from __future__ import annotations

import html
import json
import re
import shutil
import subprocess
import xml.etree.ElementTree as ET
from pathlib import Path

import psycopg
import pytest
from typer.testing import CliRunner

from sweeprig.analysis.lot_stats import lot_statistic
from sweeprig.cli.main import app
from sweeprig.lab.lot import LotRow, box_plot
from sweeprig.lab.queue import LabQueue
from sweeprig.lab.worker import BenchWorker


def _lab(*args: str):
    return CliRunner().invoke(app, ["lab", *args])


def test_runs_filters_and_a_lot_report(pg_url, quick_copy, served_bench, tmp_path):
    bench = served_bench("b1")
    with LabQueue(pg_url) as queue:
        for k in range(5):
            queue.submit(quick_copy, part="KX-2407", serial=f"U{k}", lot="L7")
        queue.submit(quick_copy, part="KX-2407", serial="X9", lot="L8")
    summary = BenchWorker(pg_url, bench, name="b1", once=True, say=lambda _m: None,
                          log_dir=tmp_path).run()
    assert len(summary.done) == 6
    listing = _lab("runs", "--lot", "L7", "--bench", "b1", "--state", "complete",
                   "--since", "2000-01-01", "--db", pg_url).output
    assert listing.count(" L7 ") == 5 and "X9" not in listing
    assert "(no run matches)" in _lab("runs", "--bench", "b2", "--db", pg_url).output
    bad = _lab("runs", "--since", "yesterday", "--db", pg_url)
    assert bad.exit_code == 2 and "--since" in bad.output and "YYYY-MM-DD" in bad.output
    out = tmp_path / "lot"
    result = _lab("lot", "--lot", "L7", "--out", str(out), "--db", pg_url)
    assert result.exit_code == 0, result.output
    data = json.loads((out / "lot.json").read_text())
    assert [u["serial"] for u in data["units"]] == [f"U{k}" for k in range(5)]
    gain = [r for r in data["rows"] if r["figure"] == "conversion_gain"]
    assert gain and all(r["n"] == 5 and r["lsl"] == 9.0 and r["usl"] == 14.0 for r in gain)
    assert all(r["cpk"] is not None and r["minimum"] <= r["typ"] <= r["maximum"] for r in gain)
    page = (out / "lot.html").read_text()
    assert "Cpk" in page and "ISO 22514-2" in page and "<svg" in page
    assert "reducing" not in result.output  # the worker kept each run's figures
    _renders_in_chromium(out / "lot.html", tmp_path)
    with psycopg.connect(pg_url, autocommit=True) as conn:  # a run finished before schema 4
        conn.execute("DELETE FROM run_figures WHERE run_id = %s", (data["units"][0]["run"],))
    again = _lab("lot", "--lot", "L7", "--out", str(tmp_path / "lot2"), "--db", pg_url)
    assert again.exit_code == 0 and again.output.count("reducing it (once)") == 1
    assert json.loads((tmp_path / "lot2" / "lot.json").read_text())["rows"] == data["rows"]
    with psycopg.connect(pg_url, autocommit=True) as conn:  # and it is kept from now on
        assert conn.execute("SELECT COUNT(*) FROM run_figures").fetchone()[0] == 6
    none = _lab("lot", "--lot", "nope", "--out", str(out), "--db", pg_url)
    assert none.exit_code == 2 and "no complete run matches" in none.output


_PROBE = """<script>addEventListener('load', () => {
  const svgs = Array.from(document.querySelectorAll('figure svg'));
  document.body.setAttribute('data-plots', svgs.map(s => {
    const r = s.getBoundingClientRect();
    return Math.round(r.width) + 'x' + Math.round(r.height) + ':'
      + s.querySelectorAll('circle').length; }).join(' '));
});</script>"""


def _renders_in_chromium(page: Path, tmp_path: Path) -> None:
    """Every box plot of ``page`` laid out by headless Chromium, with a dot per unit."""
    browser = shutil.which("chromium") or shutil.which("chromium-browser")
    if browser is None:
        pytest.skip("Chromium is not installed (Debian: apt-get install chromium); CI has it")
    probe = tmp_path / "probe.html"
    probe.write_text(page.read_text(encoding="utf-8").replace("<head>", "<head>" + _PROBE, 1),
                     encoding="utf-8")
    result = subprocess.run([browser, "--headless", "--no-sandbox", "--disable-gpu",
                             "--no-first-run", f"--user-data-dir={tmp_path / 'profile'}",
                             "--dump-dom", probe.as_uri()],
                            capture_output=True, text=True, timeout=90, check=False)
    found = re.search(r'data-plots="([^"]*)"', result.stdout)
    assert found, result.stderr[-2000:]
    plots = html.unescape(found.group(1)).split()
    assert plots and all(p.startswith("520x64:5") for p in plots), plots


def test_a_box_plot_is_svg_with_a_mark_per_unit_and_the_limits():
    row = LotRow("conversion_gain", "dB", (("rf_freq_hz", 2.4e9),),
                 lot_statistic([f"U{k}" for k in range(8)],
                               [11.0, 11.2, 11.1, 10.9, 11.3, 11.0, 11.1, 16.0],
                               lsl=9.0, usl=14.0), ())
    svg = ET.fromstring(box_plot(row))
    ns = "{http://www.w3.org/2000/svg}"
    assert len(svg.findall(f"{ns}circle")) == 8
    outliers = [c for c in svg.findall(f"{ns}circle") if c.get("stroke") == "#b3261e"]
    assert [c.find(f"{ns}title").text for c in outliers] == ["U7: 16.000"]
    assert {t.text for t in svg.findall(f"{ns}text")} >= {"LSL 9", "USL 14"}
