"""The planner's risks read from a real SQLite run store (``extra_json`` ``risks``, seam A of
the planner): a reading with risks raises their flags through ``reduce_run``; a store written
before predictions reads as "no prediction" and raises nothing from the absence; the part's
``expected_supply_current`` flags figures from points whose current was far off it."""

from __future__ import annotations

from pathlib import Path

import pytest

from sweeprig.analysis.figures import (
    ANALYZER_COMPRESSION,
    NOISE_LIMITED,
    RBW_MERGED,
    SOURCE_HARMONIC,
    SUPPLY_CURRENT_OFF,
)
from sweeprig.analysis.load import load_captures
from sweeprig.analysis.reduce import reduce_run
from sweeprig.errors import InputError
from sweeprig.formats.sequence import load_sequence
from sweeprig.store import PointRecord, ReadingRecord, SqliteRunStore

LO_HZ, RF_HZ, IF_HZ = 2.33e9, 2.4e9, 70e6
CAUSES = {ANALYZER_COMPRESSION, SOURCE_HARMONIC, RBW_MERGED, NOISE_LIMITED, SUPPLY_CURRENT_OFF}

SEQUENCE = """\
format = 1

[part]
id = "KX-2407 (fictional)"
expected_gain = "8 dB"
{current}

[mixing]
conversion = "down"
lo_side = "low"
if_frequency = "70 MHz"

[conditions]
supply = "3.3 V"

[[study]]
name = "band"
rf_frequency = "2.4 GHz"
rf_power = "-20 dBm"
lo_power = "0 dBm"
read = ["wanted", "lo_at_if", "supply_current"]
"""


def _store(path: Path, *, current_line: str, risks: list[str] | None,
           currents: tuple[float, ...] = (0.045, 0.045, 0.045), floor: float | None = -110.0):
    text = SEQUENCE.format(current=current_line)
    db = SqliteRunStore(path)
    run = db.create_run(sequence_path="seq.toml", sequence_text=text,
                        points_total=len(currents))
    extra = {} if risks is None else {"risks": risks, "predicted": {"product_dbm": -12.0}}
    for i, current in enumerate(currents):
        base = {"temperature_c": 25.0, "supply_v": 3.3, "lo_freq_hz": LO_HZ,
                "lo_power_dbm": 0.0, "rf_freq_hz": RF_HZ, "rf_power_dbm": -20.0}
        db.write_point(run, PointRecord(i, "band", **base), [
            ReadingRecord("wanted", "wanted", "if", IF_HZ, -12.0, floor, m=-1, n=1,
                          rbw_hz=1e3, attenuation_db=10.0, extra=dict(extra)),
            ReadingRecord("lo_at_if", "lo_at_if", "if", LO_HZ, -40.0, floor, m=1, n=0,
                          rbw_hz=1e3, attenuation_db=10.0, extra={}),
            ReadingRecord("supply_current", "supply_current", "dc",
                          extra={"current_a": current, "voltage_v": 3.3}),
        ])
    db.set_status(run, "complete")
    return db, run


def test_risks_are_read_from_extra_json_and_old_stores_read_as_no_prediction(tmp_path):
    db, run = _store(tmp_path / "new.sqlite", current_line="", risks=["noise", "rbw_merged"])
    with db:
        captures = load_captures(db, run)
        wanted = captures[captures["reading"] == "if"]
        assert set(wanted["risks"]) == {"noise,rbw_merged"}
        assert captures.loc[captures["reading"] == "lo_at_if", "risks"].isna().all()
        figures = reduce_run(db, run).figures
    gains = [f for f in figures if f.name == "conversion_gain"]
    assert gains and all(RBW_MERGED in f.flags for f in gains)
    assert not any(NOISE_LIMITED in f.flags for f in gains)  # its floor was measured
    old, run = _store(tmp_path / "old.sqlite", current_line="", risks=None, floor=None)
    with old:
        captures = load_captures(old, run)
        assert captures["risks"].isna().all()
        figures = reduce_run(old, run).figures
    assert figures and not any(CAUSES & set(f.flags) for f in figures)


def test_an_empty_risk_list_is_a_prediction_of_no_risk(tmp_path):
    db, run = _store(tmp_path / "clean.sqlite", current_line="", risks=[], floor=None)
    with db:
        captures = load_captures(db, run)
        assert set(captures.loc[captures["reading"] == "if", "risks"]) == {""}
        figures = reduce_run(db, run).figures
    assert not any(CAUSES & set(f.flags) for f in figures)


def test_supply_current_far_from_expected_flags_that_points_figures(tmp_path):
    db, run = _store(tmp_path / "supply.sqlite",
                     current_line='expected_supply_current = "45 mA"', risks=[],
                     currents=(0.046, 0.004, 0.044))
    with db:
        result = reduce_run(db, run)
    flagged = {p for f in result.figures if SUPPLY_CURRENT_OFF in f.flags for p in f.points}
    assert flagged == {1}
    assert any("supply_current_off" in note and "45 mA" in note for note in result.notes)
    # without the key nothing is flagged from the current
    db, run = _store(tmp_path / "nokey.sqlite", current_line="", risks=[],
                     currents=(0.046, 0.004, 0.044))
    with db:
        result = reduce_run(db, run)
    assert not any(SUPPLY_CURRENT_OFF in f.flags for f in result.figures)


def test_expected_supply_current_is_parsed_and_a_bad_one_is_refused_where_it_is(tmp_path):
    good = tmp_path / "good.toml"
    good.write_text(SEQUENCE.format(current='expected_supply_current = "45 mA"'),
                    encoding="utf-8")
    assert load_sequence(good).part.expected_supply_current == pytest.approx(0.045)
    bad = tmp_path / "bad.toml"
    bad.write_text(SEQUENCE.format(current='expected_supply_current = "0 mA"'),
                   encoding="utf-8")
    with pytest.raises(InputError) as caught:
        load_sequence(bad)
    message = str(caught.value)
    assert "expected_supply_current" in message and "bad.toml" in message
    assert ":6" in message  # the line of the key
