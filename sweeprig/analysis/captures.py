"""Capture tables: the column vocabulary, checks, and the per-point ("wide") view.

A capture table is tidy: one row per reading. Columns (SI units, powers in dBm at the DUT
port planes, already path-loss corrected):

==================  =========================================================================
column              meaning
==================  =========================================================================
point               run-store point index (int)
study               name of the study the point belongs to (str)
temperature_c       DUT temperature, °C
supply_v            supply voltage, V
lo_freq_hz          LO frequency, Hz;  lo_power_dbm: LO power at the LO port, dBm
rf_freq_hz          RF tone 1 frequency, Hz;  rf_power_dbm: its power at the RF port, dBm
rf2_freq_hz         RF tone 2 (two-tone tests; NaN or absent otherwise);  rf2_power_dbm
reading             reading name: ``if``, ``lo_at_if``, ``lo_at_rf``, ``rf_at_if``, ``image``,
                    ``spur``, ``im3_low``, ``im3_high``, ``im2_low``, ``im2_high``,
                    ``supply_current``
freq_hz             frequency the reading was taken at, Hz
level_dbm           level at the DUT port, dBm (NaN for non-RF readings)
noise_floor_dbm     analyzer displayed noise near the reading, same reference plane, dBm
m, n                signed LO and RF multipliers of a spur: it sits at |m·f_LO + n·f_RF|
overload            the analyzer reported input overload during this reading (bool)
atten_check         this row is the repeat with 10 dB more input attenuation (bool)
attenuation_db      analyzer input attenuation, dB (informative)
value               reading in SI units for non-RF readings (``supply_current``: A)
rbw_hz              analyzer resolution bandwidth of the reading, Hz
port                DUT port the reading was taken at (``if``, ``rf``, ``lo``)
risks               the planner's predicted risks, comma-separated (``""``: none predicted;
                    None: no prediction stored)
output_freq_hz      the point's wanted output frequency |m·f_LO + n·f_RF|, Hz (the RF of an
                    upconverter, the IF of a downconverter; built by
                    :func:`sweeprig.analysis.load.captures_from_frames`)
==================  =========================================================================

``rf_*`` columns and the ``rf`` port name the mixer's input and ``if`` its output, whichever
the direction: for an upconverter (whose input the trade calls its IF) they hold the IF input
and the RF output (see :mod:`sweeprig.analysis.direction`). The ``sideband`` reading is an
upconverter's unwanted sideband at its output.

Optional columns (``rf2_*``, ``noise_floor_dbm``, ``m``, ``n``, ``overload``,
``atten_check``, ``attenuation_db``, ``value``, ``rbw_hz``, ``port``, ``risks``) may be
absent: they read as NaN / False / None.
A NaN noise floor means "not recorded": the reading is then taken at face value.

:func:`point_table` turns the readings of each point into one row with a column group per
reading name (``if_level_dbm``, ``if_flags``, ``im3_low_atten_level_dbm``, ...), running the
noise, overload and attenuation tests on the way. When a point has the same reading twice
(for example a resumed run re-measured it), the later row wins.
"""

from __future__ import annotations

import contextlib
import contextvars
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass
from types import MappingProxyType
from typing import TYPE_CHECKING

import numpy as np

from sweeprig.analysis import validity
from sweeprig.analysis.condition_rows import Column, ConditionColumns
from sweeprig.analysis.figures import (
    ANALYZER_COMPRESSION,
    ANALYZER_DISTORTION,
    ANALYZER_UNCALIBRATED,
    ATTEN_CARRIER_MOVED,
    FREQUENCY_OFFSET,
    IN_NOISE,
    MISSING_READING,
    NOISE_LIMITED,
    OVERLOAD,
    RBW_MERGED,
    SOURCE_HARMONIC,
    WINDOW_EDGE,
    flag_bit,
    mask_where,
)
from sweeprig.errors import InputError

if TYPE_CHECKING:
    import pandas as pd

POINT = "point"
STUDY = "study"
READING = "reading"
FREQ = "freq_hz"
LEVEL = "level_dbm"
NOISE_FLOOR = "noise_floor_dbm"
OVERLOAD_COL = "overload"
ATTEN_CHECK = "atten_check"
ATTENUATION = "attenuation_db"
VALUE = "value"
M = "m"
N = "n"
RBW = "rbw_hz"
PORT = "port"
RISKS = "risks"
#: The point's wanted output frequency, Hz (optional: NaN when the table has none).
OUTPUT_FREQ = "output_freq_hz"

#: The settings of a point, in the order figures list them.
CONDITION_COLUMNS: tuple[str, ...] = (
    "temperature_c",
    "supply_v",
    "lo_freq_hz",
    "lo_power_dbm",
    "rf_freq_hz",
    "rf_power_dbm",
    "rf2_freq_hz",
    "rf2_power_dbm",
)

READINGS: tuple[str, ...] = (
    "if",
    "lo_at_if",
    "lo_at_rf",
    "rf_at_if",
    "image",
    "spur",
    "im3_low",
    "im3_high",
    "im2_low",
    "im2_high",
    "supply_current",
    "if_tone2",
    "sideband",
)

#: A line closer to a product than this many RBWs merges with it in the RBW filter (the
#: planner's rule in its ``rbw_merged`` risk, kept the same here): for a Gaussian-like
#: filter with a 60 dB : 3 dB shape factor of about 5 (recalled from memory from a published
#: spectrum-analysis application note, see :mod:`sweeprig.engine.noise_floor`) the skirt is
#: 60 dB down only at ±2.5 RBW, so a line 40-80 dB above an intermodulation product still
#: adds to it inside that distance; 3 RBW keeps a small margin (common practice, no source).
MERGE_SPACING_RBW = 3.0
#: Lines closer than this are the same line (coincident products, the attenuation repeat),
#: which no RBW can separate: not an RBW problem, Hz.
SAME_LINE_HZ = 1.0

#: Other spellings of our column names that a capture table may use.
COLUMN_ALIASES: Mapping[str, str] = MappingProxyType(
    {
        "point_index": POINT,
        "reading_name": READING,
        "name": READING,
        "value_si": VALUE,
        "attenuation_check": ATTEN_CHECK,
    }
)

_REQUIRED = (POINT, STUDY, "temperature_c", "supply_v", "lo_freq_hz", "lo_power_dbm",
             "rf_freq_hz", "rf_power_dbm", READING, FREQ, LEVEL)
_OPTIONAL_FLOAT = ("rf2_freq_hz", "rf2_power_dbm", NOISE_FLOOR, ATTENUATION, VALUE, M, N, RBW,
                   OUTPUT_FREQ)
_OPTIONAL_BOOL = (OVERLOAD_COL, ATTEN_CHECK)
_OPTIONAL_OBJECT = (PORT, RISKS)
_NUMERIC = (*CONDITION_COLUMNS, FREQ, LEVEL, NOISE_FLOOR, ATTENUATION, VALUE, M, N, RBW,
            OUTPUT_FREQ)

CARRIER = "if"


def column_arrays(
    captures: pd.DataFrame, *, where: str = "captures", study: str | Sequence[str] | None = None
) -> dict[str, np.ndarray]:
    """Check a capture table and return its columns as numpy arrays (optional ones filled).

    ``study`` keeps only the rows of that study (or those studies). Raises
    :class:`~sweeprig.errors.InputError` naming the missing or mistyped column.
    """
    columns = CaptureColumns(captures, where=where, study=study)
    return {col: columns[col] for col in columns}


#: Every column of :func:`column_arrays`, in its order.
_ALL_COLUMNS = (*_REQUIRED, *_OPTIONAL_FLOAT, *_OPTIONAL_BOOL, *_OPTIONAL_OBJECT)


class CaptureColumns(Mapping[str, np.ndarray]):
    """The arrays of :func:`column_arrays`, the table checked at once (the same errors), each
    column converted when first asked for and kept; :meth:`unkept` converts one for its
    caller alone. A point table needs a few columns whole and the rest at one row a point:
    converting every column of a large run's study first held several times the table it
    made."""

    def __init__(self, captures: pd.DataFrame, *, where: str = "captures",
                 study: str | Sequence[str] | None = None) -> None:
        import pandas as pd

        if not isinstance(captures, pd.DataFrame):
            raise InputError(
                f"expected a pandas DataFrame of captures, got {type(captures).__name__}",
                where=where,
                fix="pass the readings table of a run (one row per reading)",
            )
        names: dict[str, object] = {}
        for column in captures.columns:
            key = COLUMN_ALIASES.get(str(column), str(column))
            if key not in names or str(column) == key:  # our own spelling wins over an alias
                names[key] = column
        missing = [c for c in _REQUIRED if c not in names]
        if missing:
            raise InputError(
                f"the capture table has no column {', '.join(repr(c) for c in missing)}",
                where=where,
                fix="capture tables need the columns " + ", ".join(_REQUIRED),
            )
        types = pd.api.types
        for col in _ALL_COLUMNS:
            if col in names and (col in _NUMERIC or col == POINT):
                series = captures[names[col]]
                if not types.is_numeric_dtype(series) or types.is_bool_dtype(series):
                    raise InputError(
                        f"column {col!r} holds {series.dtype} values, not numbers",
                        where=where,
                        fix=f"store {col!r} as numbers in SI units (see "
                            "sweeprig.analysis.captures)",
                    )
        self._captures, self._names = captures, names
        self._rows: np.ndarray | slice = slice(None)
        self._count = len(captures)
        self._study = study is not None
        if study is not None:
            wanted = [study] if isinstance(study, str) else list(study)
            self._rows = captures[names[STUDY]].isin(wanted).to_numpy(dtype=bool)
            self._count = int(self._rows.sum())
        self._kept: dict[str, np.ndarray] = {}
        point = self._converted(POINT)
        if np.isnan(point).any():
            raise InputError(
                "column 'point' has empty values",
                where=where,
                fix="every reading must carry the index of the point it belongs to",
            )
        self._kept[POINT] = point.astype(np.int64)

    def __getitem__(self, col: str) -> np.ndarray:
        kept = self._kept.get(col)
        if kept is None:
            if col not in _ALL_COLUMNS:
                raise KeyError(col)
            kept = self._kept[col] = self._converted(col)
        return kept

    def __iter__(self) -> Iterator[str]:
        return iter(_ALL_COLUMNS)

    def __len__(self) -> int:
        return len(_ALL_COLUMNS)

    def __contains__(self, col: object) -> bool:
        return col in _ALL_COLUMNS

    def unkept(self, col: str) -> np.ndarray:
        """Column ``col``, converted for the caller alone when not kept already."""
        kept = self._kept.get(col)
        if kept is not None:
            return kept
        if col not in _ALL_COLUMNS:
            raise KeyError(col)
        return self._converted(col)

    def factorized(self, col: str) -> tuple[np.ndarray, np.ndarray]:
        """``pandas.factorize`` of column ``col`` (the table's own codes for a text column
        not converted yet: no Python object a row)."""
        import pandas as pd

        kept = self._kept.get(col)
        if kept is not None or col not in (*_OPTIONAL_OBJECT, STUDY, READING) \
                or col not in self._names:
            return pd.factorize(pd.Series(self[col] if kept is None else kept, dtype=object))
        series = self._captures[self._names[col]]
        codes, uniques = pd.factorize(series[self._rows] if self._study else series)
        return codes, np.asarray(uniques, dtype=object)

    def _converted(self, col: str) -> np.ndarray:
        import pandas as pd

        count, rows = self._count, self._rows
        if col not in self._names:
            if col in _OPTIONAL_BOOL:
                return np.zeros(count, dtype=bool)
            if col in _OPTIONAL_OBJECT:
                return np.full(count, None, dtype=object)
            return np.full(count, np.nan)
        series = self._captures[self._names[col]]
        if col in _NUMERIC or col == POINT:
            return series.to_numpy(dtype=float, na_value=np.nan)[rows]
        if col in _OPTIONAL_BOOL:
            return series.fillna(False).to_numpy(dtype=bool)[rows]
        codes, uniques = pd.factorize(series[rows] if self._study else series)
        labels = np.append(np.asarray(uniques, dtype=object), None)
        return labels[codes]  # code -1 (missing) → None


def factorized(cols: Mapping[str, np.ndarray], col: str) -> tuple[np.ndarray, np.ndarray]:
    """``pandas.factorize`` of column ``col`` of checked capture arrays: each row's code
    (-1: missing) and the distinct values (of a :class:`CaptureColumns`' text column read
    from the table's own codes, without a Python object a row)."""
    import pandas as pd

    if isinstance(cols, CaptureColumns):
        return cols.factorized(col)
    return pd.factorize(pd.Series(np.asarray(cols[col]), dtype=object))


def _point_codes(point: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Each row's code among the distinct points, the distinct points (ascending) and the
    first row of each: rows in point order (a capture table's, as loaded) in one pass
    (:func:`_run_starts`), others sorted."""
    import pandas as pd

    point = np.asarray(point)
    starts = _run_starts(point)
    if starts is not None:
        first_row = np.flatnonzero(starts)
        return np.cumsum(starts) - 1, point[first_row], first_row
    codes, uniques = pd.factorize(point, sort=True)
    _, first_row = np.unique(codes, return_index=True)
    return codes, np.asarray(uniques), first_row


def _run_starts(keys: np.ndarray) -> np.ndarray | None:
    """For keys that never decrease, True where a run of equal keys begins; None for any
    other order (and no keys)."""
    if not keys.size or not bool((keys[1:] >= keys[:-1]).all()):
        return None
    starts = np.empty(keys.size, dtype=bool)
    starts[0] = True
    np.not_equal(keys[1:], keys[:-1], out=starts[1:])
    return starts


def unkept(cols: Mapping[str, np.ndarray], col: str) -> np.ndarray:
    """Column ``col`` of checked capture arrays (of a :class:`CaptureColumns`: converted
    for the caller alone, let go with the caller's reference)."""
    if isinstance(cols, CaptureColumns):
        return cols.unkept(col)
    return np.asarray(cols[col])


def line_spacing_hz(cols: Mapping[str, np.ndarray]) -> np.ndarray:
    """Per row of checked capture arrays, the distance to the nearest other line known at
    the same point and port, Hz (inf when none).

    The other lines are the point's other readings at that port (lines closer than
    :data:`SAME_LINE_HZ` count as the same line) and, at a two-tone point, the tone spacing
    |f_RF2 − f_RF1|: the two output tones and every intermodulation product of the pair sit
    that far from their nearest neighbour.
    """

    point = np.asarray(cols[POINT], dtype=np.int64)
    freq = np.asarray(cols[FREQ], dtype=float)
    port_codes = (factorized(cols, PORT)[0] if PORT in cols
                  else np.zeros(point.size, dtype=np.int64))
    out = np.full(point.size, np.inf)
    rows = np.flatnonzero(np.isfinite(freq))
    if rows.size:
        # the rows in order of point, port and line (Hz, rounded); each distinct line once
        p, q, f = point[rows], port_codes[rows], np.round(freq[rows], 0)
        order = np.lexsort((f, q, p))
        p, q, f = p[order], q[order], f[order]
        group_starts = np.r_[True, (p[1:] != p[:-1]) | (q[1:] != q[:-1])]
        new_line = group_starts | np.r_[True, f[1:] != f[:-1]]
        line_of = np.cumsum(new_line) - 1
        f, group_starts = f[new_line], group_starts[new_line]
        # per line, the nearest other line of its point and port
        same_prev = ~group_starts
        same_next = np.r_[~group_starts[1:], False]
        gap_prev = np.where(same_prev, f - np.r_[np.nan, f[:-1]], np.inf)
        gap_next = np.where(same_next, np.r_[f[1:], np.nan] - f, np.inf)
        out[rows[order]] = np.minimum(gap_prev, gap_next)[line_of]
    rf1 = np.asarray(cols["rf_freq_hz"], dtype=float)
    rf2 = np.asarray(cols.get("rf2_freq_hz", np.full(point.size, np.nan)), dtype=float)
    with np.errstate(invalid="ignore"):
        tones = np.abs(rf2 - rf1)
        tones = np.where(np.isfinite(tones) & (tones >= SAME_LINE_HZ), tones, np.inf)
    return np.fmin(out, tones)


def risk_mask(risks: np.ndarray, name: str) -> np.ndarray:
    """True where the comma-separated risk strings hold ``name`` (None: no prediction)."""
    import pandas as pd

    values = pd.Series(np.asarray(risks, dtype=object), dtype=object)
    padded = "," + values.fillna("").astype(str) + ","
    return padded.str.contains("," + name + ",", regex=False).to_numpy(dtype=bool)


#: Within :func:`point_tables_shared` (None outside it): per table named there (readings
#: and study, :func:`_shared_key`), the capture table it was made of and the table (None:
#: not made yet).
_SHARED_POINT_TABLES: contextvars.ContextVar[
    dict[tuple[object, ...], tuple[object, pd.DataFrame] | None] | None] = \
    contextvars.ContextVar("sweeprig_point_tables", default=None)


def _shared_key(readings: Sequence[str], study: str | Sequence[str] | None
                ) -> tuple[object, ...]:
    return (tuple(readings), study if study is None or isinstance(study, str) else tuple(study))


@contextlib.contextmanager
def point_tables_shared(*tables: tuple[Sequence[str], str | Sequence[str] | None]
                        ) -> Iterator[None]:
    """Within the block, :func:`point_table` of one capture table (the same object) and
    one of ``tables`` (its readings and study, as asked) is made once and given again (a
    copy: its user may add columns); any other table is made each time it is asked. The
    reduction asks for the whole run's ``if`` table twice (the unpowered check and the image
    rejection's reference gain): 0.17 s at 100k points, about 1.7 s at 1M. A table kept is
    held to the block's end, so only those asked again are named (keeping every table a
    reduction made held 66 MiB to its end at 100k points, 49 of them never asked again).
    Only for a block over which the capture table does not change."""
    token = _SHARED_POINT_TABLES.set({_shared_key(r, s): None for r, s in tables})
    try:
        yield
    finally:
        _SHARED_POINT_TABLES.reset(token)


def point_table(
    captures: pd.DataFrame | Mapping[str, np.ndarray],
    readings: Sequence[str] = ("if",),
    *,
    study: str | Sequence[str] | None = None,
    where: str = "captures",
) -> pd.DataFrame:
    """One row per point: its study and conditions, and per reading name ``r`` the columns

    ``r_level_dbm``, ``r_noise_floor_dbm``, ``r_freq_hz``, ``r_overload``, ``r_value``,
    ``r_atten_level_dbm``, ``r_atten_noise_floor_dbm`` (the +10 dB attenuation repeat, NaN
    when none), and ``r_flags``: a flag mask (see :mod:`sweeprig.analysis.figures`) with
    ``missing_reading`` when the point has no such reading, ``in_noise`` when the level is
    within 6 dB of its floor, ``overload``, and the attenuation test's
    ``analyzer_distortion`` / ``atten_carrier_moved`` (the carrier is the ``if`` reading).
    The ``if`` columns are always there (the ``if`` reading is the carrier of the
    attenuation test). Rows are sorted by point index. ``captures`` may also be the arrays
    of :func:`column_arrays` (already checked and filtered; ``study`` is then not applied).
    Within :func:`point_tables_shared`, a table it names made before of the same capture
    table is given again.
    """
    shared = _SHARED_POINT_TABLES.get()
    key = _shared_key(readings, study)
    if shared is None or isinstance(captures, Mapping) or key not in shared:
        return _point_table(captures, readings, study=study, where=where)
    made = shared[key]
    if made is None or made[0] is not captures:
        made = shared[key] = (captures, _point_table(captures, readings, study=study,
                                                     where=where))
    return made[1].copy(deep=False)


def _point_table(
    captures: pd.DataFrame | Mapping[str, np.ndarray],
    readings: Sequence[str],
    *,
    study: str | Sequence[str] | None,
    where: str,
) -> pd.DataFrame:
    import pandas as pd

    cols: Mapping[str, np.ndarray] = (
        dict(captures)
        if isinstance(captures, Mapping)
        else CaptureColumns(captures, where=where, study=study)
    )
    point = cols[POINT]
    codes, uniques, first_row = _point_codes(point)
    n_points = len(uniques)
    table: dict[str, np.ndarray] = {POINT: np.asarray(uniques, dtype=np.int64)}
    table[STUDY] = unkept(cols, STUDY)[first_row]
    for col in CONDITION_COLUMNS:
        table[col] = unkept(cols, col)[first_row]
    if OUTPUT_FREQ in cols:
        table[OUTPUT_FREQ] = np.asarray(unkept(cols, OUTPUT_FREQ), dtype=float)[first_row]
    reading_codes, reading_names = factorized(cols, READING)
    name_to_code = {str(name): i for i, name in enumerate(reading_names)}
    atten = cols[ATTEN_CHECK]
    # the RBW check needs a stored RBW: skip the spacing search on tables without one
    spacing = (line_spacing_hz(cols) if np.isfinite(cols[RBW]).any()
               else np.full(point.size, np.inf))
    wanted = list(dict.fromkeys([CARRIER, *readings]))
    # the columns read at one row a reading and point: held only while the table is made
    level, floor, overload = (unkept(cols, c) for c in (LEVEL, NOISE_FLOOR, OVERLOAD_COL))
    value, risks = unkept(cols, VALUE), unkept(cols, RISKS)
    for name in wanted:
        code = name_to_code.get(name)
        is_name = reading_codes == code if code is not None else np.zeros(codes.size, bool)
        for repeat in (False, True):
            rows = np.flatnonzero(is_name & (atten == repeat))
            idx = codes[rows]
            last = _last_row_per_code(idx, n_points)
            present = last >= 0
            take = rows[np.where(present, last, 0)] if rows.size else np.zeros_like(last)
            prefix = f"{name}_atten_" if repeat else f"{name}_"
            table[prefix + "level_dbm"] = np.where(present, level[take], np.nan)
            table[prefix + "noise_floor_dbm"] = np.where(present, floor[take], np.nan)
            table[prefix + "overload"] = present & overload[take]
            if not repeat:
                table[prefix + "present"] = present
                table[prefix + "freq_hz"] = np.where(present, cols[FREQ][take], np.nan)
                table[prefix + "value"] = np.where(present, value[take], np.nan)
                table[prefix + "rbw_hz"] = np.where(present, cols[RBW][take], np.nan)
                table[prefix + "spacing_hz"] = np.where(present, spacing[take], np.inf)
                table[prefix + "risks"] = np.where(present, risks[take], None)
    for name in wanted:
        table[f"{name}_flags"] = reading_flags(table, name)
    return pd.DataFrame(table)


def point_levels(captures: pd.DataFrame, readings: Sequence[str], *,
                 study: Sequence[str]) -> pd.DataFrame:
    """The part of :func:`point_table` a plot of every point needs, and nothing more: one
    row per point of ``study`` that has any of ``readings`` (sorted by point index), its
    point index, study and conditions (:data:`CONDITION_COLUMNS`), and per reading ``r``
    ``r_present`` and ``r_level_dbm`` (its last reading that is not an attenuation repeat,
    as :func:`point_table` takes it; NaN when none). No flags, floors or frequencies: a
    large run's whole point table is several times the captures it comes from, this a
    fraction of them. ``captures``: a run's capture table (checked already)."""
    import pandas as pd

    names = list(dict.fromkeys(readings))
    reading = captures[READING]
    is_reading = {name: (reading == name).to_numpy(dtype=bool) for name in names}
    wanted = np.zeros(len(captures), dtype=bool)
    for rows in is_reading.values():
        wanted |= rows
    wanted &= captures[STUDY].isin(list(study)).to_numpy(dtype=bool)
    wanted &= ~captures[ATTEN_CHECK].fillna(False).to_numpy(dtype=bool)
    at = np.flatnonzero(wanted)
    codes, uniques = pd.factorize(captures[POINT].to_numpy(dtype=np.int64)[at], sort=True)
    n_points = len(uniques)
    _, first = np.unique(codes, return_index=True)
    table: dict[str, np.ndarray] = {POINT: np.asarray(uniques, dtype=np.int64)}
    table[STUDY] = captures[STUDY].iloc[at[first]].to_numpy(dtype=object)
    for col in CONDITION_COLUMNS:
        table[col] = captures[col].to_numpy(dtype=float, na_value=np.nan)[at[first]]
    levels = captures[LEVEL].to_numpy(dtype=float, na_value=np.nan)
    for name in names:
        mine = np.flatnonzero(is_reading[name][at])
        last = _last_row_per_code(codes[mine], n_points)
        present = last >= 0
        take = at[mine[np.where(present, last, 0)]] if mine.size else np.zeros_like(last)
        table[f"{name}_present"] = present
        table[f"{name}_level_dbm"] = np.where(present, levels[take], np.nan)
    return pd.DataFrame(table)


def reading_flags(table: Mapping[str, np.ndarray], name: str) -> np.ndarray:
    """The flag mask of reading ``name`` at every point of a point table (see point_table).

    Besides the measured tests, the planner's predicted risks (``{name}_risks``; none where
    the store holds no prediction) raise: ``analyzer_compression``; ``analyzer_distortion``
    where no attenuation repeat was read (a repeat decides it by measurement);
    ``source_harmonic``; ``rbw_merged`` (also from the stored RBW against the spacing to the
    nearest known line, :data:`MERGE_SPACING_RBW`); ``noise_limited`` where ``noise`` or
    ``reciprocal_mixing`` is predicted and the floor is unknown (NaN), so the measurement
    could neither confirm nor clear it.
    """
    level = np.asarray(table[f"{name}_level_dbm"], dtype=float)
    floor = np.asarray(table[f"{name}_noise_floor_dbm"], dtype=float)
    present = np.asarray(table[f"{name}_present"], dtype=bool)
    flags = mask_where(~present, MISSING_READING)
    flags |= mask_where(validity.in_noise(level, floor), IN_NOISE)
    flags |= mask_where(np.asarray(table[f"{name}_overload"], dtype=bool), OVERLOAD)
    distortion, carrier_moved = validity.attenuation_test(
        level,
        np.asarray(table[f"{name}_atten_level_dbm"], dtype=float),
        np.asarray(table[f"{CARRIER}_level_dbm"], dtype=float),
        np.asarray(table[f"{CARRIER}_atten_level_dbm"], dtype=float),
        product_floor_dbm=floor,
        product_atten_floor_dbm=np.asarray(table[f"{name}_atten_noise_floor_dbm"], dtype=float),
    )
    repeat_overload = np.asarray(table[f"{name}_atten_overload"], dtype=bool)
    if name == CARRIER:
        # The carrier's own test: it moved, so the analyzer is compressing on it.
        flags |= mask_where(carrier_moved & ~repeat_overload, ATTEN_CARRIER_MOVED)
    else:
        flags |= mask_where(distortion & ~repeat_overload, ANALYZER_DISTORTION)
        tested = np.isfinite(np.asarray(table[f"{name}_atten_level_dbm"], dtype=float))
        flags |= mask_where(carrier_moved & tested, ATTEN_CARRIER_MOVED)
    return flags | _predicted_flags(table, name, present, floor)


def _predicted_flags(
    table: Mapping[str, np.ndarray], name: str, present: np.ndarray, floor: np.ndarray
) -> np.ndarray:
    import pandas as pd

    flags = np.zeros(present.shape, dtype=np.int64)
    rbw = np.asarray(table.get(f"{name}_rbw_hz", np.full(present.shape, np.nan)), dtype=float)
    spacing = np.asarray(table.get(f"{name}_spacing_hz", np.full(present.shape, np.inf)),
                         dtype=float)
    with np.errstate(invalid="ignore"):
        merged = present & np.isfinite(rbw) & (spacing < MERGE_SPACING_RBW * rbw)
    risks = table.get(f"{name}_risks")
    if risks is not None and pd.notna(np.asarray(risks, dtype=object)).any():
        risks = np.asarray(risks, dtype=object)

        def risk(what: str) -> np.ndarray:
            return present & risk_mask(risks, what)

        tested = np.isfinite(np.asarray(table[f"{name}_atten_level_dbm"], dtype=float))
        flags |= mask_where(risk("analyzer_compression"), ANALYZER_COMPRESSION)
        flags |= mask_where(risk("analyzer_distortion") & ~tested, ANALYZER_DISTORTION)
        flags |= mask_where(risk("source_harmonic"), SOURCE_HARMONIC)
        merged |= risk("rbw_merged")
        noisy = risk("noise") | risk("reciprocal_mixing")
        flags |= mask_where(noisy & ~np.isfinite(floor), NOISE_LIMITED)
        # measured by the windowed peak search (extra_json search_flags, read with the risks)
        flags |= mask_where(risk(FREQUENCY_OFFSET), FREQUENCY_OFFSET)
        flags |= mask_where(risk(WINDOW_EDGE), WINDOW_EDGE)
        # measured by the analyzer's status at the reading (extra_json status_flags)
        flags |= mask_where(risk(ANALYZER_UNCALIBRATED), ANALYZER_UNCALIBRATED)
        # nothing in the search window stood out of the noise: the level is a bound
        flags |= mask_where(risk("not_found"), IN_NOISE)
    return flags | mask_where(merged, RBW_MERGED)


def conditions_records(
    table: pd.DataFrame | Mapping[str, np.ndarray],
    rows: np.ndarray,
    keys: Sequence[str] = (STUDY, *CONDITION_COLUMNS),
) -> list[Mapping[str, float | str]]:
    """Read-only condition mappings for the given rows: ``{key: value}``, NaN values left out.

    Each mapping is a :class:`~sweeprig.analysis.condition_rows.ConditionRow`: 48 bytes
    that read their values from columns shared by every row of the call (few distinct
    floats or texts as codes): a large run's reduction makes hundreds of thousands of them,
    most of their values one of a few temperatures, drives and frequencies.

    A table holding ``output_freq_hz`` (a point table of a capture table that holds it) adds
    it last to every mapping that holds both the LO and the RF frequency: the mapping
    :func:`~sweeprig.analysis.direction.with_output_frequency` would make of it, made once
    (a large run's reduction otherwise copies every mapping to add it).
    """
    import pandas as pd

    if OUTPUT_FREQ in table and OUTPUT_FREQ not in keys \
            and "lo_freq_hz" in keys and "rf_freq_hz" in keys:
        keys = (*keys, OUTPUT_FREQ)
    rows = np.asarray(rows, dtype=np.int64)
    kept: list[tuple[str, np.ndarray]] = []
    absent: list[np.ndarray] = []  # per kept key: its rows without a value
    for key in keys:
        values = np.asarray(table[key])[rows]
        missing = np.asarray(pd.isna(values), dtype=bool)
        if rows.size and missing.all():
            continue  # e.g. rf2_* of single-tone points
        kept.append((key, values))
        absent.append(missing)
    names = [k for k, _ in kept]
    columns = [_held_column(values) for _, values in kept]
    if not any(a.any() for a in absent):
        return _noted(ConditionColumns(names, columns).rows(range(rows.size)), names, columns,
                      absent)
    # rows that lack some keys: each set of present keys (a few per table) reads its own
    # names of the same columns
    pattern = np.zeros(rows.size, dtype=np.int64)
    for bit, missing in enumerate(absent):
        pattern |= missing.astype(np.int64) << bit
    out: list[Mapping[str, float | str]] = [None] * rows.size  # type: ignore[list-item]
    for code in np.unique(pattern).tolist():
        at = np.flatnonzero(pattern == code).tolist()
        present = [j for j in range(len(names)) if not code >> j & 1]
        made = ConditionColumns([names[j] for j in present],
                                [columns[j] for j in present]).rows(at)
        for i, mapping in zip(at, made, strict=True):
            out[i] = mapping
    return _noted(out, names, columns, absent)


def _held_column(values: np.ndarray) -> Column:
    """A conditions column as its rows' mappings read it: few distinct floats (bit for bit)
    or texts as their codes, anything else as it is."""
    if values.size >= 64:
        coded = float_codes(values) if values.dtype == np.float64 else \
            text_codes(values) if values.dtype == object else None
        if coded is not None:
            return coded
    return values, None


@dataclass(frozen=True, eq=False)
class MadeConditions:
    """What one :func:`conditions_records` call made, and of what: its ``mappings`` (held
    here, so no other object takes one of their identities while this is held), ``names``
    (the keys it kept, in their order), and per name the rows' values as taken from the
    table, before any was left out (:meth:`values`), and where a row's mapping lacks the
    key, its value missing (:meth:`absent`). A run's figures hold these mappings; their
    columns are read back from here instead of from each mapping
    (:meth:`~sweeprig.analysis.figure_table.RunConditions.of`)."""

    mappings: list[Mapping[str, float | str]]
    names: tuple[str, ...]
    #: per name: the values, or (few distinct floats or texts) the distinct values and
    #: each row's code among them
    columns: tuple[tuple[np.ndarray, np.ndarray | None], ...]
    #: per name: True where the row lacks it (None: no row does)
    lacking: tuple[np.ndarray | None, ...]

    def values(self, j: int, rows: np.ndarray) -> np.ndarray:
        """The values of name ``j`` at ``rows`` (as taken from the table)."""
        values, codes = self.columns[j]
        return values[rows] if codes is None else values[codes[rows]]

    def absent(self, j: int, rows: np.ndarray) -> np.ndarray:
        """True where the mapping of each of ``rows`` lacks name ``j``."""
        lacking = self.lacking[j]
        return np.zeros(rows.size, dtype=bool) if lacking is None else lacking[rows]

    def kinds(self) -> list[str]:
        """Per name, the kind of its values (NumPy's letter: ``f``, ``i``, ``O``...)."""
        return [values.dtype.kind for values, _ in self.columns]


#: What :func:`conditions_records` made within :func:`conditions_noted` (None outside it).
_MADE_CONDITIONS: contextvars.ContextVar[list[MadeConditions] | None] = \
    contextvars.ContextVar("sweeprig_made_conditions", default=None)


@contextlib.contextmanager
def conditions_noted() -> Iterator[list[MadeConditions]]:
    """Within the block, every :func:`conditions_records` call adds what it made to the
    list given (:class:`MadeConditions`: which holds its mappings alive)."""
    made: list[MadeConditions] = []
    token = _MADE_CONDITIONS.set(made)
    try:
        yield made
    finally:
        _MADE_CONDITIONS.reset(token)


def _noted(out: list[Mapping[str, float | str]], names: list[str], columns: list[Column],
           absent: list[np.ndarray]) -> list[Mapping[str, float | str]]:
    """``out``, noted within :func:`conditions_noted` with the columns its rows read."""
    noting = _MADE_CONDITIONS.get()
    if noting is not None:
        noting.append(MadeConditions(out, tuple(names), tuple(columns),
                                     tuple(a if a.any() else None for a in absent)))
    return out


def float_codes(values: np.ndarray) -> tuple[np.ndarray, np.ndarray] | None:
    """A float64 array of at least 64 values, at most half of them distinct bit for bit,
    as its distinct values (by bits: 0.0 and -0.0 apart) and each value's index among them
    (the smallest unsigned integer type that holds it); None for any other array."""
    if values.size < 64 or values.dtype != np.float64:
        return None
    distinct, inverse = np.unique(values.view(np.uint64), return_inverse=True)
    if distinct.size * 2 > values.size:
        return None
    return (distinct.view(np.float64),
            inverse.ravel().astype(np.min_scalar_type(distinct.size - 1)))


def text_codes(values: np.ndarray) -> tuple[np.ndarray, np.ndarray] | None:
    """An object array whose every element is a str, as its distinct texts (an object array,
    in order of first appearance) and each element's index among them (the smallest
    unsigned integer type that holds it); None for any other array."""
    import pandas as pd

    if values.dtype != object:
        return None
    codes, distinct = pd.factorize(values)
    if (codes < 0).any() or set(map(type, distinct.tolist())) - {str}:
        return None
    return (np.asarray(distinct, dtype=object),
            codes.astype(np.min_scalar_type(max(distinct.size - 1, 0))))


def has_bit(mask: np.ndarray, name: str) -> np.ndarray:
    """True where flag ``name`` is set in the flag-mask array ``mask``."""
    return (np.asarray(mask, dtype=np.int64) & flag_bit(name)) != 0


def _last_row_per_code(codes: np.ndarray, n_codes: int) -> np.ndarray:
    """For each code 0..n_codes-1, the position of its last occurrence in ``codes`` (or -1)."""
    out = np.full(n_codes, -1, dtype=np.int64)
    if codes.size:
        distinct, last = last_rows(codes)
        out[distinct] = last
    return out


def last_rows(keys: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The distinct values of ``keys`` (ascending) and the position of the last occurrence
    of each: in one pass when ``keys`` never decrease (a loaded capture table's points, and
    codes taken from them in order: :func:`_run_starts`), else by ``numpy.unique``."""
    keys = np.asarray(keys)
    starts = _run_starts(keys)
    if starts is not None:
        last = np.flatnonzero(np.append(starts[1:], True))
        return keys[last], last
    distinct, first_in_reversed = np.unique(keys[::-1], return_index=True)
    return distinct, keys.size - 1 - first_in_reversed
