"""Fixed-point texts made by pyarrow from integers are Python's ``format(x, ".Nf")`` texts,
character for character, wherever they say so; the figure table's value texts made that way
are those made one by one (sweeprig.report.fixed_text, tables._texts3)."""

from __future__ import annotations

import math

import hypothesis.strategies as st
import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings

from sweeprig.report.fixed_text import fixed_texts
from sweeprig.report.tables import _texts3, value_text

_FLOATS = st.floats(allow_nan=True, allow_infinity=True, width=64)
#: values near the roundings Python must decide: ties at N decimals, and their neighbours
_NEAR_TIES = st.builds(lambda k, d, step: np.nextafter((k + 0.5) / 10**d, math.inf * step),
                       st.integers(-10**7, 10**7), st.integers(0, 4),
                       st.sampled_from([-1, 0, 1]))


def _check(values: list[float], digits: int) -> None:
    texts, made = fixed_texts(np.array(values, dtype=float), digits)
    for v, text, ok in zip(values, texts.to_pylist(), made.tolist(), strict=True):
        assert ok == math.isfinite(v), v  # every number made; NaN and inf left to the caller
        if ok:
            assert text == format(v, f".{digits}f"), (v, digits)


@settings(max_examples=300, deadline=None)
@given(st.lists(st.one_of(_FLOATS, _NEAR_TIES,
                          st.floats(-1e4, 1e4), st.floats(-1e-3, 1e-3)), min_size=1,
                max_size=40),
       st.integers(0, 4))
def test_the_texts_are_python_s(values: list[float], digits: int) -> None:
    _check(values, digits)


def test_signs_ties_and_large_values() -> None:
    values = [0.0, -0.0, -0.0004, 0.0004, -0.0005, 0.0005, 1.0005, 2.675, 12.3455, -12.3455,
              0.125, 0.375, 1e12, -4.5e12, 9.9e13, 1e300, 5e-324, -5e-324, math.nan, math.inf]
    for digits in range(5):
        _check(values, digits)
    texts, exact = fixed_texts(np.array([-0.0, -0.0004, 1.5, 0.125]), 3)
    assert texts.to_pylist() == ["-0.000", "-0.000", "1.500", "0.125"] and exact.all()
    # exact ties at 0 decimals (ties to even), a tie of many digits, its neighbours, signs:
    # made by Python, once per distinct value, -0.0 apart from 0.0
    ties = [0.5, 2.5, 1.0625, -0.5, 2.5, 0.0385, 0.0385, -0.0, 0.0, 2.0**60, -(2.0**60)]
    for digits in (0, 3):
        texts, made = fixed_texts(np.array(ties), digits)
        assert made.all()
        assert texts.to_pylist() == [format(v, f".{digits}f") for v in ties]


@settings(max_examples=150, deadline=None)
@given(st.lists(st.tuples(st.one_of(_FLOATS, st.floats(-200, 200), _NEAR_TIES),
                          st.one_of(st.just(math.nan), st.floats(0, 5), _NEAR_TIES),
                          st.sampled_from(["dB", "dBm", "A", "W", "", "dB/°C", "dB/dB", " dB "]),
                          st.sampled_from(["", "<", ">"])), min_size=1, max_size=30))
def test_the_figure_texts_are_those_made_one_by_one(rows) -> None:
    values, us, units, bounds = (np.array(c, dtype=dtype) for c, dtype in
                                 zip(zip(*rows, strict=True),
                                     (float, float, object, object), strict=True))
    table = {"value": values, "uncertainty_db": us, "unit": units, "bound": bounds}
    expected = [value_text(v, unit, b, u, 3) for v, u, unit, b in rows]
    got = _texts3(table)
    assert list(got) == expected
    frame = pd.DataFrame({"text": got})
    assert frame["text"].dtype == pd.DataFrame({"text": np.array(expected, dtype=object)}
                                               )["text"].dtype


def test_without_pyarrow_the_texts_are_made_one_by_one(monkeypatch: pytest.MonkeyPatch
                                                       ) -> None:
    from sweeprig.report import tables

    monkeypatch.setattr(tables, "arrow_compute", lambda: None)
    table = {"value": np.array([1.0, math.nan]), "uncertainty_db": np.array([0.25, 1.0]),
             "unit": np.array(["dB", "dBm"], dtype=object),
             "bound": np.array(["", ""], dtype=object)}
    got = tables._texts3(table)
    assert got.dtype == object and list(got) == ["1.000 ± 0.250 dB (k = 2)", "n/a"]
