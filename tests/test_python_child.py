"""A child Python interpreter is started only where ``sys.executable`` can run ``-c`` code;
each user of one then does the work in this process."""

from __future__ import annotations

import sys
from pathlib import Path

import pytest

from sweeprig.python_child import python_child_possible
from sweeprig.store import arrow_reader, side_reader


def test_a_plain_interpreter_can_start_a_child() -> None:
    assert python_child_possible()


@pytest.mark.parametrize("how", ["frozen", "embedded"])
def test_a_frozen_or_embedded_program_starts_no_child(how, monkeypatch, tmp_path: Path) -> None:
    if how == "frozen":
        monkeypatch.setattr(sys, "frozen", True, raising=False)
    else:
        monkeypatch.setattr(sys, "executable", "")
    assert not python_child_possible()
    store = tmp_path / "runs.sqlite"
    assert side_reader._start(store, "select 1", [[1]]) is None
    assert arrow_reader.start_read(store, [("select 1", [[1]], "f")]) is None
