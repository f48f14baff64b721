"""Adaptive soak: a condition's soak ends once the part is settled by a measured criterion.

The simulated part's temperature follows the chamber's DUT probe (a first-order lag behind
the air, sweeprig/sim/instruments/chamber.py), so its gain and current really settle there.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import pytest

from sweeprig.analysis.reduce import reduce_run
from sweeprig.engine.runner import is_settled, window_spread
from sweeprig.engine.session import run_sequence, shipped_sequences_dir
from sweeprig.report import write_report
from sweeprig.report.plots import all_plots
from sweeprig.report.tables import read_figures_document
from sweeprig.store.sqlite import SqliteRunStore

ADAPTIVE = """
[conditions.adaptive_soak]
{criterion}
window = "1 min"
minimum = "1 min"
every = "15 s"
"""


def test_window_spread_needs_the_whole_window() -> None:
    curve = [(0.0, 25.0, 1.0), (15.0, 25.0, 1.5)]
    assert window_spread(curve, 60.0) is None  # 15 s of readings cannot judge a minute
    curve += [(30.0, 25.0, 1.0), (45.0, 25.0, 1.0), (60.0, 25.0, 1.25)]
    assert window_spread(curve, 60.0) == 0.5
    assert is_settled(curve, 60.0, 0.5)
    assert not is_settled(curve, 60.0, 0.49)
    assert window_spread(curve, 30.0) == 0.25  # only the last 30 s


def _sequence(tmp_path: Path, name: str, criterion: str | None, *,
              demo: str = "kx2417-characterisation.toml") -> Path:
    text = (shipped_sequences_dir() / "demo" / demo).read_text(encoding="utf-8")
    if criterion is not None:
        head, sep, rest = text.partition("\n# Conversion gain, leakage")
        assert sep, "the demo's layout changed"
        text = head + ADAPTIVE.format(criterion=criterion) + sep + rest
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def _soak_events(store_path: Path, run_id: int) -> list[dict]:
    with SqliteRunStore(store_path, create=False) as store:
        return [dict(ev.details) for ev in store.events(run_id) if ev.kind == "soak_curve"]


def test_supply_current_criterion_on_the_simulated_bench(tmp_path: Path) -> None:
    """A two-temperature quick look judged by the supply current: each soak ends settled
    before its maximum, and its curve (time, probe, current) is stored with the run."""
    text = (shipped_sequences_dir() / "demo" / "quick.toml").read_text(encoding="utf-8")
    text = text.replace('temperature = "25 degC"', 'temperature = ["25 degC", "70 degC"]')
    text = text.replace('soak = "2 min"', 'soak = "10 min"')
    text = text.replace('settle = "20 ms"\n', 'settle = "20 ms"\n' + ADAPTIVE.format(
        criterion='current_drift = "0.05 mA"'))
    path = tmp_path / "quick-adaptive.toml"
    path.write_text(text, encoding="utf-8")
    outcome = run_sequence(path, sim=True, store_path=tmp_path / "runs.sqlite")
    assert outcome.status == "complete", outcome.reason
    curves = _soak_events(tmp_path / "runs.sqlite", outcome.run_id)
    assert [c["temperature_c"] for c in curves] == [25.0, 70.0]
    for curve in curves:
        assert curve["by"] == "supply_current" and curve["unit"] == "A"
        assert curve["settled"] and 60.0 <= curve["soak_s"] < 600.0
        assert len(curve["time_s"]) == len(curve["probe_c"]) == len(curve["value"]) >= 5
        assert abs(curve["probe_c"][-1] - curve["temperature_c"]) < 1.0


@pytest.mark.slow
def test_demo_with_adaptive_soak_is_a_quarter_shorter_with_the_same_figures(
        tmp_path: Path) -> None:
    """The demo (-40/+25/+85 degC) with adaptive soak judged by gain (0.02 dB over 1 min,
    1 min at least) against its fixed 10 min soaks: bench time at least 25 % shorter (the
    issue's figure), the same verdict, and every figure with an uncertainty equal within it.

    Figures read close to the analyzer noise are compared too: the soak's extra readings
    advance the simulated analyzer's noise draws, so those differ by the noise realisation,
    which each budget's per-reading noise scatter (Type A) covers. Two measurements, each
    with its own noise, agree when |x1 − x2| ≤ sqrt(U1² + U2²) (the normalised error
    |En| ≤ 1 of ISO 13528 / ISO/IEC 17043 proficiency testing): a reading close to the noise
    can have a different signal-to-noise ratio, and so a different U, in each run.
    """
    fixed = run_sequence(_sequence(tmp_path, "fixed.toml", None), sim=True,
                         store_path=tmp_path / "fixed.sqlite")
    adaptive = run_sequence(_sequence(tmp_path, "adaptive.toml", 'gain_drift = "0.02 dB"'),
                            sim=True, store_path=tmp_path / "adaptive.sqlite")
    assert fixed.status == adaptive.status == "complete"
    saving = 1.0 - adaptive.sim_elapsed_s / fixed.sim_elapsed_s
    print(f"bench time: fixed {fixed.sim_elapsed_s:.0f} s, adaptive "
          f"{adaptive.sim_elapsed_s:.0f} s ({saving:.1%} shorter); predicted "
          f"{adaptive.predicted_bench_s:.0f} s")
    assert saving >= 0.25
    assert adaptive.predicted_bench_s == pytest.approx(adaptive.sim_elapsed_s, rel=0.10)
    curves = _soak_events(tmp_path / "adaptive.sqlite", adaptive.run_id)
    assert sorted(c["temperature_c"] for c in curves) == [-40.0, 25.0, 85.0]
    assert all(c["settled"] and c["by"] == "gain" for c in curves)

    made = {}
    for name, outcome in (("fixed", fixed), ("adaptive", adaptive)):
        with SqliteRunStore(tmp_path / f"{name}.sqlite", create=False) as store:
            run = reduce_run(store, outcome.run_id)
        files = write_report(run, tmp_path / name)
        made[name] = (run, read_figures_document(files.figures_json))
    assert "soak_curves" in [p.key for p in all_plots(made["adaptive"][0])]
    assert "Adaptive soaks" in (tmp_path / "adaptive" / "report.html").read_text("utf-8")
    assert made["fixed"][1]["verdict"] == made["adaptive"][1]["verdict"]

    def key(figure: dict) -> tuple[str, str]:
        return figure["name"], json.dumps(figure["conditions"], sort_keys=True)

    theirs = {key(f): f for f in made["adaptive"][1]["figures"]}
    compared = 0
    against_bound: list[tuple] = []
    for mine in made["fixed"][1]["figures"]:
        other = theirs[key(mine)]
        if mine["value"] is None or other["value"] is None:
            continue
        u, v = mine.get("uncertainty_db"), other.get("uncertainty_db")
        if u is not None and v is not None:
            compared += 1
            both = math.hypot(u, v)
            assert abs(mine["value"] - other["value"]) <= both, (key(mine), mine["value"],
                                                                  other["value"], both)
        elif (u is None) != (v is None):
            # a product at the noise margin: a number in one run, a bound in the other. A
            # bound has no uncertainty (its product's displayed level, one noisy reading, is
            # taken as the upper limit), so these are only counted and shown, not judged.
            number, bound = (mine, other) if v is None else (other, mine)
            assert bound.get("bound") in ("<", ">"), (key(mine), bound)
            low = number["value"] - number["uncertainty_db"]
            high = number["value"] + number["uncertainty_db"]
            if not (low <= bound["value"] if bound["bound"] == "<" else high >= bound["value"]):
                against_bound.append((key(mine)[0], round(number["value"], 2),
                                      round(number["uncertainty_db"], 2), bound["bound"],
                                      round(bound["value"], 2)))
    print(f"figures compared by their uncertainties: {compared}; a number whose interval "
          f"misses the other run's bound: {against_bound}")
    assert compared >= 400
