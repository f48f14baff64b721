"""Sequence vocabulary of both conversion directions (``sweeprig.formats.vocabulary``).

The trade's words (Pozar, *Microwave Engineering*, mixer chapter; the field notes' frequency
plan): a downconverter takes RF in and gives IF out; an upconverter takes IF in and gives RF
out. Direction-neutral keys (input/output) mean the same in both. An upconverter written in
the old spelling (rf_* for its input) is refused with every rename, never reinterpreted.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from sweeprig.errors import InputError
from sweeprig.formats.sequence import load_sequence, sequence_from_dict
from sweeprig.plan.expand import PointBuilder

UP = """format = 1
[part]
id = "U1 (fictional)"
expected_gain = "10 dB"
expected_lo_rf_isolation = "30 dB"
expected_lo_if_isolation = "40 dB"
expected_if_rf_isolation = "45 dB"

[mixing]
conversion = "up"
lo_side = "low"
rf_frequency = "5.8 GHz"

[[study]]
name = "band"
if_frequency = { start = "50 MHz", stop = "150 MHz", step = "50 MHz" }
if_power = "-20 dBm"
lo_power = "3 dBm"
read = ["wanted", "lo_at_output", "lo_at_input", "input_at_output", "sideband"]
"""

UP_NEUTRAL = UP.replace("expected_lo_rf_isolation", "expected_lo_output_isolation") \
    .replace("expected_lo_if_isolation", "expected_lo_input_isolation") \
    .replace("expected_if_rf_isolation", "expected_input_output_isolation") \
    .replace('rf_frequency = "5.8 GHz"', 'output_frequency = "5.8 GHz"') \
    .replace("if_frequency = {", "input_frequency = {").replace("if_power", "input_power")

OLD_UP = """format = 1
[part]
id = "U1 (fictional)"
expected_gain = "10 dB"
expected_lo_if_isolation = "30 dB"

[mixing]
conversion = "up"
if_frequency = "5.8 GHz"

[[study]]
name = "band"
rf_frequency = "100 MHz"
rf_power = "-20 dBm"
lo_power = "3 dBm"
read = ["wanted", "lo_at_if"]
"""


def _write(tmp_path: Path, text: str, name: str = "seq.toml") -> Path:
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def _line(text: str, fragment: str) -> int:
    return next(i for i, line in enumerate(text.splitlines(), 1) if fragment in line)


def test_an_upconverter_in_the_trades_words_maps_input_to_if_and_output_to_rf(tmp_path):
    seq = load_sequence(_write(tmp_path, UP))
    study = seq.study[0]
    # the model keeps one spelling: rf_* is the input, if_frequency the output
    assert (study.rf_frequency.start, study.rf_frequency.stop) == (50e6, 150e6)
    assert study.rf_power == -20.0
    assert seq.if_frequency_of(study) == 5.8e9
    assert [r.kind for r in study.readings()] == ["wanted", "lo_at_if", "lo_at_rf", "rf_at_if",
                                                  "sideband"]
    # LO→RF is the output port of an upconverter: the model's lo_if (output) isolation
    assert seq.part.expected_lo_if_isolation == 30.0
    assert seq.part.expected_lo_rf_isolation == 40.0
    assert seq.part.expected_rf_if_isolation == 45.0
    # the LO follows: f_out = f_LO + f_IF (low-side upconversion), so f_LO = 5.8 GHz − f_IF
    point = PointBuilder(seq, None).point(0)
    assert point.lo_freq_hz == pytest.approx(5.75e9)


def test_neutral_keys_mean_the_same_as_the_trade_words(tmp_path):
    trade = load_sequence(_write(tmp_path, UP, "a.toml"))
    neutral = load_sequence(_write(tmp_path, UP_NEUTRAL, "b.toml"))
    assert trade.model_dump() == neutral.model_dump()


def test_a_downconverter_file_reads_as_before(tmp_path):
    down = UP_NEUTRAL.replace('conversion = "up"', 'conversion = "down"') \
        .replace('"sideband"', '"image"').replace('output_frequency = "5.8 GHz"',
                                                  'output_frequency = "70 MHz"') \
        .replace('input_frequency = { start = "50 MHz", stop = "150 MHz", step = "50 MHz" }',
                 'input_frequency = "2.4 GHz"')
    old = down.replace("output_frequency", "if_frequency").replace("input_frequency",
                                                                    "rf_frequency") \
        .replace("input_power", "rf_power").replace('"lo_at_output"', '"lo_at_if"') \
        .replace('"lo_at_input"', '"lo_at_rf"').replace('"input_at_output"', '"rf_at_if"') \
        .replace("expected_lo_output_isolation", "expected_lo_if_isolation") \
        .replace("expected_lo_input_isolation", "expected_lo_rf_isolation") \
        .replace("expected_input_output_isolation", "expected_rf_if_isolation")
    assert load_sequence(_write(tmp_path, old, "old.toml")).model_dump() == \
        load_sequence(_write(tmp_path, down, "new.toml")).model_dump()


def test_an_old_spelling_upconverter_gets_the_migration_message(tmp_path):
    path = _write(tmp_path, OLD_UP)
    with pytest.raises(InputError) as caught:
        load_sequence(path)
    err = caught.value
    assert err.where.endswith(f"seq.toml:{_line(OLD_UP, 'if_frequency')}: mixing.if_frequency")
    for rename in ("mixing.if_frequency: if_frequency → rf_frequency",
                   "study[0].rf_frequency: rf_frequency → if_frequency",
                   "study[0].rf_power: rf_power → if_power",
                   "part.expected_lo_if_isolation: expected_lo_if_isolation → "
                   "expected_lo_rf_isolation",
                   "study[0].read[1]: read 'lo_at_if' → 'lo_at_output'"):
        assert rename in err.fix, err.fix
    assert "old spelling" in err.what


def test_the_migration_message_also_guards_a_stored_sequence():
    """A run's merged sequence is re-read by the analysis: the same refusal, no guessing."""
    import tomllib

    with pytest.raises(InputError, match="old spelling"):
        sequence_from_dict(tomllib.loads(OLD_UP))


@pytest.mark.parametrize("old, new", [
    ('"lo_at_output"', '"lo_at_if"'),
    ("expected_if_rf_isolation", "expected_rf_if_isolation"),
])
def test_port_named_words_of_the_old_meaning_are_refused_in_an_upconverter(tmp_path, old, new):
    with pytest.raises(InputError) as caught:
        load_sequence(_write(tmp_path, UP.replace(old, new, 1)))
    assert "rename" in caught.value.fix


def test_one_thing_named_twice_is_refused(tmp_path):
    text = UP.replace('if_power = "-20 dBm"', 'if_power = "-20 dBm"\ninput_power = "-10 dBm"')
    with pytest.raises(InputError) as caught:
        load_sequence(_write(tmp_path, text))
    assert "'if_power' and 'input_power' name the same thing (the input power)" in \
        caught.value.what
    assert caught.value.where.endswith(f":{_line(text, 'input_power')}: study[0].input_power")


def test_an_upconverter_study_without_its_input_names_the_trade_key(tmp_path):
    text = UP.replace('if_power = "-20 dBm"\n', "")
    with pytest.raises(InputError) as caught:
        load_sequence(_write(tmp_path, text))
    assert "does not give the input power" in caught.value.what
    assert "if_power" in caught.value.fix


def test_messages_name_the_key_as_the_file_wrote_it(tmp_path):
    text = UP.replace('if_frequency = { start = "50 MHz", stop = "150 MHz", step = "50 MHz" }',
                      'if_frequency = "-5 MHz"')
    with pytest.raises(InputError) as caught:
        load_sequence(_write(tmp_path, text))
    assert caught.value.where.endswith(f":{_line(text, '-5 MHz')}: study[0].if_frequency")


def test_a_swept_output_makes_the_lo_track_it(tmp_path):
    """Fixed IF input 100 MHz, RF output swept 5.6-6.0 GHz: low-side upconversion puts the
    output at f_LO + f_IF (field notes, frequency plan), so f_LO = f_RF − 100 MHz."""
    text = UP.replace('if_frequency = { start = "50 MHz", stop = "150 MHz", step = "50 MHz" }',
                      'if_frequency = "100 MHz"\n'
                      'rf_frequency = { start = "5.6 GHz", stop = "6.0 GHz", step = "100 MHz" }')
    seq = load_sequence(_write(tmp_path, text))
    builder = PointBuilder(seq, None)
    points = [builder.point(i) for i in range(seq.count_points())]
    assert [p.lo_freq_hz + p.rf_freq_hz for p in points] == pytest.approx(
        [5.6e9, 5.7e9, 5.8e9, 5.9e9, 6.0e9])
    # a downconverter with low-side LO: f_IF = f_RF − f_LO, so f_LO = f_RF − f_IF
    down = UP_NEUTRAL.replace('conversion = "up"', 'conversion = "down"') \
        .replace(', "sideband"', "").replace(
            'input_frequency = { start = "50 MHz", stop = "150 MHz", step = "50 MHz" }',
            'input_frequency = "2.4 GHz"\noutput_frequency = ["70 MHz", "140 MHz"]')
    seq = load_sequence(_write(tmp_path, down, "down.toml"))
    builder = PointBuilder(seq, None)
    assert [builder.point(i).lo_freq_hz for i in range(2)] == pytest.approx([2.33e9, 2.26e9])


def test_a_swept_output_with_a_swept_input_is_refused(tmp_path):
    text = UP.replace('rf_frequency = "5.8 GHz"', "").replace(
        'if_power = "-20 dBm"',
        'if_power = "-20 dBm"\nrf_frequency = ["5.7 GHz", "5.8 GHz"]')
    with pytest.raises(InputError) as caught:
        load_sequence(_write(tmp_path, text))
    assert "sweep one of them" in caught.value.fix
    assert caught.value.where.endswith("study[0].rf_frequency")


def test_the_sideband_reading_is_for_upconverters(tmp_path):
    down = UP_NEUTRAL.replace('conversion = "up"', 'conversion = "down"').replace(
        'output_frequency = "5.8 GHz"', 'output_frequency = "70 MHz"').replace(
        'input_frequency = { start = "50 MHz", stop = "150 MHz", step = "50 MHz" }',
        'input_frequency = "2.4 GHz"')
    with pytest.raises(InputError, match="sideband reading is for upconverters"):
        load_sequence(_write(tmp_path, down))
