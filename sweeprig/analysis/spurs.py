"""The m×n spur table: product frequencies, levels in dBc and dBm, in-band check.

A mixer driven at f_LO and f_RF makes products at |m·f_LO ± n·f_RF| (order m + n). In the
capture table a ``spur`` reading carries signed multipliers ``m`` (LO) and ``n`` (RF): the
product sits at |m·f_LO + n·f_RF|, so (1, −1) is the difference product and (1, 1) the sum.
Its dBc level is relative to the wanted ``if`` reading at the same point (same RF and LO
levels). A spur within 6 dB of its noise floor is an upper bound ("<").

Which products count. A datasheet's worst-spur line is the strongest unwanted product that
lands where the output is used, so a product counts toward ``spur_dbc`` when it lies inside
the output band (when one is stated; every product otherwise) and is not named as expected
(e.g. a downconverter's sum product ``1x1``, filtered after the mixer). The others are kept as
``spur_excluded_dbc``, and every product keeps its absolute ``spur_dbm``: nothing read is
lost, and a chart can show them all.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

from sweeprig.analysis import validity
from sweeprig.analysis.captures import (
    CONDITION_COLUMNS,
    FREQ,
    LEVEL,
    NOISE_FLOOR,
    OUTPUT_FREQ,
    POINT,
    READING,
    STUDY,
    M,
    N,
    column_arrays,
    conditions_records,
    has_bit,
    line_spacing_hz,
    point_table,
    reading_flags,
)
from sweeprig.analysis.figures import (
    BOUND_BELOW,
    BOUND_NONE,
    IN_NOISE,
    MISSING_READING,
    Figure,
    Maker,
    bound_difference,
    flags_from_mask,
    make_figures,
    mask_where,
)
from sweeprig.errors import InputError


def mxn_freqs_hz(
    lo_freq_hz: ArrayLike, rf_freq_hz: ArrayLike, m: ArrayLike, n: ArrayLike
) -> tuple[np.ndarray, np.ndarray]:
    """(difference, sum) product frequencies |m·f_LO − n·f_RF| and m·f_LO + n·f_RF (Hz) for
    non-negative m, n."""
    lo = np.asarray(lo_freq_hz, dtype=float)
    rf = np.asarray(rf_freq_hz, dtype=float)
    m_ = np.asarray(m, dtype=float)
    n_ = np.asarray(n, dtype=float)
    return np.abs(m_ * lo - n_ * rf), np.abs(m_ * lo + n_ * rf)


def product_freq_hz(
    lo_freq_hz: ArrayLike, rf_freq_hz: ArrayLike, m: ArrayLike, n: ArrayLike
) -> np.ndarray:
    """|m·f_LO + n·f_RF| (Hz) for signed multipliers m, n."""
    lo = np.asarray(lo_freq_hz, dtype=float)
    rf = np.asarray(rf_freq_hz, dtype=float)
    return np.abs(np.asarray(m, dtype=float) * lo + np.asarray(n, dtype=float) * rf)


def spur_dbc(spur_dbm: ArrayLike, wanted_if_dbm: ArrayLike) -> np.ndarray:
    """Spur level relative to the wanted IF (dBc)."""
    return np.asarray(spur_dbm, dtype=float) - np.asarray(wanted_if_dbm, dtype=float)


def in_band(freq_hz: ArrayLike, band_hz: tuple[float, float] | None) -> np.ndarray:
    """True where ``freq_hz`` lies inside ``band_hz`` (inclusive); all False without a band."""
    freq = np.asarray(freq_hz, dtype=float)
    if band_hz is None:
        return np.zeros(freq.shape, dtype=bool)
    low, high = sorted((float(band_hz[0]), float(band_hz[1])))
    return (freq >= low) & (freq <= high)


def expected_mask(m: ArrayLike, n: ArrayLike, expected: Sequence[tuple[int, int]]) -> np.ndarray:
    """True where (m, n) is one of ``expected`` or its negation (|m·f_LO + n·f_RF| and
    |−m·f_LO − n·f_RF| are the same product)."""
    m_ = np.asarray(m, dtype=float)
    n_ = np.asarray(n, dtype=float)
    out = np.zeros(np.broadcast(m_, n_).shape, dtype=bool)
    for em, en in expected:
        out |= ((m_ == em) & (n_ == en)) | ((m_ == -em) & (n_ == -en))
    return out


def spur_table(
    captures: pd.DataFrame,
    *,
    if_band_hz: tuple[float, float] | None = None,
    study: str | Sequence[str] | None = None,
    expected: Sequence[tuple[int, int]] = (),
) -> pd.DataFrame:
    """One row per ``spur`` reading (normal attenuation): the point's study and conditions
    and its wanted output (``output_freq_hz``, NaN when the capture table has none), ``m``,
    ``n``, ``order`` (|m| + |n|), ``freq_hz`` (where the analyzer read it, or
    |m·f_LO + n·f_RF| when the reading has no frequency), ``expected_freq_hz``
    (|m·f_LO + n·f_RF|), ``level_dbm`` (upper bound when in the noise), ``dbc``, ``bound``
    (code of the dBc value), ``level_bound`` (code of the dBm value, "<" when in the noise),
    ``in_band`` (inside ``if_band_hz``, the output band), ``expected`` ((m, n) named in
    ``expected``), ``counted`` (counts toward the worst spur: inside the band when one is
    given, and not expected), ``level_flags`` (mask: the spur reading's own noise,
    overload and attenuation-test flags), ``flags`` (mask for the dBc value: those plus the
    wanted IF's, and ``missing_reading`` when the point has no ``if`` reading) and
    ``flag_names`` (of ``flags``). A spur read twice at a point counts once (the later)."""
    cols = column_arrays(captures, where="spurs", study=study)
    points = point_table(cols, ("if",), where="spurs")
    reading = cols[READING]
    spur_rows = np.flatnonzero((reading == "spur") & ~cols["atten_check"])
    repeat_rows = np.flatnonzero((reading == "spur") & cols["atten_check"])
    m = cols[M][spur_rows]
    n = cols[N][spur_rows]
    if spur_rows.size and (~np.isfinite(m) | ~np.isfinite(n)).any():
        raise InputError(
            "a 'spur' reading has no m or n",
            where="spurs",
            fix="store the LO and RF multipliers of every spur reading in columns 'm' and 'n'",
        )
    if spur_rows.size:  # the same spur read twice at a point (a resumed run): the later wins
        again = pd.MultiIndex.from_arrays([cols[POINT][spur_rows], m, n]).duplicated("last")
        spur_rows, m, n = spur_rows[~again], m[~again], n[~again]
    point_of = np.searchsorted(points[POINT].to_numpy(), cols[POINT][spur_rows])
    # the +10 dB attenuation repeat of the same spur (same point, m, n), if any
    repeat_level = _match_repeats(cols, spur_rows, repeat_rows)
    repeat_floor = _match_repeats(cols, spur_rows, repeat_rows, column=NOISE_FLOOR)
    spur_cols = {
        "spur_level_dbm": cols[LEVEL][spur_rows],
        "spur_noise_floor_dbm": cols[NOISE_FLOOR][spur_rows],
        "spur_present": np.ones(spur_rows.size, dtype=bool),
        "spur_overload": cols["overload"][spur_rows],
        "spur_atten_level_dbm": repeat_level,
        "spur_atten_noise_floor_dbm": repeat_floor,
        "spur_atten_overload": _match_repeats(cols, spur_rows, repeat_rows, "overload") == 1.0,
        "if_level_dbm": points["if_level_dbm"].to_numpy()[point_of],
        "if_atten_level_dbm": points["if_atten_level_dbm"].to_numpy()[point_of],
        "spur_rbw_hz": cols["rbw_hz"][spur_rows],
        "spur_spacing_hz": line_spacing_hz(cols)[spur_rows],
        "spur_risks": cols["risks"][spur_rows],
    }
    own_flags = reading_flags(spur_cols, "spur")
    if_flags = points["if_flags"].to_numpy()[point_of]
    level = spur_cols["spur_level_dbm"]
    floor = spur_cols["spur_noise_floor_dbm"]
    noise = has_bit(own_flags, IN_NOISE)
    level_ub = np.where(noise, validity.upper_bound_dbm(level, floor), level)
    bound = np.where(noise, BOUND_BELOW, BOUND_NONE)
    if_noise = has_bit(if_flags, IN_NOISE)
    dbc, dbc_bound = bound_difference(
        level_ub, bound, spur_cols["if_level_dbm"], np.where(if_noise, BOUND_BELOW, BOUND_NONE)
    )
    expected_hz = product_freq_hz(cols["lo_freq_hz"][spur_rows], cols["rf_freq_hz"][spur_rows],
                                  m, n)
    freq = cols[FREQ][spur_rows]
    freq = np.where(np.isfinite(freq), freq, expected_hz)
    table = pd.DataFrame({POINT: cols[POINT][spur_rows], STUDY: cols[STUDY][spur_rows]})
    for col in CONDITION_COLUMNS:
        table[col] = cols[col][spur_rows]
    # the point's wanted output (NaN when the capture table has none): the figures'
    # conditions take it from here (conditions_records)
    table[OUTPUT_FREQ] = cols[OUTPUT_FREQ][spur_rows]
    table["m"] = m.astype(np.int64)
    table["n"] = n.astype(np.int64)
    table["order"] = np.abs(table["m"]) + np.abs(table["n"])
    table["freq_hz"] = freq
    table["expected_freq_hz"] = expected_hz
    table["level_dbm"] = level_ub
    table["dbc"] = dbc
    table["level_bound"] = bound
    table["bound"] = dbc_bound
    table["in_band"] = in_band(freq, if_band_hz)
    table["expected"] = expected_mask(m, n, expected)
    table["counted"] = ((table["in_band"] if if_band_hz is not None else True)
                        & ~table["expected"])
    table["level_flags"] = own_flags
    table["flags"] = (
        own_flags | if_flags | mask_where(~np.isfinite(spur_cols["if_level_dbm"]), MISSING_READING)
    )
    table["flag_names"] = [flags_from_mask(int(f)) for f in table["flags"].tolist()]
    return table


def _match_repeats(
    cols: dict[str, np.ndarray], rows: np.ndarray, repeats: np.ndarray, column: str = LEVEL
) -> np.ndarray:
    """``column`` of the attenuation repeat with the same point, m and n (NaN when none)."""
    out = np.full(rows.size, np.nan)
    if repeats.size == 0 or rows.size == 0:
        return out
    key = pd.MultiIndex.from_arrays([cols[POINT][repeats], cols[M][repeats], cols[N][repeats]])
    value = pd.Series(cols[column][repeats], index=key)
    value = value[~value.index.duplicated(keep="last")]
    wanted = pd.MultiIndex.from_arrays([cols[POINT][rows], cols[M][rows], cols[N][rows]])
    return value.reindex(wanted).to_numpy(dtype=float)


def spur_figures(
    captures: pd.DataFrame,
    *,
    if_band_hz: tuple[float, float] | None = None,
    study: str | Sequence[str] | None = None,
    expected: Sequence[tuple[int, int]] = (),
    make: Maker = make_figures,
) -> list[Figure]:
    """Per spur reading: ``spur_dbc`` when the product counts (see the module docstring),
    else ``spur_excluded_dbc``, and ``spur_dbm`` for every product. Conditions add ``m``,
    ``n``, ``freq_hz`` and ``in_band``, and with a band ``band_low_hz``/``band_high_hz``."""
    table = spur_table(captures, if_band_hz=if_band_hz, study=study, expected=expected)
    if if_band_hz is not None:
        low, high = sorted(float(f) for f in if_band_hz)
        table["band_low_hz"], table["band_high_hz"] = low, high
    keys = (STUDY, *CONDITION_COLUMNS, "m", "n", "freq_hz", "in_band",
            *(("band_low_hz", "band_high_hz") if if_band_hz is not None else ()))
    conditions = conditions_records(table, np.arange(len(table)), keys)
    points = [(p,) for p in table[POINT].tolist()]
    counted = table["counted"].to_numpy(dtype=bool)
    out: list[Figure] = []
    for name, rows in (("spur_dbc", np.flatnonzero(counted)),
                       ("spur_excluded_dbc", np.flatnonzero(~counted))):
        if rows.size or name == "spur_dbc":
            out += make(
                name, "dBc", table["dbc"].to_numpy()[rows], table["bound"].to_numpy()[rows],
                table["flags"].to_numpy()[rows], [conditions[i] for i in rows],
                [points[i] for i in rows])
    return out + make(
        "spur_dbm", "dBm", table["level_dbm"].to_numpy(), table["level_bound"].to_numpy(),
        table["level_flags"].to_numpy(), conditions, points,
    )


def spur_matrix(table: pd.DataFrame, value: str = "dbc") -> pd.DataFrame:
    """The m×n table of one point (or one set of conditions): rows n (RF multiplier),
    columns m (LO multiplier), cells ``value`` (``dbc`` or ``level_dbm``); bounds appear as
    text ("< -80.0") so they are not mistaken for numbers."""
    if table.empty:
        return pd.DataFrame()
    if table[POINT].nunique() > 1 and table.duplicated(["m", "n"]).any():
        raise InputError(
            "the spur table holds several points with the same (m, n)",
            where="spur_matrix",
            fix="select one point (or one set of conditions) before building the m×n matrix",
        )
    bound_col = "bound" if value == "dbc" else "level_bound"
    cells = [
        f"< {v:.1f}" if b == BOUND_BELOW else (f"> {v:.1f}" if b > 0 else f"{v:.1f}")
        for v, b in zip(table[value].tolist(), table[bound_col].tolist(), strict=True)
    ]
    frame = pd.DataFrame({"m": table["m"].to_numpy(), "n": table["n"].to_numpy(), "cell": cells})
    return frame.pivot(index="n", columns="m", values="cell").sort_index().sort_index(axis=1)
