"""Seam A: each analyzer reading's extra_json carries the planner's risks and predictions."""

import json

from sweeprig.engine.runner import _reading_extra
from sweeprig.plan import margins as mg
from sweeprig.plan.readings import Reading


def test_risks_and_predicted_are_written() -> None:
    pred = mg.Prediction(product_dbm=None, noise_dbm=-100.0, analyzer_distortion_dbm=-80.0,
                         source_harmonic_dbm=None, reciprocal_dbm=None, mixer_level_dbm=-20.0,
                         compression_db=0.01, risks=("analyzer_distortion", "noise"),
                         target_dbm=-70.0)
    reading = Reading(name="im3.lower", kind="im3", instrument="sa", port="if", freq_hz=99e6,
                      risks=pred.risks, predicted=pred)
    extra = json.loads(json.dumps(_reading_extra(reading, -75.0, 1.5)))
    assert extra["risks"] == ["analyzer_distortion", "noise"]
    assert extra["predicted"]["analyzer_distortion_dbm"] == -80.0
    assert extra["predicted"]["product_dbm"] is None
    assert extra["predicted"]["target_dbm"] == -70.0
    for key in ("noise_dbm", "source_harmonic_dbm", "reciprocal_dbm", "mixer_level_dbm",
                "compression_db"):
        assert key in extra["predicted"]


def test_no_prediction_writes_no_keys() -> None:
    reading = Reading(name="supply_current", kind="supply_current", instrument="dc")
    extra = _reading_extra(reading, 0.0, 0.0)
    assert "risks" not in extra and "predicted" not in extra
