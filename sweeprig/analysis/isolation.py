"""Isolation, leakage, image rejection and DC supply figures.

* LO→IF isolation = P_LO (at the LO port) − P(LO leakage at the IF port), reading ``lo_at_if``;
  LO→RF isolation from ``lo_at_rf`` (the same at the RF port); RF→IF isolation =
  P_RF − P(RF leakage at the IF port), reading ``rf_at_if``. All in dB, larger is better.
  A leakage reading in the noise is an upper bound, so the isolation is a ">" bound.
* Image rejection = G(wanted RF) − G(image) in dB, where an ``image`` reading is the IF
  output with the RF source tuned to the image frequency 2·f_LO − f_RF, at the point's
  ``rf_power_dbm``. Two layouts are understood. (a) The point also has the wanted ``if``
  reading: the point's ``rf_freq_hz`` is the wanted RF, the RF source was retuned to the
  image for the ``image`` reading only. (b) It has not: the point's ``rf_freq_hz`` is the
  image frequency, and the wanted gain comes from the point with the same temperature,
  supply, LO frequency and power at the wanted RF (within a tolerance), preferring the same
  RF power, else the lowest one.
* Supply current (A) from ``supply_current`` readings (column ``value``) and DC power (W) =
  supply voltage × current.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

from sweeprig.analysis import validity
from sweeprig.analysis.captures import conditions_records, has_bit, point_table
from sweeprig.analysis.figures import (
    BOUND_ABOVE,
    BOUND_BELOW,
    BOUND_NONE,
    IN_NOISE,
    MISSING_READING,
    Figure,
    Maker,
    bound_difference,
    make_figures,
    mask_where,
)
from sweeprig.analysis.gain import conversion_gain_db

#: (reading, drive column, figure name)
ISOLATION_READINGS: tuple[tuple[str, str, str], ...] = (
    ("lo_at_if", "lo_power_dbm", "lo_if_isolation"),
    ("lo_at_rf", "lo_power_dbm", "lo_rf_isolation"),
    ("rf_at_if", "rf_power_dbm", "rf_if_isolation"),
)
IMAGE_FREQ_TOLERANCE_HZ = 1e3
_MATCH_KEYS = ("temperature_c", "supply_v", "lo_freq_hz", "lo_power_dbm")


def isolation_db(drive_dbm: ArrayLike, leakage_dbm: ArrayLike) -> np.ndarray:
    """Isolation = drive power at the source port − leaked power at the other port (dB)."""
    return np.asarray(drive_dbm, dtype=float) - np.asarray(leakage_dbm, dtype=float)


def image_rejection_db(wanted_gain_db: ArrayLike, image_gain_db: ArrayLike) -> np.ndarray:
    """Image rejection = gain at the wanted RF − gain at the image frequency (dB)."""
    return np.asarray(wanted_gain_db, dtype=float) - np.asarray(image_gain_db, dtype=float)


def image_freq_hz(lo_freq_hz: ArrayLike, rf_freq_hz: ArrayLike) -> np.ndarray:
    """Image of a downconversion: 2·f_LO − f_RF (Hz); the map is its own inverse."""
    return 2.0 * np.asarray(lo_freq_hz, dtype=float) - np.asarray(rf_freq_hz, dtype=float)


def dc_power_w(supply_v: ArrayLike, current_a: ArrayLike) -> np.ndarray:
    """DC power = V · I (W)."""
    return np.asarray(supply_v, dtype=float) * np.asarray(current_a, dtype=float)


def isolation_figures(
    captures: pd.DataFrame, *, study: str | Sequence[str] | None = None,
    make: Maker = make_figures,
) -> list[Figure]:
    """``lo_if_isolation``, ``lo_rf_isolation``, ``rf_if_isolation`` at every point that has
    the corresponding leakage reading."""
    readings = [r for r, _, _ in ISOLATION_READINGS]
    table = point_table(captures, readings, study=study, where="isolation")
    figures: list[Figure] = []
    for reading, drive, name in ISOLATION_READINGS:
        rows = np.flatnonzero(table[f"{reading}_present"].to_numpy())
        if rows.size == 0:
            continue
        sub = table.iloc[rows]
        flags = sub[f"{reading}_flags"].to_numpy()
        noise = has_bit(flags, IN_NOISE)
        level = sub[f"{reading}_level_dbm"].to_numpy()
        floor = sub[f"{reading}_noise_floor_dbm"].to_numpy()
        leak = np.where(noise, validity.upper_bound_dbm(level, floor), level)
        figures += make(
            name,
            "dB",
            isolation_db(sub[drive].to_numpy(), leak),
            np.where(noise, BOUND_ABOVE, BOUND_NONE),
            flags,
            conditions_records(table, rows),
            [(p,) for p in sub["point"].tolist()],
        )
    return figures


def image_rejection_figures(
    captures: pd.DataFrame,
    *,
    freq_tolerance_hz: float = IMAGE_FREQ_TOLERANCE_HZ,
    study: str | Sequence[str] | None = None,
    make: Maker = make_figures,
) -> list[Figure]:
    """``image_rejection`` for every point with an ``image`` reading (see the module
    docstring). Conditions are those of the image point with ``rf_freq_hz`` set to the wanted
    RF and ``image_freq_hz`` added; points are (image point, wanted point)."""
    table = point_table(captures, ("image",), study=study, where="image_rejection")
    image = table[table["image_present"].to_numpy()].reset_index(drop=True)
    if image.empty:
        return []
    # wanted side: every point with an IF reading (any study: the wanted response may have
    # been measured elsewhere in the run)
    everything = point_table(captures, ("if",), where="image_rejection")
    wanted = everything[everything["if_present"].to_numpy()].reset_index(drop=True)
    wanted_gain = conversion_gain_db(wanted["if_level_dbm"], wanted["rf_power_dbm"])
    wanted = wanted.assign(wanted_gain_db=wanted_gain, wanted_point=wanted["point"])
    image = image.assign(
        target_rf_hz=image_freq_hz(image["lo_freq_hz"], image["rf_freq_hz"]),
        row=np.arange(len(image)),
    )
    match = _match_wanted(image, wanted, freq_tolerance_hz)
    same_point = image["if_present"].to_numpy()
    wanted_point = np.where(same_point, image["point"].to_numpy(), match["wanted_point"])
    wanted_gain_db = np.where(
        same_point,
        conversion_gain_db(image["if_level_dbm"], image["rf_power_dbm"]),
        match["wanted_gain_db"],
    )
    wanted_flags = np.where(same_point, image["if_flags"].to_numpy(), match["if_flags"])
    found = np.isfinite(wanted_gain_db)
    image_flags = image["image_flags"].to_numpy()
    image_noise = has_bit(image_flags, IN_NOISE)
    image_level = np.where(
        image_noise,
        validity.upper_bound_dbm(image["image_level_dbm"], image["image_noise_floor_dbm"]),
        image["image_level_dbm"].to_numpy(),
    )
    image_gain = conversion_gain_db(image_level, image["rf_power_dbm"])
    wanted_noise = has_bit(wanted_flags, IN_NOISE)
    value, bound = bound_difference(
        wanted_gain_db,
        np.where(wanted_noise, BOUND_BELOW, BOUND_NONE),
        image_gain,
        np.where(image_noise, BOUND_BELOW, BOUND_NONE),
    )
    flags = image_flags | np.where(found, wanted_flags, 0) | mask_where(~found, MISSING_READING)
    base = conditions_records(image, np.arange(len(image)))
    point_rf = image["rf_freq_hz"].to_numpy()
    other_rf = image["target_rf_hz"].to_numpy()  # 2·f_LO − the point's RF
    wanted_rf = np.where(same_point, point_rf, other_rf)
    image_rf = np.where(same_point, other_rf, point_rf)
    conditions = [
        {**c, "rf_freq_hz": float(w), "image_freq_hz": float(i)}
        for c, w, i in zip(base, wanted_rf.tolist(), image_rf.tolist(), strict=True)
    ]
    points = [
        (int(p),) if not ok or int(p) == int(w) else (int(p), int(w))
        for p, w, ok in zip(
            image["point"].tolist(), np.nan_to_num(wanted_point, nan=-1).tolist(),
            found.tolist(), strict=True,
        )
    ]
    return make("image_rejection", "dB", value, bound, flags, conditions, points)


def _match_wanted(image: pd.DataFrame, wanted: pd.DataFrame, tolerance_hz: float) -> dict:
    """For every image row, the wanted point's gain, flags and index (NaN when none)."""
    out = {
        "wanted_gain_db": np.full(len(image), np.nan),
        "if_flags": np.zeros(len(image), dtype=np.int64),
        "wanted_point": np.full(len(image), np.nan),
    }
    left = image[np.isfinite(image["target_rf_hz"].to_numpy())]
    right_all = wanted[np.isfinite(wanted["rf_freq_hz"].to_numpy())]
    if left.empty or right_all.empty:
        return out
    keep = [
        "rf_freq_hz", *_MATCH_KEYS, "rf_power_dbm", "wanted_gain_db", "if_flags", "wanted_point"
    ]
    stages = (
        (right_all[keep], [*_MATCH_KEYS, "rf_power_dbm"]),
        (
            right_all[keep]
            .sort_values("rf_power_dbm", kind="stable")
            .drop_duplicates([*_MATCH_KEYS, "rf_freq_hz"], keep="first"),
            list(_MATCH_KEYS),
        ),
    )
    pending = left[["row", "target_rf_hz", *_MATCH_KEYS, "rf_power_dbm"]]
    for right, by in stages:
        if pending.empty:
            break
        merged = pd.merge_asof(
            pending.sort_values("target_rf_hz"),
            right[[*by, "rf_freq_hz", "wanted_gain_db", "if_flags", "wanted_point"]]
            .sort_values("rf_freq_hz"),
            left_on="target_rf_hz",
            right_on="rf_freq_hz",
            by=by,
            direction="nearest",
            tolerance=tolerance_hz,
        )
        hit = merged["wanted_gain_db"].notna().to_numpy()
        rows = merged["row"].to_numpy()[hit]
        out["wanted_gain_db"][rows] = merged["wanted_gain_db"].to_numpy()[hit]
        out["if_flags"][rows] = merged["if_flags"].to_numpy()[hit].astype(np.int64)
        out["wanted_point"][rows] = merged["wanted_point"].to_numpy()[hit]
        pending = pending[~pending["row"].isin(rows)]
    return out


def supply_figures(
    captures: pd.DataFrame, *, study: str | Sequence[str] | None = None,
    make: Maker = make_figures,
) -> list[Figure]:
    """``supply_current`` (A) and ``dc_power`` (W) at every point with a ``supply_current``
    reading; ``missing_reading`` when its ``value`` is empty."""
    table = point_table(captures, ("supply_current",), study=study, where="supply")
    rows = np.flatnonzero(table["supply_current_present"].to_numpy())
    if rows.size == 0:
        return []
    sub = table.iloc[rows]
    current = sub["supply_current_value"].to_numpy(dtype=float)
    flags = mask_where(~np.isfinite(current), MISSING_READING)
    conditions = conditions_records(table, rows)
    points = [(p,) for p in sub["point"].tolist()]
    return make(
        "supply_current", "A", current, BOUND_NONE, flags, conditions, points
    ) + make(
        "dc_power", "W", dc_power_w(sub["supply_v"].to_numpy(), current), BOUND_NONE, flags,
        conditions, points,
    )


def supply_current_off_points(
    captures: pd.DataFrame, expected_current_a: float,
    tolerance: float = validity.SUPPLY_CURRENT_TOLERANCE,
) -> np.ndarray:
    """Run-store indices (ascending) of the points whose ``supply_current`` reading is more
    than ``tolerance`` (a fraction) away from ``expected_current_a``
    (:func:`sweeprig.analysis.validity.supply_current_off`)."""
    if captures.empty or not (captures["reading"] == "supply_current").any():
        return np.zeros(0, dtype=np.int64)
    table = point_table(captures, ("supply_current",), where="supply")
    rows = table["supply_current_present"].to_numpy()
    current = table["supply_current_value"].to_numpy(dtype=float)
    off = rows & validity.supply_current_off(current, expected_current_a, tolerance)
    return np.asarray(table["point"].to_numpy()[off], dtype=np.int64)
