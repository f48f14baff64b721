"""The planted-measurement corpus (see :mod:`tests.planted.harness`): every case ends as it
expects, and no case's run holds a wrong figure without a flag.

Each case runs once per module on the in-process simulated bench; its outcome is then judged
by the tests below. A case whose feature has not landed is marked ``pending`` in its
``expect.toml`` and runs as a strict expected failure.
"""

from __future__ import annotations

import pytest

from sweeprig.analysis.figures import SUSPECT_FLAGS
from tests.planted.harness import CaseResult, cases, error_of, judged_figures, run_case, verdict_of

CASES = cases()
_RESULTS: dict[str, CaseResult] = {}


def _result(case, tmp_path_factory) -> CaseResult:
    if case.name not in _RESULTS:
        _RESULTS[case.name] = run_case(case, tmp_path_factory.mktemp(case.name))
    return _RESULTS[case.name]


def _params(pending: str):
    """One parameter per case, a strict expected failure where ``pending`` names a feature."""
    out = []
    for case in CASES:
        reason = getattr(case.expect, pending)
        marks = [pytest.mark.xfail(reason=reason, strict=True)] if reason else []
        out.append(pytest.param(case, id=case.name, marks=marks))
    return out


def test_the_corpus_is_big_enough():
    assert len(CASES) >= 25
    assert {c.expect.outcome for c in CASES} == {"refused", "flagged", "right"}


@pytest.mark.parametrize("case", _params("pending"))
def test_the_case_ends_as_expected(case, tmp_path_factory):
    result = _result(case, tmp_path_factory)
    e = case.expect
    if e.outcome == "refused":
        assert result.refusal is not None, f"{case.name}: ran, expected a refusal ({e.plant})"
        message = result.refusal.message()
        for fragment in e.reason:
            assert fragment in message, (case.name, fragment, message)
        assert result.refusal.exit_code == e.exit, (case.name, message)
        return
    assert result.refusal is None, f"{case.name}: refused: {result.refusal}"
    for fragment in e.warning:
        assert any(fragment in w for w in result.warnings), (case.name, fragment, result.warnings)
    figures = judged_figures(result)
    assert figures, f"{case.name}: no figure {e.figure!r} in study {e.study!r}"
    if e.outcome == "flagged":
        missing = [f for f in figures if e.flag not in f.flags]
        assert not missing, (case.name, e.flag, [(f.value, f.flags) for f in missing])
        if e.wrong_by_db is not None:
            errors = [abs(err) for f in figures if (err := error_of(result, f)) is not None]
            assert errors and max(errors) >= e.wrong_by_db, (case.name, errors)
    else:
        verdicts = [(verdict_of(result, f), f.value, f.bound, f.flags, error_of(result, f))
                    for f in figures]
        assert all(v[0] == "right" and not set(v[3]) & SUSPECT_FLAGS for v in verdicts), (
            case.name, verdicts)


@pytest.mark.parametrize("case", _params("pending_rule"))
def test_no_wrong_figure_without_a_flag(case, tmp_path_factory):
    result = _result(case, tmp_path_factory)
    if result.run is None:
        assert case.expect.outcome == "refused"
        return
    wrong = [(f.name, f.conditions.get("study"), f.value, f.bound, error_of(result, f))
             for f in result.run.figures if verdict_of(result, f) == "wrong"]
    assert not wrong, (case.name, wrong)
