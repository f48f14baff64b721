"""``--changed-since``: a sequence counts as touched when its own file, a fragment it
includes (at any depth), its golden figures or the twin part file it names changed."""

from __future__ import annotations

from pathlib import Path

from sweeprig.seqtest.changed import sequence_inputs, touched
from sweeprig.seqtest.shape import is_sequence_file
from sweeprig.sim.names import PARTS_DIR

TINY = Path(__file__).parent / "data" / "tiny.toml"


def _with_include(tmp_path: Path) -> Path:
    text = TINY.read_text(encoding="utf-8")
    head, studies = text.split("[[study]]", 1)
    (tmp_path / "shared").mkdir()
    (tmp_path / "shared" / "inner.toml").write_text("[[study]]" + studies, encoding="utf-8")
    (tmp_path / "shared" / "outer.toml").write_text('include = ["inner.toml"]\n',
                                                    encoding="utf-8")
    (tmp_path / "twin.toml").write_text((PARTS_DIR / "ideal.toml").read_text(encoding="utf-8"),
                                        encoding="utf-8")
    head = head.replace('expected_gain = "12 dB"\n',
                        'expected_gain = "12 dB"\nsim_part = "twin.toml"\n')
    seq = tmp_path / "seq.toml"
    seq.write_text('include = ["shared/outer.toml"]\n' + head, encoding="utf-8")
    return seq


def test_a_fragment_at_any_depth_or_the_twin_touches_the_sequence(tmp_path):
    seq = _with_include(tmp_path)
    inputs = set(sequence_inputs(seq))
    inner = (tmp_path / "shared" / "inner.toml").resolve()
    assert inner in inputs and (tmp_path / "twin.toml").resolve() in inputs
    assert touched(seq, {inner})
    assert touched(seq, {(tmp_path / "seq.golden.toml").resolve()})
    assert not touched(seq, {(tmp_path / "other.toml").resolve()})


def test_shapes_sequences_versus_fragments_and_benches(tmp_path):
    seq = _with_include(tmp_path)
    assert is_sequence_file(seq)
    assert not is_sequence_file(tmp_path / "shared" / "inner.toml")  # no [part]
    assert not is_sequence_file(tmp_path / "twin.toml")  # a part file
    broken = tmp_path / "broken.toml"
    broken.write_text('[part]\nid = "x"\n[[study]]\nname = \n', encoding="utf-8")
    assert is_sequence_file(broken)  # collected, so that its static check fails loudly
