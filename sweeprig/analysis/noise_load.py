"""Noise-figure figures from a run's stored readings (kind ``noise_figure``).

Each stored reading holds the raw Y-factor readings of its point and of the system calibration
(:mod:`sweeprig.engine.noise_reading`); :func:`sweeprig.analysis.noise_figure.reduce_noise_figure`
turns them into the figure, its budget and its flags. The figure is ``noise_figure`` in dB,
double-sideband unless the reading asks for ``sideband = "ssb"``; its conditions name the
sideband, and the Y-factor gain estimate is a figure of its own beside it
(``noise_figure_gain``, both bands' gains summed). The image-to-signal gain ratio for the SSB
conversion is taken from the same point's ``wanted`` and ``image`` readings when the study
reads both (image level − wanted level at the same RF power), else equal gains (+3.01 dB) with
a ±0.5 dB term in the budget; how far that wanted reading stood above its recorded noise floor
goes with it, so a ratio taken from a reading in the noise flags the SSB figure
``image_ratio_doubtful``. The same ratio weights the noise source's ENR at the two bands for
the double-sideband figure; a doubtful ratio is not used there (equal gains, as when the
image is not read), so it cannot pull the ENR wholly to one band's.
"""

from __future__ import annotations

import json
import math
from collections.abc import Mapping

import pandas as pd

from sweeprig.analysis.budget_parts import whole_budget
from sweeprig.analysis.figures import ANALYZER_UNCALIBRATED, OVERLOAD, Figure
from sweeprig.analysis.noise_figure import HotCold, image_ratio_doubtful, reduce_noise_figure
from sweeprig.analysis.uncertainty import InstrumentSpecs

#: Figure flags for the noise-figure causes (:data:`sweeprig.analysis.figures.FLAGS`).
FLAG_OF_CAUSE: Mapping[str, str] = {
    "y_too_small": "y_too_small",
    "analyzer_noise_dominates": "analyzer_noise_dominates",
    "hot_compression": "hot_compression",
    "interferer": "interferer",
    "image_ratio_doubtful": "image_ratio_doubtful",
}


def analyzer_flags(overload: bool, noise: Mapping[str, object]) -> tuple[str, ...]:
    """The figure flags of what the analyzer said of a noise reading's sweeps (``noise``:
    the reading's stored ``noise`` entry; ``overload``: the reading's own column): an
    overloaded input or an uncalibrated sweep, the point's or the system calibration's
    that corrects it (either gives a wrong noise figure). A store written before these
    were recorded reads as not flagged by the analyzer."""
    flags: tuple[str, ...] = ()
    if overload or noise.get("cal_overload"):
        flags += (OVERLOAD,)
    if noise.get("uncalibrated") or noise.get("cal_uncalibrated"):
        flags += (ANALYZER_UNCALIBRATED,)
    return flags


def _over_floor_db(row: pd.Series) -> float | None:
    """How far a stored reading stood above its noise floor, dB (None: no floor recorded)."""
    floor = row.get("noise_floor_dbm")
    try:
        gap = float(row["level_dbm"]) - float(floor)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        return None
    return gap if math.isfinite(gap) else None


def _sidebands(sequence: object) -> dict[tuple[str, str], str]:
    out: dict[tuple[str, str], str] = {}
    for study in getattr(sequence, "study", ()) or ():
        for spec in study.readings():
            if spec.kind == "noise_figure":
                out[(study.name, spec.name or spec.kind)] = spec.sideband or "dsb"
    return out


def noise_figure_figures(points: pd.DataFrame, readings: pd.DataFrame, specs: InstrumentSpecs,
                         sequence: object = None) -> list[Figure]:
    """One ``noise_figure`` and one ``noise_figure_gain`` figure per stored noise reading."""
    if readings.empty or "kind" not in readings:
        return []
    noise = readings[readings["kind"] == "noise_figure"]
    if noise.empty:
        return []
    sidebands = _sidebands(sequence)
    by_point = points.set_index("point_index")
    levels = readings[readings["kind"].isin(("wanted", "image"))]
    out: list[Figure] = []
    for row in noise.itertuples(index=False):
        extra = json.loads(row.extra_json) if isinstance(row.extra_json, str) else {}
        n = extra.get("noise")
        if not n:
            continue
        p = by_point.loc[int(row.point_index)]
        sideband = sidebands.get((str(p["study"]), str(row.name)), "dsb")
        here = levels[levels["point_index"] == row.point_index]
        image_db = wanted_over_floor_db = None
        wanted_rows = here[here["kind"] == "wanted"]
        wanted = wanted_rows["level_dbm"]
        image = here[here["kind"] == "image"]["level_dbm"]
        if len(wanted) and len(image) and math.isfinite(float(wanted.iloc[0])) \
                and math.isfinite(float(image.iloc[0])):
            image_db = float(image.iloc[0]) - float(wanted.iloc[0])
            wanted_over_floor_db = _over_floor_db(wanted_rows.iloc[0])
        # the bands' ENR weighted by their gains; a doubtful measured ratio is not used for
        # that (it would pull the ENR wholly to one band's): equal gains, as when the image
        # is not read (the SSB figure, which depends on the ratio itself, is flagged)
        weighted = image_db is not None and not image_ratio_doubtful(image_db,
                                                                    wanted_over_floor_db)
        r = 10.0 ** (image_db / 10.0) if weighted and image_db is not None else 1.0
        enr_lin = (10.0 ** (n["enr_rf_db"] / 10.0) + r * 10.0 ** (n["enr_image_db"] / 10.0)) \
            / (1.0 + r)
        part = HotCold(n["hot_mw"], n["cold_mw"], n["jitter_rel"],
                       10.0 * math.log10(enr_lin), n["enr_u_db"])
        cal = HotCold(n["cal_hot_mw"], n["cal_cold_mw"], n["cal_jitter_rel"], n["cal_enr_db"],
                      n["cal_enr_u_db"])
        result = reduce_noise_figure(
            part, cal, cold_k=n["cold_k"], specs=specs, sideband=sideband,
            image_to_signal_db=image_db, cold_measured=bool(n.get("cold_measured", True)),
            compression_step_db=n.get("compression_step_db"),
            compression_jitter_db=n.get("compression_jitter_db") or 0.0,
            interferer_excess_db=n.get("peak_excess_db"),
            interferer_sigma_db=n.get("point_sigma_db") or 0.0,
            image_wanted_over_floor_db=wanted_over_floor_db)
        flags = tuple(FLAG_OF_CAUSE[c] for c in result.flags) + analyzer_flags(
            bool(row.overload), n)
        conditions: dict[str, float | int | str] = {
            "study": str(p["study"]), "rf_freq_hz": float(p["rf_freq_hz"]),
            "lo_power_dbm": float(p["lo_power_dbm"]), "if_freq_hz": float(row.freq_hz),
            "sideband": sideband,
        }
        for key in ("temperature_c", "supply_v"):
            value = p.get(key)
            if value is not None and isinstance(value, float) and math.isfinite(value):
                conditions[key] = value
        index = (int(row.point_index),)
        out.append(Figure("noise_figure", result.nf_db, "dB", conditions=conditions,
                          flags=flags, points=index, uncertainty_db=result.expanded_db,
                          budget=whole_budget(result.budget)))
        out.append(Figure("noise_figure_gain", result.gain_db, "dB",
                          conditions={**conditions, "sideband": "dsb (signal + image)"},
                          flags=flags, points=index))
    return out
