"""``sweeprig run --fail-on-verdict`` gives a script one exit code per verdict: 0 only for a
pass, 6 for a fail, 9 for an inconclusive verdict (which must never read as a pass)."""

from __future__ import annotations

from pathlib import Path

import pytest
from typer.testing import CliRunner

from sweeprig.cli.main import app
from sweeprig.engine.session import shipped_sequences_dir
from sweeprig.errors import (
    VERDICT_FAILED_EXIT_CODE,
    VERDICT_INCONCLUSIVE_EXIT_CODE,
    verdict_exit_code,
)

QUICK = shipped_sequences_dir() / "demo" / "quick.toml"


def test_each_verdict_has_its_own_code():
    assert [verdict_exit_code(v) for v in ("pass", "fail", "inconclusive", None)] == [
        0, VERDICT_FAILED_EXIT_CODE, VERDICT_INCONCLUSIVE_EXIT_CODE,
        VERDICT_INCONCLUSIVE_EXIT_CODE]
    assert len({0, VERDICT_FAILED_EXIT_CODE, VERDICT_INCONCLUSIVE_EXIT_CODE, 1, 2, 3, 4, 5, 7, 8}
               ) == 10  # distinct from every other exit of run


def _variant(tmp_path: Path, old: str, new: str) -> Path:
    """The quick demo without its IIP3 limit (two drives only: the fit has too few points, so
    that limit is inconclusive by itself), with one change."""
    text = QUICK.read_text(encoding="utf-8")
    iip3_spec = '[[spec]]\nfigure = "iip3_dbm"\nmin = "0 dBm"\n'
    assert iip3_spec in text and old in text
    text = text.replace(iip3_spec, "")
    path = tmp_path / "variant.toml"
    path.write_text(text.replace(old, new), encoding="utf-8")
    return path


@pytest.mark.parametrize(("change", "code", "verdict"), [
    (("KX-2407", "KX-2407"), 0, "PASS"),
    (('max = "14 dB"', 'max = "10 dB"'), VERDICT_FAILED_EXIT_CODE, "FAIL"),
    # at 0 V every gain is flagged unpowered: the limit check cannot pass or fail
    (('supply = "3.3 V"', 'supply = "0 V"'), VERDICT_INCONCLUSIVE_EXIT_CODE, "INCONCLUSIVE"),
])
def test_run_exits_by_verdict(tmp_path, change, code, verdict):
    """The gain limit is checked at three frequencies: three limit checks of one limit."""
    sequence = _variant(tmp_path, *change)
    result = CliRunner().invoke(app, ["run", str(sequence), "--sim", "--quiet", "--store",
                                      str(tmp_path / "runs.sqlite"), "--fail-on-verdict"])
    assert "Traceback" not in result.output
    assert result.exit_code == code, result.output
    assert f"verdict: {verdict}" in result.output
    assert "3 limit checks of 1 spec limit:" in result.output
