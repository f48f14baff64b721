"""The floor from noise markers is their mean in dB, computed in plain floats: pinned bit for
bit to numpy's mean (the figure the runs stored before), so no stored floor moves."""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from sweeprig.engine.runner import MARKER_FLOOR_CLEAR_DB, NOISE_MARKERS, floor_from_markers

_LEVEL = st.floats(-200.0, 30.0, allow_nan=False)


@settings(max_examples=120, deadline=None)
@given(samples=st.lists(_LEVEL, min_size=NOISE_MARKERS, max_size=NOISE_MARKERS))
def test_the_marker_floor_is_numpy_s_mean_bit_for_bit(samples: list[float]) -> None:
    level = max(samples) + MARKER_FLOOR_CLEAR_DB + 1.0
    floor = floor_from_markers(level, tuple(samples))
    assert floor is not None and floor.points_used == NOISE_MARKERS
    assert floor.dbm == float(np.mean(samples))
    assert type(floor.dbm) is float


def test_a_reading_near_its_markers_goes_to_the_trace() -> None:
    samples = (-90.0, -91.0, -89.5)
    assert floor_from_markers(-89.5 + MARKER_FLOOR_CLEAR_DB - 0.1, samples) is None
    assert floor_from_markers(float("nan"), samples) is None
    assert floor_from_markers(-10.0, (-90.0, float("nan"), -90.0)) is None
