"""The distinct values of a capture or point column as text, in order of first appearance
(the studies and each study's readings): each distinct value converted once, the same list
as converting every entry first."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from sweeprig.analysis.reduce import _distinct_texts


def _every_entry_converted(values: pd.Series) -> list[str]:
    return list(dict.fromkeys(values.astype(str).tolist()))


@pytest.mark.parametrize("values", [
    pd.Series(pd.Categorical(["wanted", "lo_at_if", "wanted", None, "rf_at_if", "lo_at_if"])),
    pd.Series(pd.Categorical(["b", "a", "b"], categories=["a", "b", "unused"])),
    pd.Series(np.array(["gain", "two-tone", "gain", None, "spurs"], dtype=object)),
    pd.Series(np.array([1, "1", 2.0, "2.0", 1], dtype=object)),  # texts alike: once
    pd.Series(["gain", "spurs", "gain"], dtype="str"),
    pd.Series([], dtype=object),
])
def test_the_distinct_texts_are_those_of_every_entry_converted(values: pd.Series) -> None:
    assert _distinct_texts(values) == _every_entry_converted(values)


def test_a_long_column_is_read_in_order_of_first_appearance() -> None:
    rng = np.random.default_rng(3)
    kinds = np.array(["spur", "wanted", "im3_low", "im3_high", "lo_at_if"], dtype=object)
    values = pd.Series(pd.Categorical(kinds[rng.integers(0, 5, 50_000)]))
    assert _distinct_texts(values) == _every_entry_converted(values)
