"""The whole run's ETA: the prediction of what remains (points, chamber travels and soaks of
the conditions still to come, what is left of the wait in hand), corrected by the pace."""

from __future__ import annotations

from pathlib import Path

import pytest

from sweeprig.cli.run_cmd import _eta_text
from sweeprig.engine.eta import EtaTracker, eta_text
from sweeprig.engine.session import run_sequence, shipped_sequences_dir
from sweeprig.formats.sequence import sequence_from_dict
from sweeprig.plan.duration import estimate_duration
from sweeprig.store.sqlite import SqliteRunStore


def _three_temperatures(tmp_path: Path) -> Path:
    text = (shipped_sequences_dir() / "demo" / "quick.toml").read_text(encoding="utf-8")
    text = text.replace('temperature = "25 degC"', 'temperature = ["-20 degC", "25 degC", '
                        '"70 degC"]').replace('soak = "2 min"', 'soak = "10 min"')
    path = tmp_path / "three.toml"
    path.write_text(text, encoding="utf-8")
    return path


def test_the_eta_counts_the_conditions_still_to_come() -> None:
    seq = sequence_from_dict({
        "part": {"id": "KX-1", "expected_gain": "-7 dB"},
        "mixing": {"if_frequency": "70 MHz"},
        "conditions": {"temperature": [25, 85], "soak": "10 min"},
        "study": [{"name": "s", "rf_frequency": "2.4 GHz", "rf_power": [-20, -10],
                   "lo_power": 7, "read": ["wanted"]}],
    })
    estimate = estimate_duration(seq)
    eta = EtaTracker(estimate, 4)
    (t1, c1), (_t2, c2) = estimate.conditions_s
    assert eta.bench_left_s() == pytest.approx(4 * eta.point_s + c1 + c2)
    eta.at_temperature(t1)  # in the first soak, 5 min left of it
    assert eta.bench_left_s(wait_left_s=300.0) == pytest.approx(4 * eta.point_s + 300 + c2)
    eta.point_measured(2 * eta.point_s)  # twice as slow as predicted: the points scale
    assert eta.pace() == pytest.approx(2.0)
    assert eta.bench_left_s() == pytest.approx(3 * eta.point_s * 2 + c2)


def test_eta_text_and_the_live_line_field() -> None:
    assert eta_text(3725.2) == "1:02:06"
    assert _eta_text({"eta_wall_s": 61.0}) == "0:01:01"
    assert _eta_text({"what": "soak"}) is None  # unknown: the line keeps what it had


def test_a_live_eta_at_every_wait_and_point_within_15_percent(tmp_path: Path) -> None:
    """On the simulated bench (three temperatures, 10 min soaks): every wait (chamber and
    soak) and every point carries the ETA, and at every point with more than a tenth of the
    run still to go it is within ±15 % of the bench time that was actually left."""
    waits: list[dict] = []
    etas: dict[int, float] = {}
    outcome = run_sequence(
        _three_temperatures(tmp_path), sim=True, store_path=tmp_path / "runs.sqlite",
        on_wait=lambda a: waits.append(dict(a)),
        on_point=lambda r: etas.__setitem__(r.point.index, r.eta["eta_s"]))  # type: ignore[index]
    assert outcome.status == "complete", outcome.reason
    assert {w["what"] for w in waits} == {"chamber", "soak"}
    assert all(w["eta_s"] > 0 and w["eta_wall_s"] >= 0 for w in waits)
    soaks = [w for w in waits if w["what"] == "soak"]
    assert soaks[0]["eta_s"] > soaks[-1]["eta_s"]  # the first soak counts the others' time
    with SqliteRunStore(tmp_path / "runs.sqlite", create=False) as store:
        points = store.points_frame(outcome.run_id)
    end_s = float(points["sim_end_s"].max())
    checked = 0
    for index, end in zip(points["point_index"], points["sim_end_s"], strict=True):
        actual = end_s - float(end)
        if actual > 0.1 * end_s:
            checked += 1
            assert etas[int(index)] == pytest.approx(actual, rel=0.15), index
    assert checked >= 5
