"""[conditions.adaptive_soak]: keys with units, and located refusals of what cannot work."""

from pathlib import Path

import pytest

from sweeprig.errors import InputError
from sweeprig.formats.sequence import load_sequence

BASE = """\
[part]
id = "KX-1 (fictional)"
expected_gain = "-7 dB"

[mixing]
if_frequency = "70 MHz"

[conditions]
temperature = ["25 degC", "85 degC"]
supply = "3.3 V"
soak = "10 min"

[conditions.adaptive_soak]
{adaptive}

[[study]]
name = "gain"
rf_frequency = "2.4 GHz"
rf_power = "-20 dBm"
lo_power = "7 dBm"
read = [{read}]
"""


def write(tmp_path: Path, adaptive: str, read: str = '"wanted"', **swap: str) -> Path:
    text = BASE.format(adaptive=adaptive, read=read)
    for old, new in swap.items():
        text = text.replace(old.replace("_", " "), new)
    path = tmp_path / "seq.toml"
    path.write_text(text, encoding="utf-8")
    return path


def test_keys_become_internal_units(tmp_path: Path) -> None:
    seq = load_sequence(write(tmp_path, 'gain_drift = "0.02 dB"\nwindow = "2 min"\n'
                                        'minimum = "3 min"\nmaximum = "20 min"\nevery = "10 s"'))
    a = seq.conditions.adaptive_soak
    assert a is not None
    assert (a.by, a.drift, a.window, a.minimum, a.maximum, a.every) == (
        "gain", pytest.approx(0.02), 120.0, 180.0, 1200.0, 10.0)


def test_current_criterion(tmp_path: Path) -> None:
    seq = load_sequence(write(tmp_path, 'current_drift = "0.2 mA"'))
    a = seq.conditions.adaptive_soak
    assert a is not None and a.by == "supply_current" and a.drift == pytest.approx(2e-4)


def _error(path: Path) -> InputError:
    with pytest.raises(InputError) as info:
        load_sequence(path)
    return info.value


@pytest.mark.parametrize(("adaptive", "key", "words"), [
    ('window = "1 min"', "adaptive_soak", "exactly one criterion"),
    ('gain_drift = "0.02 dB"\ncurrent_drift = "1 mA"', "adaptive_soak", "exactly one"),
    ('gain_drift = "0 dB"', "gain_drift", "above 0"),
    ('gain_drift = "0.02 dB"\nminimum = "20 min"', "minimum", "longer than the longest soak"),
    ('gain_drift = "0.02 dB"\nwindow = "10 s"\nevery = "30 s"', "window", "two readings"),
    ('gain_drift = "0.02 dB"\nwindow = "-1 min"', "window", "outside"),
])
def test_refusals_name_the_key_and_line(tmp_path: Path, adaptive: str, key: str,
                                        words: str) -> None:
    path = write(tmp_path, adaptive)
    error = _error(path)
    text = error.message()
    assert words in text
    assert "seq.toml:" in text and key in text


def test_gain_criterion_needs_the_wanted_reading(tmp_path: Path) -> None:
    error = _error(write(tmp_path, 'gain_drift = "0.02 dB"', read='"lo_at_if"'))
    assert "does not read wanted" in error.message() and "gain_drift" in error.message()


def test_current_criterion_needs_a_supply(tmp_path: Path) -> None:
    path = write(tmp_path, 'current_drift = "0.2 mA"')
    path.write_text(path.read_text().replace('supply = "3.3 V"\n', ""), encoding="utf-8")
    assert "sets no supply voltage" in _error(path).message()


def test_no_temperature_no_adaptive_soak(tmp_path: Path) -> None:
    path = write(tmp_path, 'gain_drift = "0.02 dB"')
    path.write_text(path.read_text().replace('temperature = ["25 degC", "85 degC"]\n', ""),
                    encoding="utf-8")
    assert "sets no temperature" in _error(path).message()
