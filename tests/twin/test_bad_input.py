"""What ``sweeprig twin fit`` refuses, with a message naming the run and the fix, a non-zero
exit and no part file: a run too small to fit (naming the missing figures), a run or
template of another part kind, a store or run that is not there. (The refusals of files,
sequences naming an unknown simulated part and broken golden files, are in the bad-input
corpus, tests/corpus.)"""

from __future__ import annotations

from pathlib import Path

import pytest

from sweeprig.cli.main import app
from sweeprig.sim.names import PARTS_DIR
from tests.support import invoke
from tests.twin.runs import run_on_sim

LEAK_ONLY = Path(__file__).parent / "data" / "leak-only.toml"


@pytest.fixture(scope="module")
def leak_store(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return run_on_sim(LEAK_ONLY, tmp_path_factory.mktemp("leak-run"))


def _fit(tmp_path: Path, *args: object) -> tuple[int, str, Path]:
    out = tmp_path / "twin.toml"
    result = invoke(app, "twin", "fit", *args, "--out", out)
    return result.exit_code, result.output, out


def test_a_run_too_small_names_the_missing_figures(leak_store, tmp_path):
    code, text, out = _fit(tmp_path, 1, "--store", leak_store)
    assert code == 2 and not out.exists(), text
    assert f"{leak_store}: run 1" in text
    assert "too small to fit a twin" in text and "no usable conversion_gain" in text
    assert "lo_if_isolation ×1" in text  # what the run did have
    assert "fix:" in text and "gain study" in text


def test_a_template_of_another_part_kind_is_refused(leak_store, tmp_path):
    up = tmp_path / "up.toml"
    up.write_text((PARTS_DIR / "ideal.toml").read_text(encoding="utf-8").replace(
        'conversion = "down"', 'conversion = "up"'), encoding="utf-8")
    code, text, out = _fit(tmp_path, 1, "--store", leak_store, "--template", up)
    assert code == 2 and not out.exists(), text
    assert "--template" in text and "is of a downconverter" in text
    assert "is an upconverter" in text and "kx-2417" in text  # the fix names one that fits


def test_a_missing_store_or_run_is_refused(leak_store, tmp_path):
    code, text, out = _fit(tmp_path, 1, "--store", tmp_path / "none.sqlite")
    assert code != 0 and not out.exists() and "no run store" in text, text
    code, text, out = _fit(tmp_path, 7, "--store", leak_store)
    assert code != 0 and not out.exists() and "7" in text, text
    assert "Traceback" not in text
