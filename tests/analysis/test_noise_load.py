"""Noise-figure figures from stored readings: the SSB conversion's image ratio and its flag.

A run once printed an SSB noise figure of about 75 dB for a part whose figure is about 10 dB,
unflagged: the image-to-signal ratio came from a wanted (signal-frequency) reading about 65 dB
low, near the analyzer's noise floor. The relation is the field notes'
F_SSB = F_DSB·(1 + G_image/G_signal); the thresholds (6 dB over the floor, +10 dB ratio) are
common practice, no source.
"""

from __future__ import annotations

import json
import math

import pandas as pd

from sweeprig.analysis.figures import SUSPECT_FLAGS
from sweeprig.analysis.noise_load import noise_figure_figures
from sweeprig.analysis.uncertainty import InstrumentSpecs

NOISE = {
    "hot_mw": 10 ** -7.2, "cold_mw": 10 ** -8.0, "jitter_rel": 0.004,
    "rf_hz": 1.7e9, "image_hz": 1.5e9, "enr_rf_db": 14.9, "enr_image_db": 14.9,
    "enr_u_db": 0.12, "cal_hot_mw": 10 ** -7.7, "cal_cold_mw": 10 ** -8.7,
    "cal_jitter_rel": 0.004, "cal_enr_db": 15.2, "cal_enr_u_db": 0.12, "cold_k": 296.0,
    "cold_measured": True, "compression_step_db": 0.0, "compression_jitter_db": 0.02,
    "peak_excess_db": 1.0, "point_sigma_db": 0.5,
}


class _Sequence:
    """The one study the loader asks about: its noise reading is single-sideband (or
    ``sideband``)."""

    def __init__(self, sideband: str = "ssb") -> None:
        class _Spec:
            kind, name = "noise_figure", "noise_figure"

        _Spec.sideband = sideband  # type: ignore[attr-defined]

        class _Study:
            name = "noise-figure"

            @staticmethod
            def readings() -> list[object]:
                return [_Spec()]

        self.study = (_Study(),)


def _frames(wanted_dbm: float, floor_dbm: float, image_dbm: float = -13.0
            ) -> tuple[pd.DataFrame, pd.DataFrame]:
    points = pd.DataFrame([{"point_index": 0, "study": "noise-figure", "rf_freq_hz": 1.7e9,
                            "lo_power_dbm": 0.0, "temperature_c": 25.0, "supply_v": 3.3}])
    common = {"point_index": 0, "freq_hz": 1e8, "overload": False, "extra_json": "{}"}
    readings = pd.DataFrame([
        {**common, "name": "wanted", "kind": "wanted", "level_dbm": wanted_dbm,
         "noise_floor_dbm": floor_dbm},
        {**common, "name": "image", "kind": "image", "level_dbm": image_dbm,
         "noise_floor_dbm": -93.0},
        {**common, "name": "noise_figure", "kind": "noise_figure", "level_dbm": -80.0,
         "noise_floor_dbm": math.nan, "extra_json": json.dumps({"noise": NOISE})},
    ])
    return points, readings


def _figures(wanted_dbm: float, floor_dbm: float, image_dbm: float = -13.0,
             sideband: str = "ssb", noise: dict[str, object] | None = None):
    points, readings = _frames(wanted_dbm, floor_dbm, image_dbm)
    if noise is not None:
        readings.loc[readings["kind"] == "noise_figure", "extra_json"] = \
            json.dumps({"noise": noise})
    out = noise_figure_figures(points, readings, InstrumentSpecs(), _Sequence(sideband))
    return {f.name: f for f in out}


def test_a_wanted_reading_near_its_floor_flags_the_ssb_figure_and_its_gain() -> None:
    # wanted 65.6 dB under the image, 3 dB over its floor: image − wanted = +65.6 dB
    got = _figures(-78.6, -81.6)
    nf, gain = got["noise_figure"], got["noise_figure_gain"]
    clean = _figures(-12.8, -91.4)["noise_figure"]
    # the bad ratio moves the SSB figure by tens of dB (field notes' relation)...
    assert nf.value - clean.value > 50.0
    # ...and it says so: flagged, suspect (a limit check on it is inconclusive)
    assert "image_ratio_doubtful" in nf.flags and "image_ratio_doubtful" in gain.flags
    assert set(nf.flags) & SUSPECT_FLAGS


def test_demo_like_readings_raise_no_image_flag() -> None:
    # the demo's noise-figure points: image ≈ wanted, the wanted reading ~78 dB over its floor
    got = _figures(-12.8, -91.4, -13.0)
    assert got["noise_figure"].flags == () and got["noise_figure_gain"].flags == ()
    nf = got["noise_figure"]
    assert nf.conditions["sideband"] == "ssb"
    # a floor not recorded is never called noise (sweeprig.analysis.validity)
    assert _figures(-12.8, math.nan)["noise_figure"].flags == ()


def test_an_image_ratio_above_10_db_is_flagged_whatever_the_floor() -> None:
    got = _figures(-30.0, -95.0, -13.0)  # image 17 dB above a clear wanted reading
    assert "image_ratio_doubtful" in got["noise_figure"].flags


def test_a_doubtful_ratio_does_not_weight_the_dsb_figure_s_enr() -> None:
    # The DSB figure weights the source's ENR at the two bands by their gains: ENR =
    # (ENR_rf + r·ENR_image)/(1 + r). With the bands 1 dB apart, a +65.6 dB ratio from a
    # wanted reading in the noise would take the image band's ENR alone; it is left out,
    # and the figure is the equal-gains one, as when the image is not read.
    apart = {**NOISE, "enr_image_db": 15.9}
    doubtful = _figures(-78.6, -81.6, sideband="dsb", noise=apart)["noise_figure"]
    points, readings = _frames(-12.8, -91.4)
    readings = readings[readings["kind"] != "image"].copy()
    readings.loc[readings["kind"] == "noise_figure", "extra_json"] = json.dumps({"noise": apart})
    unread = {f.name: f for f in noise_figure_figures(points, readings, InstrumentSpecs(),
                                                      _Sequence("dsb"))}["noise_figure"]
    assert doubtful.value == unread.value
    # a sound ratio still weights it: image 1 dB under the wanted output
    sound = _figures(-12.0, -91.4, -13.0, sideband="dsb", noise=apart)["noise_figure"]
    assert sound.value != unread.value


def test_what_the_analyzer_said_of_the_sweeps_flags_both_figures() -> None:
    # the point's sweeps or the system calibration's that corrects it: overloaded or
    # uncalibrated, either makes the noise figure wrong by an unknown amount
    cases = {
        "uncalibrated": ("analyzer_uncalibrated",),
        "cal_uncalibrated": ("analyzer_uncalibrated",),
        "cal_overload": ("overload",),
    }
    for key, flags in cases.items():
        got = _figures(-12.8, -91.4, noise={**NOISE, key: True})
        for figure in got.values():
            assert figure.flags == flags, (key, figure.name, figure.flags)
            assert set(figure.flags) & SUSPECT_FLAGS
    # said false, or not recorded (a store written before these were read): no flag
    clean = {**NOISE, "uncalibrated": False, "cal_overload": False, "cal_uncalibrated": False}
    assert all(f.flags == () for f in _figures(-12.8, -91.4, noise=clean).values())
    assert all(f.flags == () for f in _figures(-12.8, -91.4).values())
