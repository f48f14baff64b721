"""The twin reproduces the run it was fitted to: the same small sequence run on the twin
(served by the simulated bench through ``[part] sim_part``) gives figures within the twin's
targets (gain ±0.1 dB, input P1dB ±0.3 dB, IIP3 ±0.5 dB, isolations ±1 dB) at every
condition both runs measured."""

from __future__ import annotations

from sweeprig.analysis.reduce import reduce_run
from sweeprig.store.sqlite import SqliteRunStore
from sweeprig.twin.compare import compare_figures
from sweeprig.twin.partfile import write_part_file
from tests.twin.runs import SMALL, run_on_sim


def _figures(store):
    with SqliteRunStore(store, create=False) as db:
        return reduce_run(db, 1).figures


def test_the_twin_reproduces_the_measured_figures(small_store, small_twin, tmp_path):
    write_part_file(small_twin.text, tmp_path / "twin.toml")
    text = SMALL.read_text(encoding="utf-8").replace(
        'serial = "T0001"\n', 'serial = "T0001"\nsim_part = "twin.toml"\n', 1)
    sequence = tmp_path / "small-on-twin.toml"
    sequence.write_text(text, encoding="utf-8")
    twin_store = run_on_sim(sequence, tmp_path)
    pairs = compare_figures(_figures(small_store), _figures(twin_store))
    names = {p.name for p in pairs}
    assert {"conversion_gain", "input_p1db", "iip3", "lo_if_isolation",
            "lo_rf_isolation"} <= names, names
    missed = [(p.name, dict(p.conditions), round(p.difference, 3)) for p in pairs
              if not p.within]
    assert not missed, missed
