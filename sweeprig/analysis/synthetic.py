"""Synthetic capture tables for developing and testing the analysis (pure numpy, no I/O).

The part is a memoryless cubic y = a1·x + a3·x³ (a1·a3 < 0) acting on peak voltage
amplitudes in a 50 Ω system. For one tone of amplitude A the output fundamental is
a1·A + (3/4)·a3·A³; for two equal tones of amplitude A each, the fundamental of each tone is
a1·A + (9/4)·a3·A³ and each IM3 product (3/4)·|a3|·A³ (trigonometric expansion of the cube).
Everything here is invented: fictional parts, fictional numbers.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

from sweeprig.analysis.captures import CONDITION_COLUMNS

R_OHM = 50.0


def amplitude_to_dbm(amplitude_v: ArrayLike, r_ohm: float = R_OHM) -> np.ndarray:
    """Peak voltage amplitude → power in dBm: P = A² / (2R)."""
    a = np.abs(np.asarray(amplitude_v, dtype=float))
    with np.errstate(divide="ignore"):
        return 10.0 * np.log10(a * a / (2.0 * r_ohm) / 1e-3)


def dbm_to_amplitude(power_dbm: ArrayLike, r_ohm: float = R_OHM) -> np.ndarray:
    """Power in dBm → peak voltage amplitude: A = sqrt(2·R·P)."""
    p_w = 1e-3 * 10.0 ** (np.asarray(power_dbm, dtype=float) / 10.0)
    return np.sqrt(2.0 * r_ohm * p_w)


def cubic_coefficients(gain_db: ArrayLike, iip3_dbm: ArrayLike, r_ohm: float = R_OHM
                       ) -> tuple[np.ndarray, np.ndarray]:
    """(a1, a3) of a compressive cubic with this small-signal gain and input IP3.

    a1 = 10^(G/20); A_IIP3² = (4/3)·|a1/a3| gives a3 = −(4/3)·a1 / A_IIP3².
    """
    a1 = 10.0 ** (np.asarray(gain_db, dtype=float) / 20.0)
    a_ip3 = dbm_to_amplitude(iip3_dbm, r_ohm)
    return a1, -(4.0 / 3.0) * a1 / (a_ip3 * a_ip3)


def cubic_single_tone_dbm(a1: ArrayLike, a3: ArrayLike, input_dbm: ArrayLike) -> np.ndarray:
    """Output fundamental (dBm) of the cubic for one input tone."""
    a = dbm_to_amplitude(input_dbm)
    return amplitude_to_dbm(np.asarray(a1) * a + 0.75 * np.asarray(a3) * a**3)


def cubic_two_tone_dbm(
    a1: ArrayLike, a3: ArrayLike, input_dbm: ArrayLike
) -> tuple[np.ndarray, np.ndarray]:
    """(fundamental, IM3) output per tone (dBm) of the cubic for two equal input tones."""
    a = dbm_to_amplitude(input_dbm)
    fund = amplitude_to_dbm(np.asarray(a1) * a + 2.25 * np.asarray(a3) * a**3)
    im3 = amplitude_to_dbm(0.75 * np.abs(np.asarray(a3)) * a**3)
    return fund, im3


DEFAULT_CONDITIONS: Mapping[str, float] = {
    "temperature_c": 25.0,
    "supply_v": 3.3,
    "lo_freq_hz": 2.330e9,
    "lo_power_dbm": 0.0,
    "rf_freq_hz": 2.400e9,
    "rf_power_dbm": -20.0,
    "rf2_freq_hz": np.nan,
    "rf2_power_dbm": np.nan,
}


def points_frame(
    count: int, *, study: str = "demo", first_point: int = 0, **conditions: ArrayLike
) -> pd.DataFrame:
    """``count`` points: ``point``, ``study`` and every condition column, each condition
    taken from ``conditions`` (scalar or length-``count`` array) or :data:`DEFAULT_CONDITIONS`.
    """
    unknown = set(conditions) - set(CONDITION_COLUMNS)
    if unknown:
        raise ValueError(f"points_frame: unknown condition(s) {sorted(unknown)}")
    data: dict[str, object] = {
        "point": np.arange(first_point, first_point + count, dtype=np.int64),
        "study": np.full(count, study, dtype=object),
    }
    for col in CONDITION_COLUMNS:
        value = conditions.get(col, DEFAULT_CONDITIONS[col])
        data[col] = np.broadcast_to(np.asarray(value, dtype=float), (count,)).copy()
    return pd.DataFrame(data)


def reading_rows(
    points: pd.DataFrame,
    reading: str,
    level_dbm: ArrayLike = np.nan,
    *,
    freq_hz: ArrayLike = np.nan,
    noise_floor_dbm: ArrayLike = -150.0,
    overload: ArrayLike = False,
    atten_check: bool = False,
    attenuation_db: float = 10.0,
    m: ArrayLike = np.nan,
    n: ArrayLike = np.nan,
    value: ArrayLike = np.nan,
) -> pd.DataFrame:
    """One ``reading`` row per point of ``points`` (arguments: scalar or one per point)."""
    count = len(points)
    frame = points.copy()

    def per_point(v: ArrayLike, dtype: type = float) -> np.ndarray:
        return np.broadcast_to(np.asarray(v, dtype=dtype), (count,)).copy()

    frame["reading"] = reading
    frame["freq_hz"] = per_point(freq_hz)
    frame["level_dbm"] = per_point(level_dbm)
    frame["noise_floor_dbm"] = per_point(noise_floor_dbm)
    frame["m"] = per_point(m)
    frame["n"] = per_point(n)
    frame["overload"] = per_point(overload, bool)
    frame["atten_check"] = bool(atten_check)
    frame["attenuation_db"] = attenuation_db + (10.0 if atten_check else 0.0)
    frame["value"] = per_point(value)
    return frame


def cubic_compression_captures(
    a1: float,
    a3: float,
    input_dbm: ArrayLike,
    *,
    noise_floor_dbm: float = -150.0,
    noise_db: float = 0.0,
    seed: int = 0,
    study: str = "compression",
    first_point: int = 0,
    **conditions: ArrayLike,
) -> pd.DataFrame:
    """Single-tone power sweep of the cubic: one ``if`` reading per input power, with
    uniform noise of ±``noise_db`` on the level (seeded)."""
    x = np.asarray(input_dbm, dtype=float)
    out = cubic_single_tone_dbm(a1, a3, x)
    out = out + np.random.default_rng(seed).uniform(-noise_db, noise_db, x.size)
    pts = points_frame(x.size, study=study, first_point=first_point, rf_power_dbm=x, **conditions)
    if_freq = abs(float(pts["rf_freq_hz"].iloc[0]) - float(pts["lo_freq_hz"].iloc[0]))
    return reading_rows(pts, "if", out, freq_hz=if_freq, noise_floor_dbm=noise_floor_dbm)


def cubic_two_tone_captures(
    a1: float,
    a3: float,
    input_dbm: ArrayLike,
    *,
    tone_spacing_hz: float = 1e6,
    noise_floor_dbm: float = -150.0,
    noise_db: float = 0.0,
    seed: int = 0,
    study: str = "two_tone",
    first_point: int = 0,
    **conditions: ArrayLike,
) -> pd.DataFrame:
    """Two-tone power sweep of the cubic (``input_dbm`` per tone): ``if``, ``im3_low`` and
    ``im3_high`` readings, uniform noise of ±``noise_db`` on every level (seeded)."""
    x = np.asarray(input_dbm, dtype=float)
    fund, im3 = cubic_two_tone_dbm(a1, a3, x)
    rng = np.random.default_rng(seed)
    rf1 = float(conditions.pop("rf_freq_hz", DEFAULT_CONDITIONS["rf_freq_hz"]))
    pts = points_frame(
        x.size,
        study=study,
        first_point=first_point,
        rf_freq_hz=rf1,
        rf2_freq_hz=rf1 + tone_spacing_hz,
        rf_power_dbm=x,
        rf2_power_dbm=x,
        **conditions,
    )
    lo = float(pts["lo_freq_hz"].iloc[0])
    f1, f2 = rf1, rf1 + tone_spacing_hz
    frames = [
        reading_rows(pts, "if", fund + rng.uniform(-noise_db, noise_db, x.size),
                     freq_hz=abs(f1 - lo), noise_floor_dbm=noise_floor_dbm),
        reading_rows(pts, "im3_low", im3 + rng.uniform(-noise_db, noise_db, x.size),
                     freq_hz=abs(2 * f1 - f2 - lo), noise_floor_dbm=noise_floor_dbm),
        reading_rows(pts, "im3_high", im3 + rng.uniform(-noise_db, noise_db, x.size),
                     freq_hz=abs(2 * f2 - f1 - lo), noise_floor_dbm=noise_floor_dbm),
    ]
    return pd.concat(frames, ignore_index=True)


def synthetic_run(
    target_rows: int = 1_000_000,
    seed: int = 0,
    *,
    temperatures_c: ArrayLike = (-40.0, 25.0, 85.0),
    supplies_v: ArrayLike = (3.0, 3.3, 3.6),
    lo_powers_dbm: ArrayLike = (-6.0, -3.0, 0.0, 3.0, 6.0),
    rf_band_hz: tuple[float, float] = (1.8e9, 2.7e9),
    first_point: int = 0,
) -> pd.DataFrame:
    """A whole fictional characterisation run of about ``target_rows`` readings.

    Studies: ``compression`` (single-tone power sweeps, ``if`` and ``supply_current``, with
    attenuation repeats of the top points), ``two_tone`` (``if``, IM3 and IM2 products, each
    repeated with +10 dB attenuation), ``spurs`` (an m×n table at two RF powers) and
    ``isolation`` (leakage readings, supply current, and an image point). Conditions span
    the corners given (by default three temperatures, three supplies, five LO powers) and as
    many RF frequencies as the size needs. Levels come from a cubic per condition, with
    0.05 dB of seeded noise. ``rf_band_hz``: the RF frequencies' span, Hz; ``first_point``:
    the first point index (a large run can be built in slices over adjacent bands).
    """
    rng = np.random.default_rng(seed)
    temps = np.asarray(temperatures_c, dtype=float)
    supplies = np.asarray(supplies_v, dtype=float)
    lo_powers = np.asarray(lo_powers_dbm, dtype=float)
    comp_in = np.arange(-30.0, 10.5, 1.0)
    tt_in = np.arange(-30.0, -4.5, 1.0)
    spur_in = np.array([-20.0, -10.0])
    spur_mn = [(m, n) for m in range(5) for n in range(5) if (m, n) not in ((0, 0), (1, 1))]
    per_combo = (comp_in.size * 2 + 5) + tt_in.size * 10 + spur_in.size * (1 + len(spur_mn)) + 6
    n_freq = max(1, round(target_rows / (per_combo * temps.size * supplies.size * lo_powers.size)))
    rf_freqs = np.linspace(rf_band_hz[0], rf_band_hz[1], n_freq)
    if_hz = 70e6
    t, v, p_lo, f_rf = (a.ravel() for a in np.meshgrid(temps, supplies, lo_powers, rf_freqs,
                                                      indexing="ij"))
    combos = t.size
    f_lo = f_rf - if_hz
    gain = 7.0 - 0.02 * (t - 25.0) - 0.8 * np.maximum(0.0, 3.0 - p_lo) - 2e-9 * np.abs(f_rf - 2.2e9)
    iip3 = 12.0 + 0.5 * (v - 3.3) + 0.3 * np.minimum(p_lo, 3.0)
    a1, a3 = cubic_coefficients(gain, iip3)
    columns: dict[str, list[np.ndarray]] = {k: [] for k in (
        "point", "study", *CONDITION_COLUMNS, "reading", "freq_hz", "level_dbm",
        "noise_floor_dbm", "m", "n", "overload", "atten_check", "attenuation_db", "value")}
    next_point = first_point

    def add(
        study: str,
        drive: np.ndarray,
        readings: list[tuple],
        two_tone: bool = False,
        rf_hz: np.ndarray = f_rf,
    ) -> None:
        """Points = combos × drive levels; readings: (name, level (combos, drives), freq, m,
        n, atten_check, value, which drives)."""
        nonlocal next_point
        n_pts = combos * drive.size
        point = next_point + np.arange(n_pts)
        next_point += n_pts
        none = np.full(n_pts, np.nan)
        cond = {
            "temperature_c": np.repeat(t, drive.size),
            "supply_v": np.repeat(v, drive.size),
            "lo_freq_hz": np.repeat(f_lo, drive.size),
            "lo_power_dbm": np.repeat(p_lo, drive.size),
            "rf_freq_hz": np.repeat(rf_hz, drive.size),
            "rf_power_dbm": np.tile(drive, combos),
            "rf2_freq_hz": np.repeat(f_rf + 1e6, drive.size) if two_tone else none,
            "rf2_power_dbm": np.tile(drive, combos) if two_tone else none,
        }
        for name, level, freq, m, n, atten, value, keep in readings:
            rows = np.flatnonzero(np.broadcast_to(keep, (combos, drive.size)).ravel())
            shape = (combos, drive.size)
            lvl = np.broadcast_to(np.asarray(level, dtype=float), shape).ravel()[rows]
            columns["point"].append(point[rows])
            columns["study"].append(np.full(rows.size, study, dtype=object))
            for col in CONDITION_COLUMNS:
                columns[col].append(cond[col][rows])
            columns["reading"].append(np.full(rows.size, name, dtype=object))
            columns["freq_hz"].append(np.broadcast_to(freq, (combos, drive.size)).ravel()[rows])
            columns["level_dbm"].append(lvl + rng.normal(0.0, 0.05, rows.size))
            columns["noise_floor_dbm"].append(np.full(rows.size, -110.0 + (10.0 if atten else 0.0)))
            columns["m"].append(np.full(rows.size, float(m)))
            columns["n"].append(np.full(rows.size, float(n)))
            columns["overload"].append(np.zeros(rows.size, dtype=bool))
            columns["atten_check"].append(np.full(rows.size, atten))
            columns["attenuation_db"].append(np.full(rows.size, 20.0 if atten else 10.0))
            columns["value"].append(
                np.broadcast_to(value, (combos, drive.size)).ravel()[rows].astype(float)
            )

    col = (slice(None), None)
    nan = np.nan
    current = (0.045 + 0.004 * (v - 3.3) + 0.0001 * (t - 25.0))[col]
    comp_out = cubic_single_tone_dbm(a1[col], a3[col], comp_in[None, :])
    top = np.zeros(comp_in.size, dtype=bool)
    top[-5:] = True
    add("compression", comp_in, [
        ("if", comp_out, if_hz, nan, nan, False, nan, True),
        ("if", comp_out, if_hz, nan, nan, True, nan, top[None, :]),
        ("supply_current", nan, nan, nan, nan, False, current, True),
    ])
    fund, im3 = cubic_two_tone_dbm(a1[col], a3[col], tt_in[None, :])
    im2 = 2.0 * tt_in[None, :] - 35.0 + gain[col]
    add("two_tone", tt_in, [
        (name, lvl, if_hz, nan, nan, atten, nan, True)
        for atten in (False, True)
        for name, lvl in (("if", fund), ("im3_low", im3), ("im3_high", im3 + 0.5),
                          ("im2_low", im2), ("im2_high", im2 - 1.0))
    ], two_tone=True)
    spur_out = cubic_single_tone_dbm(a1[col], a3[col], spur_in[None, :])
    spur_readings = [("if", spur_out, if_hz, nan, nan, False, nan, True)]
    for m, n in spur_mn:
        level = spur_out - 20.0 - 8.0 * (m + n) + (n - 1) * (spur_in[None, :] + 10.0)
        freq = np.abs(m * f_lo - n * f_rf)[col]
        spur_readings.append(("spur", level, freq, m, -n, False, nan, True))
    add("spurs", spur_in, spur_readings)
    iso_in = np.array([-20.0])
    iso_if = cubic_single_tone_dbm(a1[col], a3[col], iso_in[None, :])
    add("isolation", iso_in, [
        ("if", iso_if, if_hz, nan, nan, False, nan, True),
        ("lo_at_if", p_lo[col] - 40.0, f_lo[col], nan, nan, False, nan, True),
        ("lo_at_rf", p_lo[col] - 35.0, f_lo[col], nan, nan, False, nan, True),
        ("rf_at_if", iso_in[None, :] - 30.0, f_rf[col], nan, nan, False, nan, True),
        ("supply_current", nan, nan, nan, nan, False, current, True),
    ])
    # Image point: RF tuned to 2·f_LO − f_RF, IF output 30 dB below the wanted response.
    add("isolation", iso_in, [("image", iso_if - 30.0, if_hz, nan, nan, False, nan, True)],
        rf_hz=2.0 * f_lo - f_rf)
    return pd.DataFrame({k: np.concatenate(v) for k, v in columns.items()})
