"""From the run store to a capture table: the thin adapter between the two vocabularies.

The engine stores readings under the names the plan gives them (``docs/sequence-format.md``,
section Readings); the analysis functions take a capture table whose ``reading`` column uses
their own short vocabulary (:mod:`sweeprig.analysis.captures`). The mapping, decided by the
reading's ``kind`` and the suffix of its name (so a reading renamed with ``name = "..."`` in
the sequence maps the same way):

==========================  ==========================  ====================================
store ``kind`` / name        capture ``reading``          notes
==========================  ==========================  ====================================
``wanted``                   ``if``                      the wanted output (tone 1)
``wanted`` ``*.tone2``       ``if_tone2``                tone 2's output (the two-tone gain
                                                         drop check)
``lo_at_if``                 ``lo_at_if``
``lo_at_rf``                 ``lo_at_rf``
``rf_at_if``                 ``rf_at_if``
``image``                    ``image``                   RF retuned to 2·f_LO − f_RF
``im3`` ``*.lower``          ``im3_low``                 2f1 − f2, translated to the output
``im3`` ``*.upper``          ``im3_high``                2f2 − f1, translated
``im2`` ``*.diff``           ``im2_low``                 f2 − f1
``im2`` ``*.sum``            ``im2_high``                f1 + f2
``mxn`` ``*.<m>x<n>``        ``spur``                    with ``m``, ``n`` (LO, RF multipliers)
``mxn`` wanted product       ``if`` or left out          ``if`` only where the point has no
                                                         ``wanted`` reading
``supply_current``           ``supply_current``          ``value`` in A from ``extra_json``
                                                         ``current_a`` (else the point's
                                                         ``supply_current_a``)
``input_power``              (left out)                  power-meter check of the RF drive
==========================  ==========================  ====================================

A reading whose ``attenuation_check`` is true, or whose name ends in ``.att10``, is the
+10 dB attenuation repeat of the reading it names (``atten_check`` True in the capture).

Columns taken over as they are: the point's settings (``temperature_c`` ... ``rf2_power_dbm``,
set points at the DUT port planes), and per reading ``freq_hz``, ``level_dbm`` and
``noise_floor_dbm`` (already referred to the DUT port planes by the engine), ``overload``
and ``attenuation_db``. Kept for tracing a figure back to the store: ``reading_no``,
``source_name`` (the store's reading name), ``kind``, ``port``, ``rbw_hz``, ``averages``
(sweeps averaged, NaN where not stored; the noise scatter of the uncertainty budgets) and
the point's ``probe_temperature_c``. ``risks``: the planner's predicted risks of the reading
(``extra_json`` ``risks``, joined by commas, ``""`` for none predicted), None where the
store holds no prediction (a store written before predictions: never read as "no risk");
what was measured rides with them: the peak search's flags, a ``supply_current``
reading's ``supply_limited`` (``extra_json`` ``supply_flags``) and the analyzer's
``analyzer_uncalibrated`` (``extra_json`` ``status_flags``).
The wanted product's (m, n) is found from the ``wanted`` readings' stored multipliers
((1, −1) when there are none).
"""

from __future__ import annotations

import json
import math
from collections.abc import Sequence
from typing import TYPE_CHECKING

import numpy as np

from sweeprig.analysis.captures import CONDITION_COLUMNS
from sweeprig.errors import StoreError

if TYPE_CHECKING:
    import pandas as pd

    from sweeprig.store.base import RunStore

#: The store's reading kinds that map one-to-one onto a capture reading.
DIRECT_KINDS: dict[str, str] = {
    "wanted": "if",
    "lo_at_if": "lo_at_if",
    "lo_at_rf": "lo_at_rf",
    "rf_at_if": "rf_at_if",
    "image": "image",
    "supply_current": "supply_current",
    "sideband": "sideband",
}
#: Two-tone products: (store kind, name suffix) → capture reading.
PRODUCT_SUFFIXES: dict[tuple[str, str], str] = {
    ("im3", "lower"): "im3_low",
    ("im3", "upper"): "im3_high",
    ("im2", "diff"): "im2_low",
    ("im2", "sum"): "im2_high",
}
REPEAT_SUFFIX = ".att10"
TONE2_SUFFIX = ".tone2"
TONE2_READING = "if_tone2"
DEFAULT_WANTED_ORDERS = (1, -1)

#: Columns of the capture table this module builds, in order.
CAPTURE_COLUMNS: tuple[str, ...] = (
    "point", "study", *CONDITION_COLUMNS, "reading", "freq_hz", "level_dbm", "noise_floor_dbm",
    "m", "n", "overload", "atten_check", "attenuation_db", "value", "reading_no", "source_name",
    "kind", "port", "rbw_hz", "averages", "probe_temperature_c", "risks",
    "output_freq_hz",
)

#: The capture table's text columns: each holds a few distinct texts (studies, reading
#: names, kinds, ports) repeated over every reading, so they are categoricals (their codes,
#: int8, instead of a text per row: 40 MB less at 100k points). Written out as text.
TEXT_CAPTURE_COLUMNS: tuple[str, ...] = ("study", "reading", "source_name", "kind", "port")

_POINT_NEEDS = ("point_index", "study", *CONDITION_COLUMNS)
_READING_NEEDS = ("point_index", "reading_no", "name", "kind", "port", "freq_hz", "level_dbm",
                  "noise_floor_dbm", "m", "n", "attenuation_db", "overload")


def load_captures(store: RunStore, run_id: int) -> pd.DataFrame:
    """The capture table of run ``run_id`` (see the module docstring).

    Works on finished and partial runs alike: it holds whatever points are stored.
    Raises :class:`~sweeprig.errors.StoreError` when there is no such run.
    """
    store.run(run_id)  # a clear StoreError for an unknown id
    return captures_from_frames(store.points_frame(run_id), store.readings_frame(run_id))


def captures_from_frames(
    points: pd.DataFrame,
    readings: pd.DataFrame,
    *,
    wanted_orders: tuple[int, int] | None = None,
) -> pd.DataFrame:
    """Build the capture table from the store's points and readings frames.

    ``wanted_orders``: (m, n) of the wanted product among ``mxn`` readings; None finds it
    from the ``wanted`` readings. Rows come out ordered by point, then reading number.
    """
    import pandas as pd

    _require(points, _POINT_NEEDS, "points")
    _require(readings, _READING_NEEDS, "readings")
    if readings.empty:
        return _empty()
    # A run repeats a few reading names and kinds over every point: the text work is done
    # once per distinct name or kind and spread by its code.
    name_code, names = pd.factorize(readings["name"].astype(str))
    kind_code, kinds = pd.factorize(readings["kind"].astype(str))
    distinct = pd.Series(np.asarray(names, dtype=object), dtype=object)
    check = readings.get("attenuation_check")
    repeated_name = distinct.str.endswith(REPEAT_SUFFIX).to_numpy(dtype=bool)
    repeat = repeated_name[name_code]
    if check is not None:
        repeat |= check.fillna(False).to_numpy(dtype=bool)
    base = distinct.where(~repeated_name, distinct.str[: -len(REPEAT_SUFFIX)])
    suffix = base.str.rsplit(".", n=1).str[-1].to_numpy(dtype=object)
    m = pd.to_numeric(readings["m"], errors="coerce").to_numpy(dtype=float, na_value=np.nan)
    n = pd.to_numeric(readings["n"], errors="coerce").to_numpy(dtype=float, na_value=np.nan)
    kind_texts = np.asarray(kinds, dtype=object)

    def kind_is(text: str) -> np.ndarray:
        return (kind_texts == text)[kind_code]

    wanted = kind_is("wanted")
    tone2 = wanted & base.str.endswith(TONE2_SUFFIX).to_numpy(dtype=bool)[name_code]
    if wanted_orders is None:
        wanted_orders = _wanted_orders(wanted, tone2, m, n)
    # each row's reading name as a code into ``vocabulary`` (-1: none: the row is left out),
    # the later rules overriding the earlier ones
    vocabulary = list(dict.fromkeys([*DIRECT_KINDS.values(), TONE2_READING,
                                     *PRODUCT_SUFFIXES.values(), "spur", "if"]))
    code_of = {text: k for k, text in enumerate(vocabulary)}
    direct = np.array([code_of[DIRECT_KINDS[k]] if k in DIRECT_KINDS else -1
                       for k in kind_texts.tolist()], dtype=np.int64)
    reading = direct[kind_code]
    reading[tone2] = code_of[TONE2_READING]
    for (product_kind, end), short in PRODUCT_SUFFIXES.items():
        ends = (suffix == end)[name_code]
        reading[kind_is(product_kind) & ends] = code_of[short]
    name = np.asarray(names, dtype=object)[name_code]
    kind = kind_texts[kind_code]
    mxn = kind_is("mxn")
    is_wanted_product = mxn & (m == wanted_orders[0]) & (n == wanted_orders[1])
    reading[mxn & ~is_wanted_product] = code_of["spur"]
    # The mxn reading of the wanted product stands in for "if" only where the point has no
    # wanted reading of its own (same repeat status).
    key = pd.MultiIndex.from_arrays([readings["point_index"].to_numpy(), repeat])
    own = key[reading == code_of["if"]]
    stand_in = is_wanted_product & ~key.isin(own)
    reading[stand_in] = code_of["if"]
    keep = reading >= 0
    kept = reading[keep]
    spur = kept == code_of["spur"]

    rows = readings[keep]
    out = pd.DataFrame({
        "point": rows["point_index"].to_numpy(dtype=np.int64),
        "reading": _coded_text_column(kept, vocabulary),
        "freq_hz": rows["freq_hz"].to_numpy(dtype=float, na_value=np.nan),
        "level_dbm": rows["level_dbm"].to_numpy(dtype=float, na_value=np.nan),
        "noise_floor_dbm": rows["noise_floor_dbm"].to_numpy(dtype=float, na_value=np.nan),
        "m": np.where(spur, m[keep], np.nan),
        "n": np.where(spur, n[keep], np.nan),
        "overload": rows["overload"].fillna(False).to_numpy(dtype=bool),
        "atten_check": repeat[keep],
        "attenuation_db": rows["attenuation_db"].to_numpy(dtype=float, na_value=np.nan),
        "reading_no": rows["reading_no"].to_numpy(dtype=np.int64),
        "source_name": _text_column(name[keep]),
        "kind": _text_column(kind[keep]),
        "port": _text_column(rows["port"].astype(str).to_numpy(dtype=object)),
        "rbw_hz": (rows["rbw_hz"].to_numpy(dtype=float, na_value=np.nan)
                   if "rbw_hz" in rows else np.full(len(rows), np.nan)),
        "averages": (pd.to_numeric(rows["averages"], errors="coerce")
                     .to_numpy(dtype=float, na_value=np.nan)
                     if "averages" in rows else np.full(len(rows), np.nan)),
    })
    settings = points.set_index("point_index")
    missing = ~out["point"].isin(settings.index)
    if missing.any():
        first = int(out.loc[missing, "point"].iloc[0])
        raise StoreError(
            f"reading of point {first} has no point row",
            where="run store",
            fix="the store is damaged; export what is left with `sweeprig export`",
        )
    at = settings.index.get_indexer(out["point"].to_numpy())
    out.insert(1, "study", _text_column(settings["study"].to_numpy(dtype=object)[at]))
    for i, col in enumerate(CONDITION_COLUMNS):
        out.insert(2 + i, col, settings[col].to_numpy(dtype=float, na_value=np.nan)[at])
    probe = (settings["probe_temperature_c"].to_numpy(dtype=float, na_value=np.nan)[at]
             if "probe_temperature_c" in settings else np.full(len(out), np.nan))
    out["probe_temperature_c"] = probe
    out.insert(list(out.columns).index("reading_no"), "value",
               _supply_values(rows, out, settings, at))
    out["risks"] = (_risks_column(rows["extra_json"]) if "extra_json" in rows
                    else np.full(len(out), None, dtype=object))
    m_out, n_out = wanted_orders if wanted_orders is not None else DEFAULT_WANTED_ORDERS
    out["output_freq_hz"] = np.abs(m_out * out["lo_freq_hz"].to_numpy(dtype=float)
                                   + n_out * out["rf_freq_hz"].to_numpy(dtype=float))
    point_no = out["point"].to_numpy()
    reading_no = out["reading_no"].to_numpy()
    step = np.diff(point_no)
    if not np.all((step > 0) | ((step == 0) & (np.diff(reading_no) >= 0))):
        # (the store reads them in this order: a large run's table is not copied for it)
        out = out.sort_values(["point", "reading_no"], kind="stable")
    return out[list(CAPTURE_COLUMNS)].reset_index(drop=True)


def _coded_text_column(codes: np.ndarray, vocabulary: Sequence[str]) -> pd.Categorical:
    """:func:`_text_column` of texts given as codes into ``vocabulary`` (each ``>= 0``):
    the same categorical (the texts used, sorted), without a text per row."""
    import pandas as pd

    if not codes.size:
        return _text_column(np.empty(0, dtype=object))
    used = np.unique(codes)
    texts = np.asarray(vocabulary, dtype=object)[used]
    order = np.argsort(texts, kind="stable")
    rank = np.full(len(vocabulary), -1, dtype=np.int64)
    rank[used[order]] = np.arange(used.size)
    return pd.Categorical.from_codes(rank[codes], categories=list(texts[order]))


def _text_column(texts: np.ndarray) -> pd.Categorical:
    """A text column of the capture table (:data:`TEXT_CAPTURE_COLUMNS`) as a categorical:
    its distinct texts sorted, each row their code."""
    import pandas as pd

    codes, distinct = pd.factorize(texts, sort=True)
    return pd.Categorical.from_codes(codes, categories=distinct)


def captures_as_written(captures: pd.DataFrame) -> pd.DataFrame:
    """``captures`` (the whole table or a slice) as its files hold it: the categorical
    text columns (:data:`TEXT_CAPTURE_COLUMNS`) as text, so ``captures.csv`` and
    ``captures.parquet`` keep plain string columns. A module-level function: the report's
    helper process applies it to each slice it writes."""
    import pandas as pd

    texts = {c: captures[c].astype("str") for c in TEXT_CAPTURE_COLUMNS
             if c in captures and isinstance(captures[c].dtype, pd.CategoricalDtype)}
    return captures.assign(**texts) if texts else captures


def _supply_values(
    rows: pd.DataFrame, out: pd.DataFrame, settings: pd.DataFrame, at: np.ndarray
) -> np.ndarray:
    """``value`` column: supply current in A for ``supply_current`` rows, NaN elsewhere."""
    value = np.full(len(out), np.nan)
    # (compared as the column holds it: a categorical's codes, no text per row made)
    supply = np.flatnonzero((out["reading"] == "supply_current").to_numpy(dtype=bool))
    if supply.size == 0:
        return value
    # (only the supply rows' texts made Python strings: a large run has millions of others)
    extras = (rows["extra_json"].iloc[supply].to_numpy() if "extra_json" in rows
              else [None] * supply.size)
    fallback = (settings["supply_current_a"].to_numpy(dtype=float, na_value=np.nan)[at][supply]
                if "supply_current_a" in settings else np.full(supply.size, np.nan))
    # a supply's readings repeat (its current is read to a resolution): each text read once
    read: dict[object, float] = {}
    for k, (text, spare) in enumerate(zip(extras, fallback.tolist(), strict=True)):
        current = read.get(text) if isinstance(text, str) else None
        if current is None:
            current = _current_from_extra(text, math.nan)
            if isinstance(text, str):
                read[text] = current
        value[supply[k]] = spare if math.isnan(current) else current
    return value


#: The texts an ``extra_json`` holding any of the risk column's sources contains.
_RISK_SOURCES = ('"risks"', '"search', '"supply_flags"', '"status_flags"')


def _risks_column(extras: pd.Series) -> np.ndarray:
    """``risks`` column from the readings' ``extra_json`` (see the module docstring). Only
    the texts that name one of its sources (found by the column's own string search: a
    large run's texts are not all made Python strings) are read, each distinct one once."""
    out = np.full(len(extras), None, dtype=object)
    named = np.zeros(len(extras), dtype=bool)
    for source in _RISK_SOURCES:
        try:
            found = extras.str.contains(source, regex=False)
        except AttributeError:  # (a column without a single text: nothing to read)
            return out
        named |= found.fillna(False).to_numpy(dtype=bool)
    rows = np.flatnonzero(named)
    cache: dict[str, str | None] = {}
    for i, text in zip(rows.tolist(), extras.iloc[rows].tolist(), strict=True):
        if not isinstance(text, str):
            continue
        if text not in cache:
            cache[text] = _risks_from_extra(text)
        out[i] = cache[text]
    return out


def _risks_from_extra(text: str) -> str | None:
    try:
        extra = json.loads(text)
        risks = extra.get("risks")
        # the peak search's measured flags ride with the predicted risks into the masks; a
        # product it did not find is a bound (``not_found``: in the noise)
        searched = extra.get("search_flags")
        search = extra.get("search")
        if isinstance(search, dict) and search.get("found") is False:
            searched = [*(searched if isinstance(searched, list | tuple) else []),
                        "not_found"]
        # measured at a supply reading (the runner: the part below its stated supply), and
        # the instrument's own status at the reading (the analyzer's uncalibrated flag)
        for key in ("supply_flags", "status_flags"):
            measured = extra.get(key)
            if isinstance(measured, list | tuple):
                searched = [*(searched if isinstance(searched, list | tuple) else []),
                            *measured]
    except (ValueError, AttributeError):
        return None
    if not isinstance(risks, list | tuple):
        if not isinstance(searched, list | tuple):
            return None
        risks = []
    if isinstance(searched, list | tuple):
        risks = [*risks, *searched]
    return ",".join(sorted({str(r) for r in risks if isinstance(r, str) and r}))


def _current_from_extra(text: object, fallback: float) -> float:
    if isinstance(text, str) and text:
        try:
            current = json.loads(text).get("current_a")
        except (ValueError, AttributeError):
            current = None
        if isinstance(current, int | float) and not isinstance(current, bool) \
                and math.isfinite(current):
            return float(current)
    return fallback


def _wanted_orders(
    wanted: np.ndarray, tone2: np.ndarray, m: np.ndarray, n: np.ndarray
) -> tuple[int, int]:
    """The most common stored (m, n) of tone-1 ``wanted`` readings; (1, −1) if none."""
    import pandas as pd

    rows = wanted & ~tone2 & np.isfinite(m) & np.isfinite(n)
    if not rows.any():
        return DEFAULT_WANTED_ORDERS
    pairs = pd.Series(list(zip(m[rows].astype(int).tolist(), n[rows].astype(int).tolist(),
                               strict=True)))
    top = pairs.value_counts().index[0]
    return int(top[0]), int(top[1])


def _require(frame: pd.DataFrame, columns: tuple[str, ...], what: str) -> None:
    missing = [c for c in columns if c not in frame.columns]
    if missing:
        raise StoreError(
            f"the {what} table has no column {', '.join(repr(c) for c in missing)}",
            where=f"run store {what}",
            fix="read the tables with SqliteRunStore.points_frame / readings_frame",
        )


def _empty() -> pd.DataFrame:
    import pandas as pd

    frame = pd.DataFrame({c: pd.Series(dtype=float) for c in CAPTURE_COLUMNS})
    for col in ("study", "reading", "source_name", "kind", "port", "risks"):
        frame[col] = frame[col].astype(object)
    for col in ("point", "reading_no"):
        frame[col] = frame[col].astype(np.int64)
    for col in ("overload", "atten_check"):
        frame[col] = frame[col].astype(bool)
    return frame
