"""The JSON a point's extras and a run's activity are stored as: the encoders made once give
the same text as ``json.dumps`` with the same options (what earlier stores hold)."""

from __future__ import annotations

import datetime
import json

import numpy as np

from sweeprig.store.sql import _ACTIVITY_JSON, _json, _json_default


def test_extras_are_the_text_json_dumps_gives() -> None:
    extra = {"b": np.float64(1.5), "a": [1, 2], "n": np.int64(3), "nan": float("nan"),
             "when": datetime.datetime(2026, 1, 1, tzinfo=datetime.UTC),
             "z": {"y": 1, "x": "é"}, "predicted": {"risks": ["a"], "level": -12.0}}
    assert _json(extra, "reading.extra") == json.dumps(extra, sort_keys=True,
                                                       default=_json_default)
    assert _json({}, "x") == "{}" and _json(None, "x") == "{}"


def test_an_activity_is_the_text_json_dumps_gives() -> None:
    activity = {"what": "measuring", "eta_s": 12.5, "at": datetime.datetime(2026, 1, 1)}
    assert _ACTIVITY_JSON.encode(activity) == json.dumps(activity, default=str)
