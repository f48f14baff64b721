"""Part files: shipped parts, units, and bad files that must raise a located InputError."""

from pathlib import Path

import pytest

from sweeprig.errors import InputError
from sweeprig.sim.mixer import load_part, part_from_mapping
from sweeprig.sim.mixer.part import PARTS_DIR

IDEAL_TEXT = (PARTS_DIR / "ideal.toml").read_text(encoding="utf-8")


def _write(tmp_path: Path, text: str, name: str = "part.toml") -> Path:
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def test_units_are_parsed_into_si(tmp_path: Path) -> None:
    text = IDEAL_TEXT.replace('tail_current = "4 mA"', 'tail_current = 0.004').replace(
        '[ports.rf]\nresistance = "100 ohm"',
        '[ports.rf]\nresistance = "0.1 kohm"\nreturn_loss = "12 dB"\nhighpass = "500 MHz"\n'
        'lowpass = "6 GHz"')
    part = load_part(_write(tmp_path, text))
    assert part.tail_current_a == pytest.approx(4e-3)
    assert part.rf_port.resistance_ohm == pytest.approx(100.0)
    assert part.rf_port.return_loss_db == 12.0
    assert part.rf_port.highpass_hz == 500e6 and part.rf_port.lowpass_hz == 6e9
    assert part.source.endswith("part.toml")


def test_load_by_path_string_and_by_name() -> None:
    by_name = load_part("ideal")
    by_path = load_part(str(PARTS_DIR / "ideal.toml"))
    assert by_name == by_path


BAD_CASES = [
    # (description, replace this, with this, expected key in `where`, text in message)
    ("unknown key", 'tail_current = "4 mA"', 'tail_current = "4 mA"\ntail_curent = 1',
     "core.tail_curent", "did you mean 'tail_current'"),
    ("wrong unit", 'tail_current = "4 mA"', 'tail_current = "4 GHz"', "core.tail_current",
     "not a current unit"),
    ("not a quantity", 'tail_current = "4 mA"', 'tail_current = "lots"', "core.tail_current",
     "not a number"),
    ("negative resistance", '[ports.if]\nresistance = "200 ohm"',
     '[ports.if]\nresistance = "-200 ohm"', "ports.if.resistance", "more than 0"),
    ("bad bias law", 'bias = "constant"', 'bias = "ptatt"', "core.bias", "ptat"),
    ("bad conversion", 'conversion = "down"', 'conversion = "sideways"', "part.conversion",
     "down"),
    ("float order", "[noise]", "[model]\nmax_lo_order = 1.5\n\n[noise]", "model.max_lo_order",
     "whole number"),
    ("reversed corners", '[ports.lo]\nresistance = "100 ohm"',
     '[ports.lo]\nresistance = "100 ohm"\nhighpass = "3 GHz"\nlowpass = "1 GHz"', "ports.lo",
     "not below lowpass"),
    ("missing table", '[noise]\nfigure = "4.5 dB"', "", "noise", "missing"),
    ("unphysical noise figure", 'figure = "4.5 dB"', 'figure = "0.1 dB"', "noise",
     "at least 3.01 dB"),
    ("missing key", 'tail_current = "4 mA"', "", "core.tail_current", "missing"),
    ("negative isolation", "[noise]", '[isolation]\nlo_to_if = "-3 dB"\n\n[noise]',
     "isolation.lo_to_if", "at least 0"),
    ("string coefficient", "cells = 1", 'cells = 1\ntail_supply_coeff = "0.1"',
     "core.tail_supply_coeff", "not a number"),
]


@pytest.mark.parametrize(("label", "old", "new", "key", "message"), BAD_CASES,
                         ids=[c[0] for c in BAD_CASES])
def test_bad_part_files_name_file_and_key(
    tmp_path: Path, label: str, old: str, new: str, key: str, message: str
) -> None:
    assert old in IDEAL_TEXT, label
    path = _write(tmp_path, IDEAL_TEXT.replace(old, new, 1), "broken.toml")
    with pytest.raises(InputError) as info:
        load_part(path)
    err = info.value
    assert "broken.toml" in (err.where or "")
    assert key in (err.where or "")
    assert message in f"{err.what} {err.fix}"
    assert err.fix and "sequence-format" not in err.fix


def test_toml_syntax_error_names_line(tmp_path: Path) -> None:
    path = _write(tmp_path, IDEAL_TEXT.replace('tail_current = "4 mA"', "tail_current = 4 mA"),
                  "syntax.toml")
    with pytest.raises(InputError) as info:
        load_part(path)
    assert (info.value.where or "").startswith(str(path.name)) or "syntax.toml:" in (
        info.value.where or "")


def test_missing_file_and_unknown_name() -> None:
    with pytest.raises(InputError, match="does not exist"):
        load_part("no/such/part.toml")
    with pytest.raises(InputError) as info:
        load_part("KX-0000")
    assert "ideal" in (info.value.fix or "")


def test_part_from_mapping_validates_too() -> None:
    import tomllib

    data = tomllib.loads(IDEAL_TEXT)
    assert part_from_mapping(data).name == "ideal"
    data["core"]["tail_current"] = "0 mA"
    with pytest.raises(InputError) as info:
        part_from_mapping(data)
    assert "core.tail_current" in (info.value.where or "")
