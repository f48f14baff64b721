"""Lab views on the lab database: runs filtered across benches, and a lot report made with
the run analysis (real PostgreSQL, simulated bench, real HTML checked for its content)."""

from __future__ import annotations

import json

from typer.testing import CliRunner

from sweeprig.cli.main import app
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
    assert "Cpk" in page and "ISO 22514-2" in page and "<img" in page
    none = _lab("lot", "--lot", "nope", "--out", str(out), "--db", pg_url)
    assert none.exit_code == 2 and "no complete run matches" in none.output
