"""Judgements of a block's columns (sweeprig.analysis.judged_blocks) are the judgements of
its figures one by one (sweeprig.analysis.limits.judge): the same verdicts, suspect flags,
straddles and reasons, over numbers, bounds, NaN, suspect flags, uncertainties and limit
conditions; and the columns' views (counts, worst verdict per figure, a group's verdict and
shown figure) agree with the judgements read one by one."""

from __future__ import annotations

import math
from types import MappingProxyType

import numpy as np
import pytest

from sweeprig.analysis.figure_block import Figures, packed
from sweeprig.analysis.figures import FLAGS, NOISE_LIMITED, OVERLOAD, SUSPECT_FLAGS, Figure
from sweeprig.analysis.judged_blocks import VERDICT_NAMES, JudgedBlock
from sweeprig.analysis.limits import (
    FAIL,
    INCONCLUSIVE,
    PASS,
    Assessment,
    Limit,
    assess,
    judge,
)

#: A flag that does not make a judgement inconclusive.
CALM = next(name for name in FLAGS if name not in SUSPECT_FLAGS)


def _figures(count: int, seed: int) -> list[Figure]:
    rng = np.random.default_rng(seed)
    hot = MappingProxyType({"temperature_c": 85.0, "study": "s"})
    cold = MappingProxyType({"temperature_c": -40.0, "study": "s"})
    out = []
    for i in range(count):
        value = float(rng.choice([rng.uniform(5.0, 15.0), math.nan, 10.0, 14.0]))
        bound = [None, None, None, "<", ">"][int(rng.integers(5))]
        flags = [(), (), (OVERLOAD,), (CALM,), (NOISE_LIMITED, OVERLOAD)][
            int(rng.integers(5))]
        u = float(rng.choice([rng.uniform(0.0, 2.0), math.nan, 1.0]))  # (10 - 1: an edge)
        out.append(Figure("conversion_gain", value, "dB", bound, hot if i % 3 else cold,
                          tuple(f for f in FLAGS if f in flags), (i,), u))
    return out


def _fields(f: Figure) -> tuple:
    # (a figure whose value is NaN equals only itself: its fields are compared, NaN as text)
    return (f.name, repr(f.value), f.unit, f.bound, dict(f.conditions), f.flags, f.points,
            repr(f.uncertainty_db))


def _judged(j) -> tuple:
    return (_fields(j.figure), j.limit, j.verdict, j.suspect, j.position, j.reason)


LIMITS = (Limit("conversion_gain", min=9.0), Limit("conversion_gain", max=14.0),
          Limit("conversion_gain", min=9.0, max=14.0, label="gain window"),
          Limit("conversion_gain", min=8.0, conditions=MappingProxyType(
              {"temperature_c": 85.0})),
          Limit("conversion_gain", max=12.0, conditions=MappingProxyType(
              {"temperature_c": (-50.0, 0.0)})))


@pytest.mark.parametrize("guard_band", [False, True])
def test_a_judged_block_is_its_figures_judged_one_by_one(guard_band: bool) -> None:
    figures = _figures(600, seed=7)
    assert any(f.flags for f in figures) and any(f.bound for f in figures)
    run = Figures(packed(figures, least=2))
    assessment = assess(run, LIMITS, guard_band=guard_band)
    assert any(isinstance(p, JudgedBlock) for p in assessment.judgements.parts)
    expected = [(limit, i, judge(f, limit, guard_band=guard_band))
                for limit in LIMITS for i, f in enumerate(figures)
                if limit.applies_to(f)]
    got = list(assessment.judgements)
    assert len(got) == len(expected)
    for j, (limit, i, one) in zip(got, expected, strict=True):
        assert (j.position, j.limit, _fields(j.figure)) == (i, limit, _fields(one.figure))
        assert (j.verdict, j.suspect, j.straddles, j.reason) \
            == (one.verdict, one.suspect, one.straddles, one.reason)
    # the block's own reasons are the judgements' reasons
    reasons = [r for p in assessment.judgements.parts if isinstance(p, JudgedBlock)
               for r in p.reasons()]
    assert reasons == [one.reason for _l, _i, one in expected]
    verdicts = {one.verdict for _l, _i, one in expected}
    assert verdicts == {PASS, FAIL, INCONCLUSIVE}
    assert assessment.verdict == FAIL
    tally = {v: sum(one.verdict == v for _l, _i, one in expected) for v in verdicts}
    assert assessment.counts == tally
    assert list(assessment.counts) == [PASS, FAIL, INCONCLUSIVE]  # (figures.json's order)
    assert assessment.straddled == sum(one.straddles for _l, _i, one in expected)


def test_the_same_figures_held_loose_judge_the_same() -> None:
    figures = _figures(300, seed=11)
    blocks = assess(Figures(packed(figures, least=2)), LIMITS)
    loose = assess(figures, LIMITS)
    assert not any(isinstance(p, JudgedBlock) for p in loose.judgements.parts)
    assert [_judged(j) for j in blocks.judgements] == [_judged(j) for j in loose.judgements]
    table, other = blocks.judgements.table(), loose.judgements.table()
    for column in ("position", "verdict", "limit", "margin", "straddles"):
        assert np.array_equal(getattr(table, column), getattr(other, column)), column


def test_the_worst_verdict_of_each_figure_and_of_a_group() -> None:
    figures = _figures(200, seed=3)
    assessment = assess(Figures(packed(figures, least=2)), LIMITS)
    judgements = list(assessment.judgements)
    rank = {PASS: 0, INCONCLUSIVE: 1, FAIL: 2}
    worst: dict[int, str] = {}
    for j in judgements:
        if j.position not in worst or rank[j.verdict] > rank[worst[j.position]]:
            worst[j.position] = j.verdict
    positions, codes = assessment.judgements.worst_by_position()
    assert dict(zip(positions.tolist(), [VERDICT_NAMES[c] for c in codes.tolist()],
                    strict=True)) == worst
    # a group: every third figure; its judgements in figure order, then limit order
    members = np.arange(0, len(figures), 3)
    group = assessment.judgements.of_positions(members)
    mine = [j for p in members.tolist() for j in judgements if j.position == p]
    mine.sort(key=lambda j: j.position)  # (stable: limit order kept within a figure)
    assert group.positions.tolist() == [j.position for j in mine]
    assert [VERDICT_NAMES[c] for c in group.verdicts.tolist()] == [j.verdict for j in mine]
    assert group.verdict == max((j.verdict for j in mine), key=rank.__getitem__)
    assert group.counts == {v: sum(j.verdict == v for j in mine) for v in rank}
    assert group.straddled == sum(j.straddles for j in mine)
    assert group.limits == list({id(j.limit): j.limit for j in mine}.values())
    # shown: the first of the worst verdict nearest its limit
    pool = [j for j in mine if j.verdict == group.verdict]

    def margin(j) -> float:
        v, li = j.figure.value, j.limit
        if not math.isfinite(v):
            return math.inf
        edges = [v - li.min] if li.min is not None else []
        edges += [li.max - v] if li.max is not None else []
        return min(edges) if edges else math.inf

    assert group.shown_position() == min(pool, key=margin).position
    empty = assessment.judgements.of_positions(np.array([], dtype=np.int64))
    assert len(empty) == 0 and empty.verdict is None and empty.shown_position() is None


def test_a_suspect_flag_makes_a_block_row_inconclusive_whatever_its_value() -> None:
    figures = [Figure("conversion_gain", 12.0, "dB", flags=(OVERLOAD,), points=(i,),
                      uncertainty_db=0.1) for i in range(4)]
    (judged,) = assess(Figures(packed(figures, least=2)),
                       [Limit("conversion_gain", min=9.0)]).judgements.parts
    assert isinstance(judged, JudgedBlock)
    assert OVERLOAD in SUSPECT_FLAGS
    assert judged.verdict.tolist() == [1] * 4
    assert judged.reasons() == [f"flagged: {OVERLOAD}"] * 4


def _margin_of(value: float, limit: Limit) -> float:
    """The nearer edge's distance inside the limit, written out (inf: no value or edge)."""
    if not math.isfinite(value):
        return math.inf
    edges = [value - limit.min] if limit.min is not None else []
    edges += [limit.max - value] if limit.max is not None else []
    return min(edges, default=math.inf)


def test_loose_figures_of_several_names_are_judged_by_their_own_limits_in_order() -> None:
    gains = _figures(90, seed=5)
    others = [Figure("noise_figure", f.value, "dB", f.bound, f.conditions, f.flags, f.points,
                     f.uncertainty_db) for f in _figures(90, seed=6)]
    figures = [f for pair in zip(gains, others, strict=True) for f in pair]  # interleaved
    limits = (*LIMITS, Limit("noise_figure", max=11.0), Limit("isolation", min=20.0))
    assessment = assess(figures, limits)
    expected = [(i, judge(f, limit)) for limit in limits for i, f in enumerate(figures)
                if limit.applies_to(f)]
    got = list(assessment.judgements)
    assert [(j.position, _judged(j)[1:4]) for j in got] \
        == [(i, (one.limit, one.verdict, one.suspect)) for i, one in expected]
    assert assessment.untested == (limits[-1],)
    table = assessment.judgements.table()
    assert table.margin.tolist() == [_margin_of(one.figure.value, one.limit)
                                     for _i, one in expected]


def test_an_assessment_of_judgements_under_several_limits_has_each_ones_margin() -> None:
    figures = _figures(40, seed=9)
    # one tuple of judgements whose limits change from row to row and come back
    judgements = [judge(f, LIMITS[i % 3]) for i, f in enumerate(figures)]
    table = Assessment(FAIL, judgements).judgements.table()
    assert table.margin.tolist() == [_margin_of(j.figure.value, j.limit) for j in judgements]
    assert [table.limits[k] for k in table.limit.tolist()] == [j.limit for j in judgements]
    assert len(table.limits) == 3
