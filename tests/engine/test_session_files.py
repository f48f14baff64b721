"""Files read again when a run resumes go through the same reader: a pipe cannot hang it."""

from __future__ import annotations

import os
from pathlib import Path
from types import SimpleNamespace

from sweeprig.engine.session import _file_differences


def test_a_sequence_replaced_by_a_fifo_is_reported_not_waited_on(tmp_path: Path) -> None:
    sequence = tmp_path / "seq.toml"
    os.mkfifo(sequence)
    bench = tmp_path / "bench.toml"
    bench.write_text("a = 1\r\n", encoding="utf-8")
    info = SimpleNamespace(sequence_path=str(sequence), sequence_text="x = 1\n",
                           bench_path=str(bench), bench_text="a = 1\n")
    differences = _file_differences(info)
    assert len(differences) == 1  # the bench reads as it did (line endings as read_text)
    assert "seq.toml cannot be read" in differences[0] and "FIFO" in differences[0]
