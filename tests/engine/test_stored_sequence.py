"""A run keeps the fragments its sequence included and the merged sequence: resume checks
every fragment, and the analysis judges the run against the limits it had, never against
the files on disk now."""

from __future__ import annotations

from pathlib import Path

import pytest

from sweeprig.analysis.reduce import reduce_run
from sweeprig.engine.session import resume_run, run_sequence, shipped_sequences_dir
from sweeprig.errors import InputError
from sweeprig.store.base import INCLUDE_FILE, MERGED_SEQUENCE
from sweeprig.store.sqlite import SqliteRunStore, sha256_text
from tests.support import FAULTY_SIM_BENCH, STOP_ON_ERROR

QUICK = shipped_sequences_dir() / "demo" / "quick.toml"
LIMITS = '[[spec]]\nfigure = "conversion_gain_db"\nmin = "9 dB"\nmax = "14 dB"\n'


def _split_sequence(folder: Path, extra: str = "") -> tuple[Path, Path]:
    """The quick demo with its limits moved to an included fragment."""
    text = QUICK.read_text(encoding="utf-8")
    head = text[: text.index("[[spec]]")]
    fragment = folder / "shared" / "limits.toml"
    fragment.parent.mkdir(parents=True)
    fragment.write_text(LIMITS, encoding="utf-8")
    sequence = folder / "seq.toml"
    sequence.write_text('include = ["shared/limits.toml"]\n' + head + extra, encoding="utf-8")
    return sequence, fragment


def test_the_run_keeps_its_fragments_and_is_judged_by_them(tmp_path):
    sequence, fragment = _split_sequence(tmp_path)
    store_path = tmp_path / "runs.sqlite"
    outcome = run_sequence(sequence, sim=True, store_path=store_path)
    assert outcome.status == "complete", outcome.reason
    with SqliteRunStore(store_path, create=False) as store:
        files = store.run_files(outcome.run_id)
        assert [f.role for f in files] == [INCLUDE_FILE, MERGED_SEQUENCE]
        assert files[0].text == LIMITS and files[0].sha256 == sha256_text(LIMITS)
        assert files[0].path.endswith("limits.toml")
        before = reduce_run(store, outcome.run_id)
    assert [limit.max for limit in before.limits] == [14.0]
    # the fragment is edited (or lost) after the night: the report still judges by the
    # limits the run had
    fragment.write_text(LIMITS.replace('max = "14 dB"', 'max = "10 dB"'), encoding="utf-8")
    with SqliteRunStore(store_path, create=False) as store:
        after = reduce_run(store, outcome.run_id)
    assert [limit.max for limit in after.limits] == [14.0]
    assert after.verdict == before.verdict
    fragment.unlink()
    with SqliteRunStore(store_path, create=False) as store:
        assert [limit.max for limit in reduce_run(store, outcome.run_id).limits] == [14.0]


def test_resume_refuses_a_changed_fragment_naming_it(tmp_path):
    sequence, fragment = _split_sequence(tmp_path, STOP_ON_ERROR)
    sim_bench = tmp_path / "faulty.toml"
    sim_bench.write_text(FAULTY_SIM_BENCH, encoding="utf-8")
    store_path = tmp_path / "runs.sqlite"
    outcome = run_sequence(sequence, sim=True, sim_description=sim_bench,
                           store_path=store_path)
    assert outcome.status == "aborted"
    fragment.write_text(LIMITS.replace('min = "9 dB"', 'min = "8 dB"'), encoding="utf-8")
    with pytest.raises(InputError) as err:
        resume_run(outcome.run_id, store_path=store_path)
    message = str(err.value)
    assert "included file" in message and "limits.toml" in message and "min" in message
    assert "--accept-changes" in message
