"""The bench file's [uncertainty] table, read from the bench text stored with a run."""

from __future__ import annotations

from sweeprig.analysis.bench_specs import specs_from_bench_text
from sweeprig.analysis.uncertainty import ASSUMED, InstrumentSpecs


def test_given_keys_name_the_bench_file_and_the_others_stay_assumptions():
    text = """
[bench]
name = "x"
[uncertainty]
analyzer_absolute = { value = "0.4 dB", shape = "normal-k2" }
power_meter = "0.1 dB"
part_match = 0.3
guard_band = true
"""
    got = specs_from_bench_text(text, "bench7.toml")
    specs = got.specs
    assert got.guard_band and not got.notes
    assert specs.analyzer_absolute.half_width_db == 0.4
    assert specs.analyzer_absolute.shape == "normal-k2"
    assert specs.analyzer_absolute.origin == "bench7.toml [uncertainty].analyzer_absolute"
    assert specs.power_meter.shape == "rectangular"
    assert specs.input_level.origin == ASSUMED
    assert specs.part_match == 0.3 and specs.bench_match == InstrumentSpecs().bench_match
    assert "part_match" in specs.match_origin and "assumption" in specs.match_origin


def test_no_table_gives_the_defaults_and_a_bad_one_a_note():
    assert specs_from_bench_text("[bench]\nname = 'x'\n").specs == InstrumentSpecs()
    for text, words in (
        (None, "no bench file"),
        ("[uncertainty\n", "not valid TOML"),
        ('[uncertainty]\nanalyzer_absolute = "x"\n', "analyzer_absolute"),
        ("[uncertainty]\nbench_match = 2.0\n", "bench_match = 2"),
    ):
        got = specs_from_bench_text(text)
        assert got.specs == InstrumentSpecs()
        assert len(got.notes) == 1 and words in got.notes[0], got.notes
