"""The twin reproduces the run it was fitted to: the same small sequence run on the twin
(served by the simulated bench through ``[part] sim_part``) gives figures within the twin's
targets (gain ±0.1 dB, input P1dB ±0.3 dB, IIP3 ±0.5 dB, isolations ±1 dB) at every
condition both runs measured; and the engineer's last step, the sequence run as a test
against the twin (the sequence-test plugin's judge), passes its own limits and fails, with
the figure named, a limit broken on purpose. Both runs are on the default simulated bench,
calibrated (conftest)."""

from __future__ import annotations

from pathlib import Path

from sweeprig.analysis.reduce import reduce_run
from sweeprig.seqtest import judge
from sweeprig.store.sqlite import SqliteRunStore
from sweeprig.twin.compare import compare_figures
from sweeprig.twin.partfile import write_part_file
from tests.twin.runs import SMALL, run_on_sim


def _figures(store):
    with SqliteRunStore(store, create=False) as db:
        return reduce_run(db, 1).figures


def _on_twin(small_twin, folder: Path) -> Path:
    write_part_file(small_twin.text, folder / "twin.toml")
    text = SMALL.read_text(encoding="utf-8").replace(
        'serial = "T0001"\n', 'serial = "T0001"\nsim_part = "twin.toml"\n', 1)
    sequence = folder / "small-on-twin.toml"
    sequence.write_text(text, encoding="utf-8")
    return sequence


def test_the_twin_reproduces_the_measured_figures(small_store, small_calibration, small_twin,
                                                  tmp_path):
    sequence = _on_twin(small_twin, tmp_path)
    twin_store = run_on_sim(sequence, tmp_path, None, calibration=small_calibration)
    pairs = compare_figures(_figures(small_store), _figures(twin_store))
    names = {p.name for p in pairs}
    assert {"conversion_gain", "input_p1db", "iip3", "lo_if_isolation",
            "lo_rf_isolation"} <= names, names
    missed = [(p.name, dict(p.conditions), round(p.difference, 3)) for p in pairs
              if not p.within]
    assert not missed, missed


def test_the_sequence_run_as_a_test_against_the_twin_passes_then_fails_readably(small_twin,
                                                                                 tmp_path):
    sequence = _on_twin(small_twin, tmp_path)
    verdict = judge.test_sequence(sequence)
    assert verdict.passed(strict=False), verdict.failed
    assert verdict.sim_part.endswith("twin.toml")
    sequence.write_text(sequence.read_text(encoding="utf-8").replace(
        'min = "9 dB"', 'min = "13 dB"', 1), encoding="utf-8")  # broken on purpose
    verdict = judge.test_sequence(sequence)
    assert not verdict.passed(strict=False)
    table = judge.miss_table(verdict.failed, "limits missed:")
    assert "conversion_gain" in table and "min 13" in table, table
