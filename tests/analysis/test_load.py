"""The store → capture-table adapter: every reading kind maps as documented, repeats are
recognised, traceability columns survive, and the analysis runs on the result."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from sweeprig.analysis import captures as cap
from sweeprig.analysis import conversion_gain_figures, intercept_figures, spur_figures
from sweeprig.analysis.load import (
    CAPTURE_COLUMNS,
    TEXT_CAPTURE_COLUMNS,
    captures_as_written,
    captures_from_frames,
    load_captures,
)
from sweeprig.errors import StoreError
from sweeprig.store import PointRecord, ReadingRecord, SqliteRunStore

LO_HZ, RF_HZ, IF_HZ = 2.1e9, 2.2e9, 100e6


def _sa(name: str, kind: str, freq_hz: float, level_dbm: float, *, orders=(1, -1),
        repeat: bool = False, overload: bool = False, extra: dict | None = None) -> ReadingRecord:
    more = dict(extra or {})
    if len(orders) > 2:
        more["orders"] = list(orders)
    if repeat:
        more["repeat_of"] = name.removesuffix(".att10")
    return ReadingRecord(
        name=name, kind=kind, port="if", freq_hz=freq_hz, level_dbm=level_dbm,
        noise_floor_dbm=-110.0 + (10.0 if repeat else 0.0), m=orders[0], n=orders[1],
        rbw_hz=1e3, attenuation_db=20.0 if repeat else 10.0, overload=overload,
        attenuation_check=True if repeat else None, extra=more,
    )


@pytest.fixture
def store(tmp_path):
    """A run with one point of each shape: gain + leakage + supply, two-tone with repeats,
    m×n spurs, and an m×n-only point (no wanted reading)."""
    with SqliteRunStore(tmp_path / "runs.sqlite") as db:
        run = db.create_run(sequence_path="seq.toml", sequence_text="x = 1\n", points_total=5)
        base = {"temperature_c": 25.0, "supply_v": 3.3, "lo_freq_hz": LO_HZ,
                "lo_power_dbm": 0.0, "rf_freq_hz": RF_HZ}
        db.write_point(run, PointRecord(0, "band", rf_power_dbm=-25.0, supply_current_a=0.031,
                                        probe_temperature_c=25.02, **base), [
            _sa("wanted", "wanted", IF_HZ, -12.5),
            _sa("lo_at_if", "lo_at_if", LO_HZ, -32.0, orders=(1, 0)),
            ReadingRecord("lo_at_rf", "lo_at_rf", "rf", LO_HZ, -40.0, -120.0, m=1, n=0),
            _sa("rf_at_if", "rf_at_if", RF_HZ, -60.0, orders=(0, 1)),
            _sa("image", "image", IF_HZ, -13.0, orders=(1, -1)),
            ReadingRecord("supply_current", "supply_current", "dc",
                          extra={"current_a": 0.0302, "voltage_v": 3.3}),
        ])
        two = {**base, "rf2_freq_hz": RF_HZ + 1e6, "rf2_power_dbm": -30.0}
        db.write_point(run, PointRecord(1, "two-tone", rf_power_dbm=-30.0, **two), [
            _sa("wanted", "wanted", IF_HZ, -17.5, orders=(1, -1, 0)),
            _sa("wanted.tone2", "wanted", IF_HZ + 1e6, -17.6, orders=(1, 0, -1)),
            _sa("im3.lower", "im3", IF_HZ - 1e6, -80.0, orders=(1, -2, 1)),
            _sa("im3.lower.att10", "im3", IF_HZ - 1e6, -80.1, orders=(1, -2, 1), repeat=True),
            _sa("im3.upper", "im3", IF_HZ + 2e6, -81.0, orders=(1, 1, -2)),
            _sa("im3.upper.att10", "im3", IF_HZ + 2e6, -95.0, orders=(1, 1, -2), repeat=True),
            _sa("im2.diff", "im2", 1e6, -90.0, orders=(0, -1, 1)),
            _sa("im2.sum", "im2", 2 * RF_HZ + 1e6, -95.0, orders=(0, 1, 1), overload=True),
        ])
        db.write_point(run, PointRecord(2, "spurs", rf_power_dbm=-10.0, **base), [
            _sa("wanted", "wanted", IF_HZ, 2.5),
            _sa("mxn.1x-1", "mxn", IF_HZ, 2.4),  # the wanted product: the wanted reading wins
            _sa("mxn.2x-1", "mxn", 2 * LO_HZ - RF_HZ, -45.0, orders=(2, -1)),
            _sa("mxn.2x-1.att10", "mxn", 2 * LO_HZ - RF_HZ, -45.1, orders=(2, -1), repeat=True),
            _sa("mxn.0x1", "mxn", RF_HZ, -60.0, orders=(0, 1)),
        ])
        db.write_point(run, PointRecord(3, "spurs-only", rf_power_dbm=-10.0, **base), [
            _sa("table.1x-1", "mxn", IF_HZ, 2.4),  # renamed reading, no wanted: it stands in
            _sa("table.3x-1", "mxn", 3 * LO_HZ - RF_HZ, -27.0, orders=(3, -1)),
            ReadingRecord("input_power", "input_power", "rf", RF_HZ, -10.02),
        ])
        db.set_status(run, "complete")
        yield db, run


def test_every_kind_maps_to_the_capture_vocabulary(store):
    db, run = store
    c = load_captures(db, run)
    assert list(c.columns) == list(CAPTURE_COLUMNS)
    got = {(int(p), r, bool(a)) for p, r, a in zip(c["point"], c["reading"], c["atten_check"],
                                                  strict=True)}
    assert got == {
        (0, "if", False), (0, "lo_at_if", False), (0, "lo_at_rf", False),
        (0, "rf_at_if", False), (0, "image", False), (0, "supply_current", False),
        (1, "if", False), (1, "if_tone2", False), (1, "im3_low", False),
        (1, "im3_low", True), (1, "im3_high", False),
        (1, "im3_high", True), (1, "im2_low", False), (1, "im2_high", False),
        (2, "if", False), (2, "spur", False), (2, "spur", True),
        (3, "if", False), (3, "spur", False),
    }
    assert set(c["reading"]) <= set(cap.READINGS)


def test_text_columns_are_held_as_codes_and_written_as_text(store):
    """A few distinct texts over every reading: categoricals in memory (a byte a row), plain
    text in the files (:func:`captures_as_written`), the same texts either way."""
    db, run = store
    c = load_captures(db, run)
    for col in TEXT_CAPTURE_COLUMNS:
        assert isinstance(c[col].dtype, pd.CategoricalDtype), col
        # the texts met, sorted (as pd.Categorical of the texts makes them)
        assert list(c[col].cat.categories) == sorted(set(c[col].tolist())), col
    written = captures_as_written(c)
    assert list(written.columns) == list(c.columns)
    for col in TEXT_CAPTURE_COLUMNS:
        assert not isinstance(written[col].dtype, pd.CategoricalDtype), col
        assert written[col].tolist() == c[col].tolist()
        assert all(isinstance(v, str) for v in written[col]), col
    assert written.drop(columns=list(TEXT_CAPTURE_COLUMNS)).equals(
        c.drop(columns=list(TEXT_CAPTURE_COLUMNS)))
    assert captures_as_written(written) is written  # text already: nothing to do


def test_values_and_traceability_columns(store):
    db, run = store
    c = load_captures(db, run).set_index(["point", "source_name"])
    supply = c.loc[(0, "supply_current")]
    assert supply["value"] == pytest.approx(0.0302)  # from extra_json current_a
    assert math.isnan(supply["level_dbm"])
    wanted = c.loc[(0, "wanted")]
    assert wanted["level_dbm"] == -12.5 and wanted["noise_floor_dbm"] == -110.0
    assert wanted["probe_temperature_c"] == pytest.approx(25.02)
    assert wanted["reading_no"] == 0 and wanted["kind"] == "wanted"
    assert c.loc[(1, "im2.sum"), "overload"]
    assert c.loc[(1, "im3.upper.att10"), "attenuation_db"] == 20.0
    assert np.isnan(c.loc[(1, "im3.lower"), "m"])  # m, n only for spurs
    spur = c.loc[(2, "mxn.2x-1")]
    assert (spur["m"], spur["n"]) == (2.0, -1.0)
    assert c.loc[(3, "table.1x-1"), "reading"] == "if"
    assert c.loc[(1, "wanted"), "rf2_freq_hz"] == RF_HZ + 1e6


def test_supply_current_falls_back_to_the_point_column():
    points = pd.DataFrame({"point_index": [0], "study": ["s"], "temperature_c": [np.nan],
                           "supply_v": [3.3], "lo_freq_hz": [LO_HZ], "lo_power_dbm": [0.0],
                           "rf_freq_hz": [RF_HZ], "rf_power_dbm": [-20.0],
                           "rf2_freq_hz": [np.nan], "rf2_power_dbm": [np.nan],
                           "supply_current_a": [0.045]})
    readings = pd.DataFrame({
        "point_index": [0], "reading_no": [0], "name": ["supply_current"],
        "kind": ["supply_current"], "port": ["dc"], "freq_hz": [np.nan],
        "level_dbm": [np.nan], "noise_floor_dbm": [np.nan], "m": [pd.NA], "n": [pd.NA],
        "attenuation_db": [np.nan], "overload": [False], "extra_json": ["{}"],
    })
    c = captures_from_frames(points, readings)
    assert c["value"].tolist() == [0.045]


def test_supply_readings_of_one_text_each_take_their_own_points_fallback():
    # the same extra text at several points (a text read once): a current where it holds
    # one, else each point's own column value
    count = 6
    points = pd.DataFrame({"point_index": range(count), "study": ["s"] * count,
                           "temperature_c": [np.nan] * count, "supply_v": [3.3] * count,
                           "lo_freq_hz": [LO_HZ] * count, "lo_power_dbm": [0.0] * count,
                           "rf_freq_hz": [RF_HZ] * count, "rf_power_dbm": [-20.0] * count,
                           "rf2_freq_hz": [np.nan] * count, "rf2_power_dbm": [np.nan] * count,
                           "supply_current_a": [0.041, 0.042, 0.043, np.nan, 0.045, 0.046]})
    extras = ['{}', '{"current_a": 0.05}', '{}', '{"current_a": "x"}', '{"current_a": 0.05}',
              '{"current_a": "x"}']
    readings = pd.DataFrame({
        "point_index": range(count), "reading_no": [0] * count,
        "name": ["supply_current"] * count, "kind": ["supply_current"] * count,
        "port": ["dc"] * count, "freq_hz": [np.nan] * count, "level_dbm": [np.nan] * count,
        "noise_floor_dbm": [np.nan] * count, "m": [pd.NA] * count, "n": [pd.NA] * count,
        "attenuation_db": [np.nan] * count, "overload": [False] * count, "extra_json": extras,
    })
    values = captures_from_frames(points, readings)["value"].tolist()
    assert values[:3] == [0.041, 0.05, 0.043] and math.isnan(values[3])
    assert values[4:] == [0.05, 0.046]


def test_the_analysis_runs_on_the_loaded_table(store):
    db, run = store
    c = load_captures(db, run)
    gain = {f.conditions["study"]: f.value for f in conversion_gain_figures(c)}
    assert gain["band"] == pytest.approx(-12.5 + 25.0)  # G = P_IF − P_RF
    spurs = [f for f in spur_figures(c) if f.name == "spur_dbc"]
    by_mn = {(f.conditions["m"], f.conditions["n"], f.conditions["study"]): f for f in spurs}
    assert by_mn[(2, -1, "spurs")].value == pytest.approx(-45.0 - 2.5)
    assert (1, -1, "spurs") not in by_mn  # the wanted product is not a spur
    assert by_mn[(3, -1, "spurs-only")].value == pytest.approx(-27.0 - 2.4)
    im3 = {f.name: f for f in intercept_figures(c, orders=(3,)) if f.name.startswith("im3_")}
    assert "analyzer_distortion" in im3["im3_high"].flags  # dropped 14 dB with +10 dB att.
    assert "analyzer_distortion" not in im3["im3_low"].flags


def test_an_empty_run_gives_an_empty_table(tmp_path):
    with SqliteRunStore(tmp_path / "runs.sqlite") as db:
        run = db.create_run(sequence_path="s.toml", sequence_text="")
        c = load_captures(db, run)
    assert c.empty and list(c.columns) == list(CAPTURE_COLUMNS)


def test_unknown_run_and_damaged_tables_raise_store_errors(store):
    db, run = store
    with pytest.raises(StoreError, match="no run 99"):
        load_captures(db, 99)
    points = db.points_frame(run)
    readings = db.readings_frame(run)
    with pytest.raises(StoreError, match="no point row"):
        captures_from_frames(points[points["point_index"] != 1], readings)
    with pytest.raises(StoreError, match="no column 'kind'"):
        captures_from_frames(points, readings.drop(columns=["kind"]))


def test_readings_out_of_order_come_out_ordered_by_point_then_reading(store):
    """The store reads readings by point and reading number (then nothing is copied to
    sort them); any other order is sorted, to the same table."""
    db, run = store
    points, readings = db.points_frame(run), db.readings_frame(run)
    ordered = captures_from_frames(points, readings)
    shuffled = readings.sample(frac=1.0, random_state=3)
    assert not shuffled["point_index"].is_monotonic_increasing
    again = captures_from_frames(points, shuffled)
    pd.testing.assert_frame_equal(again, ordered)
    assert again.index.tolist() == list(range(len(again)))


def test_the_risk_column_reads_only_the_texts_that_name_a_source():
    # every kind of text: risks, a search not found, measured flags, none of them, a
    # text a source name only appears in as a value, no text at all, broken JSON
    from sweeprig.analysis.load import _risks_column, _risks_from_extra

    texts = ['{"risks": ["noise", "rbw_merged"]}', '{}', None,
             '{"search": {"found": false}, "search_flags": ["window_edge"]}',
             '{"supply_flags": ["supply_limited"]}', '{"status_flags": ["x"], "risks": []}',
             '{"note": "risks"}', '{"risks": [', '{"risks": ["noise", "rbw_merged"]}']
    for column in (pd.Series(texts), pd.Series(texts, dtype=object)):
        got = _risks_column(column).tolist()
        want = [None if not isinstance(t, str) or not any(
                    s in t for s in ('"risks"', '"search', '"supply_flags"', '"status_flags"'))
                else _risks_from_extra(t) for t in texts]
        assert got == want
    assert got[0] == "noise,rbw_merged" and got[1] is None and got[4] == "supply_limited"
    assert got[3] == "not_found,window_edge" and got[7] is None
    # a column without a single text (all missing, as floats): no risks, no error
    assert _risks_column(pd.Series([np.nan, np.nan])).tolist() == [None, None]


@pytest.mark.parametrize("orders", [None, (1, -1), (1, 1), (2, -1)])
def test_the_output_frequency_column_is_the_wanted_product_of_the_orders(store, orders):
    """``output_freq_hz`` is |m·f_LO + n·f_RF| for the sequence's wanted orders ((1, −1) when
    none are known), at every capture; the analyses' figures carry it from there (a figure
    of a point with the LO and RF frequencies: ``sweeprig.analysis.captures.conditions_records``)
    instead of each mapping being copied to add it."""
    db, run = store
    c = captures_from_frames(db.points_frame(run), db.readings_frame(run),
                             wanted_orders=orders)
    m, n = orders or (1, -1)
    expected = [abs(m * lo + n * rf) for lo, rf in zip(c["lo_freq_hz"], c["rf_freq_hz"],
                                                       strict=True)]
    assert c["output_freq_hz"].tolist() == expected
    gains = conversion_gain_figures(c)
    assert gains and all(f.conditions["output_freq_hz"] == abs(m * LO_HZ + n * RF_HZ)
                         for f in gains)


@pytest.mark.parametrize("band", [None, (40e6, 80e6)])
def test_spur_figures_carry_the_output_frequency_the_pass_would_add(store, band):
    """A spur figure's conditions (its point's, then m, n, freq_hz, in_band and the band)
    end with the output frequency taken from the capture table, key for key what the
    output-frequency pass adds to the same figures made without that column."""
    from sweeprig.analysis.direction import output_frequency_conditions

    db, run = store
    c = captures_from_frames(db.points_frame(run), db.readings_frame(run),
                             wanted_orders=(1, -1))
    made = spur_figures(c, if_band_hz=band)
    plain = spur_figures(c.drop(columns="output_freq_hz"), if_band_hz=band)
    assert made and len(made) == len(plain)
    extended = [f.conditions if e is None else e
                for f, e in zip(plain, output_frequency_conditions(plain, (1, -1)), strict=True)]
    assert [list(f.conditions.items()) for f in made] == [list(e.items()) for e in extended]
    assert all(list(f.conditions)[-1] == "output_freq_hz" for f in made)
