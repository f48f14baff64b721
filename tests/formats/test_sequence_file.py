"""Sequence files: valid files, and every kind of bad input with a located message."""

from pathlib import Path

import pytest

from sweeprig.errors import InputError
from sweeprig.formats.fields import RangeSpec
from sweeprig.formats.schema import json_schema
from sweeprig.formats.sequence import (
    Sequence,
    load_sequence,
    required_roles,
    sequence_from_dict,
)

ROOT = Path(__file__).resolve().parents[2]

HEAD = """\
[part]
id = "KX-1 (fictional)"
expected_gain = "-7 dB"

[mixing]
if_frequency = "70 MHz"
"""

STUDY = """
[[study]]
name = "gain"
rf_frequency = { start = "2.3 GHz", stop = "2.5 GHz", step = "100 MHz" }
rf_power = "-20 dBm"
lo_power = "7 dBm"
read = ["wanted"]
"""


def write(tmp_path: Path, text: str, name: str = "seq.toml") -> Path:
    path = tmp_path / name
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(text, encoding="utf-8")
    return path


def line_of(text: str, needle: str, nth: int = 1) -> int:
    """1-based line of the nth line containing ``needle`` (expected values for the locator)."""
    hits = [i for i, line in enumerate(text.splitlines(), start=1) if needle in line]
    return hits[nth - 1]


def load_error(tmp_path: Path, text: str) -> InputError:
    with pytest.raises(InputError) as info:
        load_sequence(write(tmp_path, text))
    return info.value


def test_demo_quick_sequence_loads() -> None:
    seq = load_sequence(ROOT / "sequences" / "demo" / "quick.toml")
    assert seq.part.expected_gain == 12.0
    assert seq.mixing.if_frequency == 70e6
    assert [s.name for s in seq.study] == ["gain", "two-tone"]
    assert seq.count_points() == 5
    assert seq.spec[1].figure == "iip3_dbm" and seq.spec[1].min == 0.0


def test_units_become_internal_floats(tmp_path: Path) -> None:
    seq = load_sequence(write(tmp_path, HEAD + """
[conditions]
temperature = ["-40 degC", 25, "358.15 K"]
supply = "3300 mV"
soak = "10 min"
settle = "20 ms"
""" + STUDY))
    cond = seq.conditions
    assert cond.temperature == (-40.0, 25.0, pytest.approx(85.0))
    assert cond.supply == pytest.approx(3.3)
    assert cond.soak == 600.0 and cond.settle == 0.02
    rng = seq.study[0].rf_frequency
    assert isinstance(rng, RangeSpec)
    assert (rng.start, rng.stop, rng.step) == (2.3e9, 2.5e9, 100e6)
    assert rng.count() == 3


def test_models_are_frozen(tmp_path: Path) -> None:
    seq = load_sequence(write(tmp_path, HEAD + STUDY))
    with pytest.raises(ValueError, match="frozen"):
        seq.part.id = "other"  # type: ignore[misc]


def test_unknown_key_suggests_the_right_one(tmp_path: Path) -> None:
    text = HEAD + STUDY.replace("rf_power", "rf_powr")
    err = load_error(tmp_path, text)
    assert err.where.endswith(f"seq.toml:{line_of(text, 'rf_powr')}: study[0].rf_powr")
    assert "unknown key 'rf_powr'" in err.what
    assert err.fix == "did you mean 'rf_power'?"


def test_unknown_key_in_nested_table(tmp_path: Path) -> None:
    text = HEAD + STUDY + '[study.analyzer]\nrbww = "1 kHz"\n'
    err = load_error(tmp_path, text)
    assert err.where.endswith(f":{line_of(text, 'rbww')}: study[0].analyzer.rbww")
    assert err.fix == "did you mean 'rbw'?"


def test_unit_error_is_located(tmp_path: Path) -> None:
    text = HEAD + STUDY.replace('"-20 dBm"', '"-20 dB"')
    err = load_error(tmp_path, text)
    assert err.where.endswith(f":{line_of(text, 'rf_power')}: study[0].rf_power")
    assert "not a power unit" in err.what
    assert "dBm" in (err.fix or "")


@pytest.mark.parametrize(
    ("rng", "words"),
    [
        ('{ start = "2.5 GHz", stop = "2.3 GHz", step = "100 MHz" }', "reversed range"),
        ('{ start = "2.5 GHz", stop = "2.5 GHz", points = 3 }', "empty range"),
        ('{ start = "2.3 GHz", stop = "2.5 GHz", points = 1 }', "at least 2 points"),
        ('{ start = "2.3 GHz", stop = "2.5 GHz", step = "-1 MHz" }', "not positive"),
        ('{ start = "2.3 GHz", stop = "2.5 GHz" }', "either 'step' or 'points'"),
        ('{ start = "2.3 GHz", stop = "2.5 GHz", step = "1 GHz" }', "wider than the range"),
        ("[]", "empty list"),
    ],
)
def test_bad_ranges(tmp_path: Path, rng: str, words: str) -> None:
    text = HEAD + STUDY.replace(
        'rf_frequency = { start = "2.3 GHz", stop = "2.5 GHz", step = "100 MHz" }',
        f"rf_frequency = {rng}")
    err = load_error(tmp_path, text)
    assert words in err.what
    assert err.where.endswith(f":{line_of(text, 'rf_frequency')}: study[0].rf_frequency")
    assert err.fix


def test_log_range_only_for_frequency(tmp_path: Path) -> None:
    text = HEAD + STUDY.replace('rf_power = "-20 dBm"',
                                'rf_power = { start = -30, stop = 0, points = 4, scale = "log" }')
    err = load_error(tmp_path, text)
    assert "only for frequency axes" in err.what


@pytest.mark.parametrize("value", ["nan", "inf", "-inf"])
def test_nan_and_inf_refused(tmp_path: Path, value: str) -> None:
    err = load_error(tmp_path, HEAD + STUDY.replace('"-20 dBm"', value))
    assert "finite" in err.what
    assert err.where.endswith("study[0].rf_power")


def test_reading_kind_typo(tmp_path: Path) -> None:
    text = HEAD + STUDY.replace('read = ["wanted"]', 'read = ["wanted", "im4"]')
    err = load_error(tmp_path, text)
    assert err.where.endswith(f":{line_of(text, 'im4')}: study[0].read[1]")
    assert "did you mean 'im3'?" in (err.fix or "")


def test_im3_needs_two_tones(tmp_path: Path) -> None:
    err = load_error(tmp_path, HEAD + STUDY.replace('read = ["wanted"]', 'read = ["im3"]'))
    assert "needs two tones" in err.what
    assert "tone_spacing" in (err.fix or "")


def test_missing_lo_plan(tmp_path: Path) -> None:
    text = HEAD.replace('if_frequency = "70 MHz"', "") + STUDY
    err = load_error(tmp_path, text)
    assert "no LO frequency" in err.what
    assert err.where.endswith(f":{line_of(text, '[[study]]')}: study[0]")


def test_lo_below_zero_is_refused(tmp_path: Path) -> None:
    err = load_error(tmp_path, HEAD.replace('"70 MHz"', '"3 GHz"') + STUDY)
    assert "needs an LO at" in err.what


def test_duplicate_study_names(tmp_path: Path) -> None:
    text = HEAD + STUDY + STUDY
    err = load_error(tmp_path, text)
    assert "used twice" in err.what
    assert err.where.endswith(f":{line_of(text, 'name =', 2)}: study[1].name")


def test_non_utf8_names_the_byte_offset(tmp_path: Path) -> None:
    raw = (HEAD + "# caf").encode() + b"\xe9\n" + STUDY.encode()
    path = tmp_path / "latin.toml"
    path.write_bytes(raw)
    with pytest.raises(InputError) as info:
        load_sequence(path)
    offset = raw.index(b"\xe9")
    assert f"offset {offset}" in info.value.what
    assert "0xE9" in info.value.what
    assert info.value.where.endswith("latin.toml:7")


def test_toml_syntax_error_has_line(tmp_path: Path) -> None:
    err = load_error(tmp_path, HEAD + '\n[[study]]\nname = "gain\nrf_power = 1\n')
    assert err.where.endswith("seq.toml:9")
    assert "TOML syntax error" in err.what and "column" in err.what


def test_missing_file(tmp_path: Path) -> None:
    with pytest.raises(InputError, match="does not exist"):
        load_sequence(tmp_path / "nope.toml")


def test_include_merges_and_file_wins(tmp_path: Path) -> None:
    write(tmp_path, '[part]\nid = "SHARED"\nexpected_gain = "-9 dB"\nserial = "S7"\n'
          '[conditions]\nsoak = "5 min"\n', "shared/part.toml")
    main = write(tmp_path, 'include = ["shared/part.toml"]\n[part]\nid = "MAIN"\n'
                 '[mixing]\nif_frequency = "70 MHz"\n' + STUDY)
    seq = load_sequence(main)
    assert seq.part.id == "MAIN"  # the including file wins
    assert seq.part.serial == "S7" and seq.part.expected_gain == -9.0  # deep merge
    assert seq.conditions.soak == 300.0


def test_error_in_included_file_names_that_file(tmp_path: Path) -> None:
    write(tmp_path, '[part]\nid = "SHARED"\nexpected_gain = "-9 dBm"\n', "shared/part.toml")
    main = write(tmp_path, 'include = ["shared/part.toml"]\n[mixing]\nif_frequency = 70e6\n'
                 + STUDY)
    with pytest.raises(InputError) as info:
        load_sequence(main)
    assert info.value.where.endswith("part.toml:3: part.expected_gain")


def test_include_cycle_shows_the_chain(tmp_path: Path) -> None:
    write(tmp_path, 'include = ["../a.toml"]\n', "frag/b.toml")
    a = write(tmp_path, 'include = ["frag/b.toml"]\n' + HEAD + STUDY, "a.toml")
    with pytest.raises(InputError) as info:
        load_sequence(a)
    what = info.value.what
    assert what.startswith("include cycle: ")
    assert "a.toml → " in what and "b.toml → " in what
    assert info.value.where.endswith("b.toml:1: include[0]")


def test_missing_include(tmp_path: Path) -> None:
    err = load_error(tmp_path, 'include = ["nope.toml"]\n' + HEAD + STUDY)
    assert "does not exist" in err.what
    assert err.where.endswith(":1: include[0]")


def test_huge_sequence_is_counted_and_refused(tmp_path: Path) -> None:
    # 1,000,000 × 1,000 = 10^9 points: counted arithmetically, never expanded.
    text = HEAD + STUDY.replace(
        'rf_frequency = { start = "2.3 GHz", stop = "2.5 GHz", step = "100 MHz" }',
        'rf_frequency = { start = "2 GHz", stop = "3 GHz", points = 1000000 }').replace(
        'rf_power = "-20 dBm"', "rf_power = { start = -30, stop = 0, points = 1000 }")
    path = write(tmp_path, text)
    with pytest.raises(InputError) as info:
        load_sequence(path)
    assert "1,000,000,000 points" in info.value.what
    assert "10,000,000" in info.value.what
    seq = load_sequence(path, max_points=10**10)
    assert seq.count_points() == 10**9


def test_step_range_includes_stop_on_grid(tmp_path: Path) -> None:
    text = HEAD + STUDY.replace('"100 MHz" }', '"10 MHz" }')
    seq = load_sequence(write(tmp_path, text))
    assert seq.study[0].count() == 21


def test_two_tone_and_read_tables(tmp_path: Path) -> None:
    text = HEAD + """
[[study]]
name = "tt"
rf_frequency = "2.4 GHz"
tone_spacing = "1 MHz"
rf_power = [-30, -25, -20]
lo_power = "7 dBm"
nesting = ["rf_power", "rf_frequency"]
attenuation_check = true

[[study.read]]
kind = "im3"

[[study.read]]
kind = "mxn"
order = 5
analyzer = { rbw = "1 kHz", span = "auto" }
"""
    seq = load_sequence(write(tmp_path, text))
    study = seq.study[0]
    assert study.two_tone
    assert study.nesting_order()[:2] == ("rf_power", "rf_frequency")
    assert [r.kind for r in study.readings()] == ["im3", "mxn"]
    assert study.readings()[1].analyzer.rbw == 1e3
    assert required_roles(seq).keys() >= {"rf", "rf2", "lo", "sa"}


def test_spec_limits_parse_units(tmp_path: Path) -> None:
    text = HEAD + STUDY + """
[[spec]]
figure = "spur_dbc"
max = "-60 dBc"
temperature = "85 degC"

[[spec]]
figure = "supply_current_a"
max = "120 mA"
"""
    seq = load_sequence(write(tmp_path, text))
    assert seq.spec[0].max == -60.0 and seq.spec[0].temperature == 85.0
    assert seq.spec[1].max == pytest.approx(0.12)


def test_spec_limit_without_bounds(tmp_path: Path) -> None:
    err = load_error(tmp_path, HEAD + STUDY + '[[spec]]\nfigure = "iip3_dbm"\n')
    assert "neither min nor max" in err.what


def test_from_dict_names_key_paths() -> None:
    with pytest.raises(InputError) as info:
        sequence_from_dict({"part": {"id": "x", "expected_gain": 0}, "study": []})
    assert info.value.where == "study"


def test_json_schema_covers_the_format() -> None:
    schema = json_schema("sequence")
    assert schema["title"] == "sweeprig sequence file"
    assert set(schema["properties"]) == set(Sequence.model_fields)
    assert schema["additionalProperties"] is False
    study = schema["$defs"]["Study"]
    # the input's key depends on the conversion direction (formats/vocabulary.py): none of
    # its spellings is required by the schema, all are known to it
    assert {"name", "lo_power", "read"} <= set(study["required"])
    assert {"rf_frequency", "if_frequency", "input_frequency", "if_power", "input_power",
            "output_frequency"} <= set(study["properties"])
    assert "FrequencyRange" in schema["$defs"]


def test_format_doc_examples_validate() -> None:
    import re
    import tomllib

    from sweeprig.formats.bench import Bench

    doc = (ROOT / "docs" / "sequence-format.md").read_text(encoding="utf-8")
    blocks = [tomllib.loads(b) for b in re.findall(r"```toml\n(.*?)```", doc, flags=re.S)]
    full_sequences = [b for b in blocks if "study" in b and "part" in b]
    benches = [b for b in blocks if "bench" in b]
    assert full_sequences and benches
    for data in full_sequences:
        data.pop("include", None)
        sequence_from_dict(data)
    for data in benches:
        Bench.model_validate(data)
