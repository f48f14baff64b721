"""figures.json, the tidy tables and the summary rows: every number traceable to the
captures, bounds and flags kept, the summary judging groups against their limits."""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pyarrow as pa
import pytest

from sweeprig.analysis.figures import Figure
from sweeprig.analysis.limits import Limit
from sweeprig.analysis.load import TEXT_CAPTURE_COLUMNS
from sweeprig.report.budget_tables import BUDGET_INTEGER_COLUMNS
from sweeprig.report.tables import (
    FIGURE_COLUMNS,
    compact_limit_text,
    conditions_text,
    figure_text,
    figures_frame,
    format_value,
    limit_text,
    read_figures_document,
    summary_rows,
)


def test_every_figure_points_at_stored_captures(report_run, report_files):
    document = read_figures_document(report_files.figures_json)
    captures = pd.read_csv(report_files.folder / "captures.csv")
    stored = set(captures["point"].tolist())
    assert len(document["figures"]) == len(report_run.figures)
    for figure in document["figures"]:
        assert figure["value"] is None or math.isfinite(figure["value"])
        if figure["value"] is not None:  # a number comes from stored points
            assert figure["points"], figure["name"]
        assert set(figure["points"]) <= stored, figure["name"]
    for judgement in document["judgements"]:
        assert document["figures"][judgement["figure"]]["name"] == \
            document["limits"][judgement["limit"]]["figure"]
    assert document["verdict"] == report_run.verdict == "pass"
    assert document["run"]["sequence_sha256"] == report_run.sequence_sha256
    assert {i["role"] for i in document["instruments"]} >= {"rf", "lo", "sa", "dc"}


def test_csv_and_parquet_tables_agree(report_run, report_files):
    names = {p.name for p in report_files.tables}
    assert names == {"captures.csv", "captures.parquet", "figures.csv", "figures.parquet"}
    for stem in ("captures", "figures"):
        csv = pd.read_csv(report_files.folder / f"{stem}.csv")
        parquet = pd.read_parquet(report_files.folder / f"{stem}.parquet")
        assert list(csv.columns) == list(parquet.columns)
        assert len(csv) == len(parquet)
    # the capture table's categorical text columns are plain text in both files
    import pyarrow.parquet as pq

    schema = pq.read_schema(report_files.folder / "captures.parquet")
    for name in TEXT_CAPTURE_COLUMNS:
        assert pa.types.is_string(schema.field(name).type) or \
            pa.types.is_large_string(schema.field(name).type), (name, schema.field(name).type)
    parquet = pd.read_parquet(report_files.folder / "captures.parquet")
    assert parquet["study"].tolist() == report_run.captures["study"].tolist()
    figures = figures_frame(report_run)
    assert len(figures) == len(report_run.figures)
    bounds = figures[figures["bound"] != ""]
    assert set(bounds["bound"]) <= {"<", ">"}
    assert (figures["verdict"] == "pass").sum() == report_run.assessment.counts["pass"]


def test_summary_rows_judge_groups_against_their_limits(report_run):
    rows = {(r.name, r.study, r.figure.conditions.get("temperature_c")): r
            for r in summary_rows(report_run)}
    gain = rows[("conversion_gain", "band", -40.0)]
    assert gain.count == 3 and gain.verdict == "pass"
    assert gain.limit_text == "≥ 9 dB and ≤ 14 dB (study band)"
    assert gain.value_text.startswith("worst ")
    spurs = rows[("spur_dbc", "spurs", 85.0)]
    assert "worst m×n" in spurs.conditions_text and spurs.verdict == "—"
    merged = summary_rows(report_run, by=("study",))
    (p1db,) = [r for r in merged if r.name == "input_p1db"]
    assert p1db.count == 2 and "-40 °C…85 °C" in p1db.conditions_text


def test_formatting_helpers():
    assert format_value(0.0301, "A") == "30.10 mA"
    assert format_value(float("nan"), "dB") == "n/a"
    assert format_value(-0.00823, "dB/°C") == "-0.0082 dB/°C"
    assert figure_text(Figure("iip2", 27.85, "dBm", ">")) == "> 27.85 dBm"
    assert figure_text(Figure("iip3", float("nan"), "dBm", ">")) == "n/a"
    assert limit_text(Limit("supply_current", max=0.06)) == "≤ 60 mA"
    # a limit as the sequence wrote it: no padded decimals
    both = limit_text(Limit("conversion_gain", min=11.0, max=15.5))
    assert both == "≥ 11 dB and ≤ 15.5 dB"
    assert limit_text(Limit("input_p1db", min=-11.25)) == "≥ -11.25 dBm"
    assert compact_limit_text(both) == "11…15.5 dB"
    assert compact_limit_text("≥ 40 mA and ≤ 60 mA; ≥ 30 dB") == "40…60 mA; ≥ 30 dB"
    text = conditions_text({"study": "spurs", "temperature_c": 25.0, "rf_freq_hz": 2.2e9,
                            "m": 2.0, "n": -1.0}, skip=("study",))
    assert text == "25 °C, RF 2.2 GHz, m×n 2×-1"


@pytest.mark.parametrize("bad", [float("inf"), float("-inf")])
def test_infinite_values_do_not_break_the_json(report_run, bad, tmp_path):
    import dataclasses

    from sweeprig.report.tables import write_figures_json

    odd = dataclasses.replace(report_run, figures=(Figure("iip2", bad, "dBm"),),
                              assessment=dataclasses.replace(report_run.assessment,
                                                             judgements=(), untested=()))
    path = write_figures_json(odd, tmp_path / "f.json")
    assert read_figures_document(path)["figures"][0]["value"] is None


def test_figures_json_says_what_every_flag_means(report_run, report_files):
    from sweeprig.analysis.figures import FLAG_MEANINGS, FLAGS, SUSPECT_FLAGS

    document = read_figures_document(report_files.figures_json)
    assert document["flag_meanings"] == {name: FLAG_MEANINGS[name] for name in FLAGS}
    assert set(document["suspect_flags"]) == set(SUSPECT_FLAGS)
    used = {flag for f in document["figures"] for flag in f["flags"]}
    assert used and used <= set(document["flag_meanings"])


def test_numbers_carry_their_expanded_uncertainty_and_budget(report_run, report_files):
    from sweeprig.analysis.uncertainty import uncertainty_text

    gains = [f for f in report_run.figures if f.name == "conversion_gain"]
    assert gains and all(math.isfinite(f.uncertainty_db) for f in gains)
    gain = gains[0]
    assert figure_text(gain) == uncertainty_text(gain.value, "dB", gain.uncertainty_db)
    assert figure_text(gain).endswith(" dB (k = 2)") and " ± " in figure_text(gain)
    document = read_figures_document(report_files.figures_json)
    by_name = {}
    for entry in document["figures"]:
        by_name.setdefault(entry["name"], entry)
    entry = by_name["conversion_gain"]
    assert entry["uncertainty_db"] == pytest.approx(entry["budget"]["expanded_uncertainty_db"])
    assert entry["budget"]["coverage_factor"] == 2.0
    terms = document["budget_terms"]
    names = {terms[i]["name"] for i in entry["budget"]["contributions"]}
    assert {"input_level", "analyzer_absolute", "input_mismatch", "output_mismatch"} <= names
    # The budget's lines are written once each and add up to its stated total (GUM eq. (10)).
    assert len({json.dumps(t, sort_keys=True) for t in terms}) == len(terms)
    for entry in document["figures"]:
        if entry["budget"] is not None:
            lines = [terms[i]["contribution_db"] for i in entry["budget"]["contributions"]]
            assert entry["budget"]["combined_standard_uncertainty_db"] == pytest.approx(
                math.sqrt(sum(c * c for c in lines)))
    assert document["format"] == "sweeprig figures 4"
    assert document["budget_method"].startswith("JCGM 100:2008")
    # No budget for a figure in amperes; bounds carry none either.
    if "supply_current" in by_name:
        assert by_name["supply_current"]["uncertainty_db"] is None
    for entry in document["figures"]:
        if entry["bound"] is not None:
            assert entry["uncertainty_db"] is None and entry["budget"] is None


@pytest.mark.parametrize("chunk", [1, 2, 2000])
def test_streamed_figures_json_holds_the_whole_document(report_run, tmp_path, monkeypatch,
                                                        chunk):
    """figures.json is written entry by entry in chunks (compact, C encoder); what it holds
    is exactly :func:`figures_document`, whatever the chunk size."""
    from sweeprig.report import tables

    monkeypatch.setattr(tables, "_JSON_CHUNK", chunk)
    path = tables.write_figures_json(report_run, tmp_path / "f.json")
    written = json.loads(path.read_text(encoding="utf-8"))
    expected = json.loads(json.dumps(tables.figures_document(report_run), default=str))
    written.pop("generated_utc")
    expected.pop("generated_utc")
    assert written == expected
    assert list(written) == list(expected)
    assert written["figure_count"] == len(report_run.figures)


def test_figures_table_text_is_figure_text(report_run):
    """figures.csv's text column is what figure_text writes with three decimals, and its
    flags and points are the figure's, space-separated."""
    from sweeprig.report.tables import figures_frame

    frame = figures_frame(report_run)
    assert frame["text"].tolist() == [figure_text(f, 3) for f in report_run.figures]
    assert frame["flags"].tolist() == [" ".join(f.flags) for f in report_run.figures]
    assert frame["points"].tolist() == [" ".join(str(p) for p in f.points)
                                        for f in report_run.figures]


def test_figures_json_keeps_its_figures_and_budgets_in_tables_beside_it(report_run,
                                                                        report_files):
    """Format 4: the JSON holds the run, limits, judgements and summary; the figures are
    the rows of figures.csv (with each figure's own budget columns: u_c, SNRs, sweeps) and
    each distinct shared part of a budget is one row of budgets.csv."""
    document = json.loads(report_files.figures_json.read_text(encoding="utf-8"))
    assert "figures" not in document
    assert document["figure_table"]["file"] == "figures.csv"
    assert document["figure_table"]["rows"] == document["figure_count"] == len(
        report_run.figures)
    figures = pd.read_csv(report_files.folder / "figures.csv", keep_default_na=False)
    assert list(figures.columns[:len(FIGURE_COLUMNS)]) == list(FIGURE_COLUMNS)
    budgets = pd.read_csv(report_files.folder / "budgets.csv", keep_default_na=False)
    assert list(budgets.columns) == document["budget_table"]["columns"]
    assert len(budgets) == document["budget_table"]["rows"]
    assert not budgets.duplicated(["coverage_factor", "contributions", "noise_readings",
                                   "noise_sensitivities", "scatter_sensitivities"]).any()
    # one shared part per kind of figure (and noisy reading), not one per figure
    named = figures[figures["budget"] != ""]
    assert len(budgets) <= named[["name", "budget"]].drop_duplicates().shape[0] < len(named)
    terms = pd.read_csv(report_files.folder / "budget-terms.csv")
    assert list(terms.columns) == document["budget_terms_table"]["columns"]
    assert len(terms) == document["budget_terms_table"]["rows"]
    assert "budget_terms" not in document
    used = {int(b) for b in figures["budget"] if b != ""}
    assert used == set(budgets["budget"])
    # every figure with an uncertainty has a budget that states it: U = k·u_c
    factor = dict(zip(budgets["budget"], budgets["coverage_factor"], strict=True))
    for u, uc, b in zip(figures["uncertainty_db"], figures["combined_uncertainty_db"],
                        figures["budget"], strict=True):
        assert (u == "") == (b == "") == (uc == "")
        if b != "":
            assert float(u) == pytest.approx(factor[int(b)] * float(uc), abs=1e-12)
    # the summary names the figure row it shows
    assert document["summary"]
    for row in document["summary"]:
        assert figures["name"][row["figure"]] == row["name"]


def test_a_format_2_figures_file_is_still_read(tmp_path):
    old = {"format": "sweeprig figures 2", "verdict": "pass",
           "figures": [{"name": "conversion_gain", "value": 7.1}], "budget_terms": []}
    path = tmp_path / "figures.json"
    path.write_text(json.dumps(old), encoding="utf-8")
    assert read_figures_document(path) == old


@pytest.mark.parametrize("text", ['{"format": "sweeprig figures 9"}', "[1, 2]", "{"])
def test_an_unknown_figures_file_is_refused_naming_it(tmp_path, text):
    from sweeprig.errors import StoreError

    path = tmp_path / "figures.json"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(StoreError) as caught:
        read_figures_document(path)
    assert str(path) in str(caught.value) and caught.value.fix


def test_a_format_3_file_without_its_tables_is_refused(report_files, tmp_path):
    from sweeprig.errors import StoreError

    lone = tmp_path / "figures.json"
    lone.write_bytes(report_files.figures_json.read_bytes())
    with pytest.raises(StoreError, match="cannot read a table") as caught:
        read_figures_document(lone)
    assert "figures.csv" in caught.value.fix and "budget-terms.csv" in caught.value.fix


def test_every_budget_line_is_written_whole(report_run):
    """budget-terms.csv's rows are the lines' own as_dict (source, shape, divisor,
    sensitivity, contribution, GUM type), and every shared part adds its lines up to its
    stated root sum of squares (JCGM 100:2008 eq. (10))."""
    from sweeprig.report.budget_tables import budget_terms_frame, budgets_frame, figure_budgets

    budgets = figure_budgets(report_run)
    terms = budget_terms_frame(budgets)
    assert len(terms) == len(budgets.terms) > 0
    for row, term in zip(terms.to_dict("records"), budgets.terms, strict=True):
        assert row.pop("term") >= 0
        assert row == term.as_dict()
    table = budgets_frame(budgets)
    contribution = terms["contribution_db"].to_numpy()
    for u, lines in zip(table["shared_uncertainty_db"], table["contributions"], strict=True):
        picked = contribution[[int(i) for i in lines.split()]]
        assert u == pytest.approx(math.sqrt(float((picked ** 2).sum())))


def test_every_figures_budget_reads_back_line_for_line(report_run, report_files):
    """Read back from figures.json and its tables, each figure's budget is the one the
    reduction made, line for line (shared lines, its own noise lines: the same names, texts
    and numbers) with the same u_c and U; and, for the figures of a model, the whole
    per-figure budget earlier versions wrote (tests/analysis/test_uncertainty_groups.py's
    reference)."""
    from pathlib import Path

    from sweeprig.analysis.bench_specs import calibration_state, specs_from_bench_text
    from sweeprig.analysis.budget_parts import budget_lines
    from sweeprig.analysis.uncertainty import MODELS, PointLevels, small_signal_gain_u
    from tests.analysis.test_uncertainty_groups import reference_budget

    document = read_figures_document(report_files.figures_json)
    terms = document["budget_terms"]
    levels = PointLevels.from_captures(report_run.captures)
    # the specifications and calibration the reduction took (the run's bench file, events)
    assert report_run.bench_path is not None
    bench = Path(report_run.bench_path)
    specs = specs_from_bench_text(bench.read_text(encoding="utf-8"), str(bench)).specs
    cal = calibration_state(report_run.events)[0]
    small_signal_u = small_signal_gain_u(report_run.figures, levels)
    checked = 0
    for figure, entry in zip(report_run.figures, document["figures"], strict=True):
        assert entry["name"] == figure.name
        if figure.budget is None:
            assert entry["budget"] is None
            continue
        read = [terms[i] for i in entry["budget"]["contributions"]]
        assert read == [c.as_dict() for c in budget_lines(figure.budget)]
        assert entry["budget"]["combined_standard_uncertainty_db"] == figure.budget.combined_db
        assert entry["budget"]["expanded_uncertainty_db"] == figure.uncertainty_db
        if figure.name in MODELS:
            want = reference_budget(figure, levels, specs, cal, small_signal_u)
            assert want is not None
            assert read == [c.as_dict() for c in want.contributions], figure
            assert abs(figure.uncertainty_db - want.expanded_db) <= 1e-12
            checked += 1
    assert checked >= 20


@pytest.mark.parametrize("rows", [29, 100_000])
def test_the_figure_table_written_in_slices_is_the_whole_table(report_run, tmp_path,
                                                               monkeypatch, rows):
    """figures.csv and figures.parquet are written a slice of figures at a time; whatever
    the slice, they hold exactly figures_frame (every slice has every column)."""
    from sweeprig.report import tables
    from sweeprig.report.csv_table import write_frame_csv

    monkeypatch.setattr(tables, "FIGURE_SLICE_ROWS", rows)
    whole = figures_frame(report_run)
    slices = list(tables.figure_frames(report_run))
    assert all(list(s.columns) == list(whole.columns) for s in slices)
    written = tables.write_tables(report_run, tmp_path)
    assert {p.name for p in written} == {"captures.csv", "captures.parquet", "figures.csv",
                                        "figures.parquet"}
    write_frame_csv(whole, tmp_path / "whole.csv")
    assert (tmp_path / "figures.csv").read_bytes() == (tmp_path / "whole.csv").read_bytes()
    parquet = pd.read_parquet(tmp_path / "figures.parquet")
    assert list(parquet.columns) == list(whole.columns) and len(parquet) == len(whole)
    integers = list(BUDGET_INTEGER_COLUMNS)
    for name in integers:
        assert parquet[name].tolist() == [pd.NA if b is None else b for b in whole[name]]
    pd.testing.assert_frame_equal(parquet.drop(columns=integers), whole.drop(columns=integers))


def test_text_conditions_read_back_as_text(report_run, tmp_path):
    """A condition holding words (a noise figure's sideband) reads back as words, numbers as
    numbers, and a condition a figure lacks stays absent."""
    import dataclasses

    from sweeprig.report.tables import write_figures_json

    conditions = [{"study": "nf", "sideband": "ssb", "temperature_c": 25.0},
                  {"study": "band", "rf_freq_hz": 2.4e9}]
    odd = dataclasses.replace(
        report_run, figures=tuple(Figure("noise_figure", 5.0 + i, "dB", conditions=c)
                                  for i, c in enumerate(conditions)),
        assessment=dataclasses.replace(report_run.assessment, judgements=(), untested=()))
    path = write_figures_json(odd, tmp_path / "f.json")
    assert [f["conditions"] for f in read_figures_document(path)["figures"]] == conditions


def test_the_demo_runs_tables_are_written_as_pandas_writes_them(report_run, tmp_path) -> None:
    from sweeprig.report.csv_table import write_frame_csv
    from sweeprig.report.tables import figures_frame

    for name, frame in (("captures", report_run.captures),
                        ("figures", figures_frame(report_run))):
        ours = write_frame_csv(frame, tmp_path / f"{name}.csv", chunk_rows=97)
        frame.to_csv(tmp_path / f"{name}.pandas.csv", index=False)
        assert ours.read_bytes() == (tmp_path / f"{name}.pandas.csv").read_bytes(), name


def test_a_format_3_figures_file_is_still_read(tmp_path):
    """Format 3 (every distinct whole budget a row of budgets.csv) reads into the same
    shape as format 4 and 2."""
    document = {
        "format": "sweeprig figures 3", "verdict": "pass", "figure_count": 2,
        "figure_table": {"file": "figures.csv", "rows": 2, "conditions": ["study"],
                         "text_conditions": ["study"]},
        "budget_table": {"file": "budgets.csv", "rows": 1},
        "budget_terms_table": {"file": "budget-terms.csv", "rows": 2}}
    (tmp_path / "figures.json").write_text(json.dumps(document), encoding="utf-8")
    (tmp_path / "figures.csv").write_text(
        "figure,name,value,unit,bound,uncertainty_db,text,verdict,flags,points,budget,study\n"
        "0,conversion_gain,7.1,dB,,0.5,7.100 ± 0.500 dB (k = 2),,,3,0,gain\n"
        "1,supply_current,0.03,A,,,30.00 mA,,,3,,gain\n", encoding="utf-8")
    (tmp_path / "budgets.csv").write_text(
        "budget,combined_standard_uncertainty_db,coverage_factor,expanded_uncertainty_db,"
        "contributions\n0,0.25,2.0,0.5,0 1\n", encoding="utf-8")
    (tmp_path / "budget-terms.csv").write_text(
        "term,name,what,half_width_db,distribution,divisor,standard_uncertainty_db,"
        "sensitivity,contribution_db,type,origin\n"
        "0,input_level,source,0.3,normal-k2,2.0,0.15,-1.0,0.15,B,bench\n"
        "1,noise,analyzer noise,0.2,standard,1.0,0.2,1.0,0.2,B,measured\n", encoding="utf-8")
    read = read_figures_document(tmp_path / "figures.json")
    gain, current = read["figures"]
    assert gain["budget"] == {"combined_standard_uncertainty_db": 0.25,
                              "coverage_factor": 2.0, "expanded_uncertainty_db": 0.5,
                              "contributions": [0, 1]}
    assert gain["conditions"] == {"study": "gain"} and gain["points"] == [3]
    assert current["budget"] is None and current["uncertainty_db"] is None
    assert [t["name"] for t in read["budget_terms"]] == ["input_level", "noise"]
    assert read["budget_terms"][0]["contribution_db"] == 0.15


def _own_condition_cell(figure: Figure, key: str, text: bool) -> object:
    """A condition cell of the figure table as the figure's own mapping gives it (the
    per-figure reading the run's condition columns replace)."""
    value = figure.conditions.get(key)
    if text:
        return "" if value is None else str(value)
    return math.nan if value is None else float(value)


def _same_cell(a: object, b: object) -> bool:
    return a == b or (isinstance(a, float) and isinstance(b, float)
                      and math.isnan(a) and math.isnan(b))


def test_the_figure_tables_conditions_are_each_figures_own(report_run):
    """figures.csv takes its condition columns from the run's columns (each distinct
    mapping read once, then spread by index): cell for cell, each figure's own conditions
    read figure by figure, and its keys those of the figures in order of first sight."""
    frame = figures_frame(report_run)
    kinds = report_run.figure_conditions.kinds
    seen: dict[str, None] = {}
    for figure in report_run.figures:
        seen.update(dict.fromkeys(figure.conditions))
    assert list(kinds) == list(seen)
    assert list(frame.columns[-len(kinds):]) == list(kinds)
    for key, text in kinds.items():
        column = frame[key].tolist()
        assert all(_same_cell(cell, _own_condition_cell(f, key, text))
                   for cell, f in zip(column, report_run.figures, strict=True)), key


def test_a_text_condition_stays_text_in_a_slice_of_numbers(report_run, monkeypatch):
    """A key that holds words somewhere in the run is text in every slice of the figure
    table, a slice whose figures hold only numbers for it included (as each value reads)."""
    import dataclasses

    from sweeprig.report import tables

    conditions = [{"study": "nf", "sideband": 1.0}, {"study": "nf", "sideband": "ssb"},
                  {"study": "band", "rf_freq_hz": 2.4e9}]
    odd = dataclasses.replace(
        report_run, figures=tuple(Figure("noise_figure", 5.0 + i, "dB", conditions=c)
                                  for i, c in enumerate(conditions)),
        assessment=dataclasses.replace(report_run.assessment, judgements=(), untested=()))
    monkeypatch.setattr(tables, "FIGURE_SLICE_ROWS", 1)
    slices = list(tables.figure_frames(odd))
    assert [s["sideband"].tolist() for s in slices] == [["1.0"], ["ssb"], [""]]
    assert [s["study"].tolist() for s in slices] == [["nf"], ["nf"], ["band"]]
    assert slices[0]["rf_freq_hz"].isna().all() and slices[2]["rf_freq_hz"].tolist() == [2.4e9]


def test_the_reductions_passes_are_the_copying_passes_on_a_real_run(report_run):
    """On the report run's own captures and studies, the reduction's passes over its own
    list (the output frequency in place, then the budgets in place, then the names) give
    what the copying passes give one after the other, the budgets first: figure for figure,
    budget line for line, for a downconverter's and an upconverter's orders and names."""
    from sweeprig.analysis import reduce as rd
    from sweeprig.analysis.budget_groups import attach_uncertainty, attach_uncertainty_in_place
    from sweeprig.analysis.budget_parts import budget_lines
    from sweeprig.analysis.direction import (
        add_output_frequency_in_place,
        name_in_trade_words,
        trade_named,
        with_output_frequency,
    )

    analysed = rd._figures(report_run.captures, report_run.studies, [])
    assert len(analysed) >= 200
    for conversion, orders in (("down", (1, -1)), ("up", (1, 1))):
        old = with_output_frequency(trade_named(attach_uncertainty(
            analysed, report_run.captures), conversion), orders)
        new = list(analysed)
        add_output_frequency_in_place(new, orders)
        attach_uncertainty_in_place(new, report_run.captures)
        name_in_trade_words(new, conversion)
        assert new == old
        # the worse-of-two-sides headlines took their side's budget in both
        assert any(f.name == "iip3" and f.budget is not None for f in new)
        assert conversion == "down" or any(f.name == "lo_rf_isolation" for f in new)
        for a, b in zip(new, old, strict=True):
            assert dict(a.conditions) == dict(b.conditions), a
            assert (a.budget is None) == (b.budget is None), a
            if a.budget is not None:
                assert a.uncertainty_db == b.uncertainty_db, a
                assert budget_lines(a.budget) == budget_lines(b.budget), a


def test_condition_columns_of_a_reduced_run_are_those_read_key_by_key(report_run) -> None:
    """The same on a reduced simulated run's own figures (its distinct mappings)."""
    from sweeprig.analysis.figure_table import (
        condition_arrays,
        condition_arrays_by_key,
        distinct_conditions,
    )

    mappings, _ = distinct_conditions(report_run.figures)
    assert len(mappings) > 50
    ours, reference = condition_arrays(mappings), condition_arrays_by_key(mappings)
    assert list(ours) == list(reference)
    for key, column in reference.items():
        assert ours[key].dtype == column.dtype, key
        if column.dtype == object:
            assert ours[key].tolist() == column.tolist(), key
        else:
            assert ours[key].view(np.uint64).tolist() == column.view(np.uint64).tolist(), key


def test_a_reduced_runs_figure_conditions_read_from_what_made_them(report_store) -> None:
    """A reduction notes what conditions_records made (nearly every mapping its figures
    hold); the run's figure conditions read from it are those read from every mapping, and
    once read it is let go."""
    from sweeprig.analysis.figure_table import RunConditions, distinct_conditions
    from sweeprig.analysis.reduce import reduce_run
    from sweeprig.store.sqlite import SqliteRunStore
    from tests.analysis.test_figure_table import _same_conditions

    path, run_id = report_store
    with SqliteRunStore(path, create=False) as store:
        run = reduce_run(store, run_id)
    made = list(run.made_conditions)
    noted = {id(m) for one in made for m in one.mappings}
    mappings, _ = distinct_conditions(run.figures)
    assert sum(id(m) in noted for m in mappings) > 0.9 * len(mappings) > 45
    _same_conditions(RunConditions.of(run.figures, made), RunConditions.of(run.figures))
    _same_conditions(run.figure_conditions, RunConditions.of(run.figures))
    assert run.made_conditions == []


def test_the_capture_files_schema_without_every_rows_text(report_run) -> None:
    """The capture table's Parquet schema, made from one row per category of each text
    column, has the fields the whole table made text has: for the shared run, and for text
    columns with missing cells, with no value at all, and for no rows."""
    import pyarrow as pa

    from sweeprig.analysis.load import captures_as_written
    from sweeprig.report.tables import written_capture_schema

    captures = report_run.captures
    missing = captures.assign(port=captures["port"].cat.set_categories(["if"]))
    empty = captures.assign(kind=pd.Categorical([None] * len(captures)))
    for table in (captures, missing, empty, captures.iloc[:0], captures.iloc[3:4]):
        whole = pa.Schema.from_pandas(captures_as_written(table), preserve_index=False)
        assert written_capture_schema(table).equals(whole), table.dtypes
