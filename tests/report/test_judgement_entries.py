"""The figures document's judgement entries of a judged block (tables._block_entries) are
the entries of its judgements one by one: the same JSON text with pyarrow (a slice of
entries a text, the plain numbers' reasons made from integers) and without it; and the
document read back in memory splits those texts into their entries."""

from __future__ import annotations

import json
import math
from types import MappingProxyType, SimpleNamespace

import numpy as np
import pytest

from sweeprig.analysis.figure_block import Figures, packed
from sweeprig.analysis.figures import FLAGS, OVERLOAD, SUSPECT_FLAGS, Figure
from sweeprig.analysis.judged_blocks import JudgedBlock
from sweeprig.analysis.limits import Limit, assess
from sweeprig.report import tables

CALM = next(name for name in FLAGS if name not in SUSPECT_FLAGS)


def _figures(count: int, seed: int, unit: str) -> list[Figure]:
    """Numbers (many exactly on a rounding tie at 3 decimals, some repeated, ±0), NaN,
    bounds, suspect and calm flags, uncertainties straddling the edges or not."""
    rng = np.random.default_rng(seed)
    where = MappingProxyType({"temperature_c": 25.0})
    out = []
    for i in range(count):
        value = float(rng.choice([rng.uniform(5.0, 15.0), math.nan, 10.0, 14.0, 9.0385,
                                  12.0625, -0.0, 0.0, rng.uniform(-1e3, 1e3)]))
        bound = [None, None, None, None, "<", ">"][int(rng.integers(6))]
        flags = [(), (), (), (OVERLOAD,), (CALM,)][int(rng.integers(5))]
        u = float(rng.choice([rng.uniform(0.0, 0.5), math.nan, 2.0]))
        out.append(Figure("conversion_gain", value, unit, bound, where,
                          tuple(f for f in FLAGS if f in flags), (i,), u))
    return out


LIMITS = (Limit("conversion_gain", min=9.0), Limit("conversion_gain", max=14.0),
          Limit("conversion_gain", min=9.0, max=14.0, label="gain window"))


def _blocks(unit: str) -> list[JudgedBlock]:
    assessment = assess(Figures(packed(_figures(700, 5, unit), least=2)), LIMITS)
    blocks = [p for p in assessment.judgements.parts if isinstance(p, JudgedBlock)]
    assert len(blocks) == len(LIMITS)
    return blocks


def _one_by_one(block: JudgedBlock, limit: int) -> list[str]:
    """Each judgement's entry as the document wrote it before blocks had their own."""
    encode = json.JSONEncoder(ensure_ascii=False, separators=(",", ":")).encode
    return [encode({"figure": j.position, "limit": limit, "verdict": j.verdict,
                    "reason": j.reason}) for j in block.judgements()]


@pytest.mark.parametrize("unit", ["dB", 'd"B\\°'])  # (a unit JSON must escape, not ASCII)
@pytest.mark.parametrize("slice_rows", [7, 1 << 16])
def test_a_block_s_entries_are_its_judgements_one_by_one(
        unit: str, slice_rows: int, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(tables, "_ENTRY_SLICE", slice_rows)
    for limit, block in enumerate(_blocks(unit)):
        expected = _one_by_one(block, limit)
        texts = list(tables._block_entries(block, limit))
        assert len(texts) == math.ceil(len(block) / slice_rows)  # a text a slice
        assert ",".join(texts) == ",".join(expected)
        # without pyarrow: an entry a text, the same
        with monkeypatch.context() as bare:
            bare.setattr(tables, "arrow_compute", lambda: None)
            assert list(tables._block_entries(block, limit)) == expected


def test_the_plain_numbers_take_most_of_a_block() -> None:
    # (else the comparison above would mostly compare Python with Python)
    for block in _blocks("dB"):
        plain, _wording, _texts = block.plain_wordings()
        assert 0.3 < plain.mean() < 1.0


def test_the_document_read_in_memory_splits_a_text_of_entries() -> None:
    block = _blocks("dB")[0]
    stream = tables._Stream(tables._block_entries(block, 0), encoded=True)
    assert tables._listed(stream) == [json.loads(e) for e in _one_by_one(block, 0)]
    run = SimpleNamespace(assessment=SimpleNamespace(judgements=SimpleNamespace(
        parts=[block])))
    assert [json.dumps(e, ensure_ascii=False, separators=(",", ":"))
            for e in tables._listed(tables._Stream(
                tables._judgement_entries(run, {id(block.limit): 0}), encoded=True))] \
        == _one_by_one(block, 0)
