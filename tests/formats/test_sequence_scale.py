"""Checking a sequence takes time in proportion to its size: 2,000 studies are one pass."""

from __future__ import annotations

from typing import Any

import pytest

import sweeprig.formats.sequence as sequence_module
from sweeprig.formats.sequence import sequence_from_dict


def many_studies(n: int) -> dict[str, Any]:
    study = {"rf_frequency": "2.4 GHz", "rf_power": "-20 dBm", "lo_power": "7 dBm",
             "read": ["wanted"], "analyzer": {"rbw": "1 kHz"}}
    return {"part": {"id": "KX-0001 (fictional)", "expected_gain": "-7 dB"},
            "mixing": {"if_frequency": "70 MHz"},
            "study": [{"name": f"s{i}", **study} for i in range(n)]}


def test_2000_studies_are_checked_in_one_pass(monkeypatch: pytest.MonkeyPatch) -> None:
    """Every study's analyzer settings are checked once (they were checked once per study,
    2,000 × 2,001 times, 23 s)."""
    checked: list[tuple[object, ...]] = []
    real = sequence_module._check_analyzer

    def counting(sequence: Any, path: tuple[object, ...], settings: Any) -> None:
        checked.append(path)
        real(sequence, path, settings)

    monkeypatch.setattr(sequence_module, "_check_analyzer", counting)
    sequence = sequence_from_dict(many_studies(2000))
    assert len(sequence.study) == 2000
    assert len(checked) == 2001  # the sequence's [analyzer] and each study's
    assert len(set(checked)) == len(checked)


def test_an_analyzer_problem_in_the_last_study_is_still_found() -> None:
    data = many_studies(50)
    data["study"][-1]["analyzer"] = {"rbw": "0 Hz"}
    with pytest.raises(sequence_module.InputError, match="rbw must be above 0 Hz") as caught:
        sequence_from_dict(data)
    assert caught.value.where == "study[49].analyzer.rbw"
