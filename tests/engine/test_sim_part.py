"""A sequence names the simulated part ``--sim`` serves (``[part] sim_part``): a shipped part
name or a part file beside the sequence; anything else is refused at load, naming the key."""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

from sweeprig.engine.session import run_sequence, shipped_sequences_dir, sim_description_for
from sweeprig.errors import InputError
from sweeprig.formats.sequence import load_sequence
from sweeprig.sim.names import PARTS_DIR
from sweeprig.store.sqlite import SqliteRunStore

QUICK = shipped_sequences_dir() / "demo" / "quick.toml"


def _quick_with(tmp_path: Path, line: str) -> Path:
    text = QUICK.read_text(encoding="utf-8").replace(
        'serial = "S0001"\n', f'serial = "S0001"\n{line}\n', 1)
    path = tmp_path / "quick.toml"
    path.write_text(text, encoding="utf-8")
    return path


def test_a_shipped_part_name_is_served_instead_of_the_bench_default(tmp_path):
    sequence = load_sequence(_quick_with(tmp_path, 'sim_part = "KX-5803"'))
    assert sequence.part.sim_part == "kx-5803"
    description = sim_description_for(sequence, None)
    assert description.part == "kx-5803"
    assert sim_description_for(load_sequence(QUICK), None) is None  # unset: bench's own part


def test_a_part_file_is_resolved_beside_the_sequence(tmp_path):
    (tmp_path / "parts").mkdir()
    shutil.copy(PARTS_DIR / "ideal.toml", tmp_path / "parts" / "mine.toml")
    sequence = load_sequence(_quick_with(tmp_path, 'sim_part = "parts/mine.toml"'))
    assert Path(sequence.part.sim_part) == (tmp_path / "parts" / "mine.toml").resolve()


@pytest.mark.parametrize("value, what", [
    ('"no-such-part"', "no shipped simulated part named 'no-such-part'"),
    ('"missing.toml"', "simulated part file 'missing.toml' does not exist"),
])
def test_an_unknown_part_is_refused_naming_the_key(tmp_path, value, what):
    with pytest.raises(InputError) as caught:
        load_sequence(_quick_with(tmp_path, f"sim_part = {value}"))
    assert what in str(caught.value)
    assert "part.sim_part" in str(caught.value)


def test_the_run_measures_the_named_part(tmp_path):
    """The ideal part and the demo bench's own part differ in gain by several dB: the stored
    gain follows the sequence's sim_part."""
    gains = {}
    for label, line in (("default", ""), ("ideal", 'sim_part = "ideal"')):
        folder = tmp_path / label
        folder.mkdir()
        seq = _quick_with(folder, line)
        outcome = run_sequence(seq, sim=True, store_path=folder / "runs.sqlite")
        assert outcome.status == "complete", outcome.reason
        store = SqliteRunStore(folder / "runs.sqlite")
        try:
            readings = store.readings_frame(outcome.run_id)
        finally:
            store.close()
        wanted = readings[readings["kind"] == "wanted"]
        gains[label] = float(wanted["level_dbm"].median())
    assert abs(gains["default"] - gains["ideal"]) > 1.0, gains
