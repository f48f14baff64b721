"""The figures as data: summary rows, the figures JSON, and tidy CSV/Parquet tables.

* :func:`summary_rows` — what a report shows at a glance: one row per headline figure and
  group of conditions (study, temperature, supply), the worst figure of the group against
  its limit, the verdict of the group, and the validity flags met in it.
* :func:`figures_document` — the run, its limits, judgements, verdict and summary
  (``figures.json``, format 4), naming the tables beside it that hold the figures and their
  budgets; :func:`read_figures_document` reads it back (formats 2 and 3 too).
* :func:`figures_frame` / :func:`write_tables` — every figure with its value, bound, unit,
  conditions, flags, verdict, budget number and the run-store point indices behind it, and
  the raw captures, as tidy tables (``figures.csv``/``.parquet``, ``captures.csv``/
  ``.parquet``); the budgets' shared parts and lines (``budgets.csv``,
  ``budget-terms.csv``) and the figure table's budget columns come from
  :mod:`sweeprig.report.budget_tables`.

Also the text formatting shared by the HTML and terminal reports (values with units,
conditions, flag badges and their explanations).
"""

from __future__ import annotations

import contextlib
import functools
import json
import math
import re
from collections.abc import Iterable, Iterator, Mapping, Sequence
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path
from types import MappingProxyType
from typing import Any

import numpy as np
import pandas as pd

from sweeprig import __version__
from sweeprig.analysis.figure_groups import HeldGroup
from sweeprig.analysis.figures import (
    FIGURE_CATALOGUE,
    FLAG_MEANINGS,
    FLAGS,
    SUSPECT_FLAGS,
    Figure,
    collector_paused,
)
from sweeprig.analysis.judged_blocks import VERDICT_NAMES, JudgedBlock, JudgedGroup
from sweeprig.analysis.limits import Limit
from sweeprig.analysis.reduce import RunFigures
from sweeprig.analysis.uncertainty import BUDGET_METHOD, COVERAGE_FACTOR, uncertainty_text
from sweeprig.errors import StoreError
from sweeprig.report.budget_tables import (
    BUDGET_COLUMNS,
    BUDGET_FIGURE_COLUMNS,
    BUDGET_TERM_COLUMNS,
    BUDGET_TERMS_FILE,
    BUDGETS_FILE,
    BudgetEntries,
    FigureBudgets,
    budget_columns,
    budget_terms_frame,
    budgets_frame,
    figure_budget_from_row,
    figure_budgets,
    read_budget_tables,
)
from sweeprig.report.fixed_text import (
    arrow_compute,
    comma_joined,
    fixed_texts,
    joined,
    large_text,
)
from sweeprig.report.table_writing import TableJob, TableWriting, write_error
from sweeprig.units import format_frequency

#: Figures shown in the summary, in this order (every other figure is in the JSON and the
#: tables; a figure with a limit is always shown).
HEADLINE_FIGURES: tuple[str, ...] = (
    "conversion_gain", "gain_flatness", "gain_tempco", "small_signal_gain", "input_p1db",
    "output_p1db", "output_psat", "iip3", "oip3", "iip2", "lo_power_for_gain",
    "lo_if_isolation", "lo_rf_isolation", "rf_if_isolation", "image_rejection",
    "supply_current", "spur_dbc",
    "if_rf_isolation", "sideband_suppression", "lo_suppression", "lo_leakage",
)

#: Short labels of the figures as a datasheet prints them.
FIGURE_LABELS: Mapping[str, str] = MappingProxyType({
    "conversion_gain": "Conversion gain",
    "gain_flatness": "Gain flatness",
    "gain_tempco": "Gain temperature coefficient",
    "small_signal_gain": "Small-signal gain",
    "input_p0p1db": "Input P0.1dB",
    "output_p0p1db": "Output P0.1dB",
    "input_p1db": "Input P1dB",
    "output_p1db": "Output P1dB",
    "input_p3db": "Input P3dB",
    "output_p3db": "Output P3dB",
    "output_psat": "Saturated output",
    "iip3": "IIP3",
    "oip3": "OIP3",
    "iip2": "IIP2",
    "lo_power_for_gain": "LO drive for full gain",
    "lo_if_isolation": "LO→IF isolation",
    "lo_rf_isolation": "LO→RF isolation",
    "rf_if_isolation": "RF→IF isolation",
    "image_rejection": "Image rejection",
    "supply_current": "Supply current",
    "dc_power": "DC power",
    "spur_dbc": "Worst m×n spur",
    "spur_dbm": "m×n spur level",
    "spur_excluded_dbc": "m×n product not counted",
    "noise_figure": "Noise figure",
    "noise_figure_gain": "Gain (Y-factor)",
    # an upconverter's (its input is the IF, its output the RF)
    "if_rf_isolation": "IF→RF isolation",
    "sideband_suppression": "Unwanted-sideband suppression",
    "lo_suppression": "LO (carrier) suppression",
    "lo_leakage": "LO leakage at RF port",
})

#: Figures where a larger value is the better one (the worst is the smallest) ...
HIGHER_IS_BETTER = frozenset({
    "small_signal_gain", "input_p0p1db", "output_p0p1db", "input_p1db", "output_p1db",
    "input_p3db", "output_p3db", "output_psat", "iip3", "oip3", "iip2", "iip3_low", "iip3_high",
    "oip3_low", "oip3_high", "iip2_low", "iip2_high", "lo_if_isolation", "lo_rf_isolation",
    "rf_if_isolation", "image_rejection",
    "if_rf_isolation", "sideband_suppression", "lo_suppression",
})
#: ... and where a smaller one is (the worst is the largest). Others show their range.
LOWER_IS_BETTER = frozenset({
    "gain_flatness", "lo_power_for_gain", "supply_current", "dc_power", "spur_dbc", "spur_dbm",
    "im3_low", "im3_high",
    "lo_leakage", "noise_figure",
})

#: Flag name → (badge text, explanation shown as a tooltip).
#: Short badge text of every flag (its meaning in words is :data:`FLAG_MEANINGS`).
FLAG_BADGES: Mapping[str, str] = MappingProxyType({
    "in_noise": "noise",
    "overload": "overload",
    "analyzer_distortion": "analyzer-made",
    "atten_carrier_moved": "carrier moved",
    "slope_off": "slope",
    "fund_slope_off": "fund. slope",
    "not_compressed": "not compressed",
    "not_saturated": "not saturated",
    "compressed_at_start": "compressed at start",
    "few_points": "few points",
    "no_valid_range": "no valid range",
    "in_compression": "in compression",
    "points_excluded": "points excluded",
    "edge_of_sweep": "sweep edge",
    "missing_reading": "missing",
    "unpowered": "unpowered",
    "analyzer_compression": "analyzer compressing",
    "source_harmonic": "source harmonic",
    "rbw_merged": "RBW merged",
    "noise_limited": "noise-limited",
    "coarse_steps": "coarse steps",
    "supply_current_off": "supply current off",
    "supply_limited": "supply limited",
    "source_unleveled": "source unleveled",
    "reference_unlocked": "reference unlocked",
    "analyzer_uncalibrated": "analyzer uncalibrated",
})

#: (badge text, one-line meaning) of every flag: the words shown beside flagged figures.
FLAG_HELP: Mapping[str, tuple[str, str]] = MappingProxyType({
    name: (FLAG_BADGES.get(name, name.replace("_", " ")), FLAG_MEANINGS[name])
    for name in FLAGS
})

#: Verdict of a summary row without any limit.
NO_LIMIT = "—"


@dataclass(frozen=True)
class SummaryRow:
    """One line of the summary table.

    ``figure``: the figure shown (the worst of the group, or the only one); ``count``:
    figures in the group; ``range_text``: min … max when the group holds several numbers;
    ``verdict``: pass/fail/inconclusive of the group's judgements, or :data:`NO_LIMIT`;
    ``flags``: (flag name, number of figures of the group carrying it); ``points``: the
    run-store point indices behind the shown figure.
    """

    name: str
    label: str
    study: str
    conditions_text: str
    value_text: str
    range_text: str
    limit_text: str
    verdict: str
    flags: tuple[tuple[str, int], ...]
    count: int
    figure: Figure
    points: tuple[int, ...]
    #: The shown figure's number in the run's figure table (``figures.csv``'s ``figure``).
    position: int = -1


# ---------------------------------------------------------------------------------------------
# formatting


#: Decimals shown per unit where two would hide the figure (slopes, coefficients).
_UNIT_DIGITS = {"dB/°C": 4, "dB/dB": 3}


def format_value(value: float, unit: str, digits: int = 2) -> str:
    """A number with its unit (``n/a`` when not finite); amperes shown in mA."""
    if value is None or not math.isfinite(value):
        return "n/a"
    number, suffix = _shown_number(value, unit)
    return f"{number:.{max(digits, _UNIT_DIGITS.get(unit, 0))}f}{suffix}"


def _shown_number(values: Any, unit: str) -> tuple[Any, str]:
    """The numbers :func:`format_value` writes for ``values`` (a number, or an array of
    them) in ``unit`` and the text after them: amperes and watts in milli-units, the others
    as they are (an empty unit: nothing after the number)."""
    milli = {"A": " mA", "W": " mW"}.get(unit)
    if milli is not None:
        with np.errstate(over="ignore"):  # (beyond the floats: inf, as Python's product)
            return values * 1e3, milli
    return values, f" {unit}".rstrip()


def figure_text(figure: Figure, digits: int = 2) -> str:
    """The figure as a datasheet writes it: ``"12.35 dBm"``, ``"> 5.00 dBm"``, ``"n/a"``;
    with its expanded uncertainty when it has one: ``"12.49 ± 0.18 dB (k = 2)"``."""
    return value_text(figure.value, figure.unit, figure.bound, figure.uncertainty_db, digits)


def value_text(value: float, unit: str, bound: str | None, uncertainty_db: float,
               digits: int = 2) -> str:
    """:func:`figure_text` of a figure given by its fields (``bound``: "<", ">", or None or
    "" for a number; ``uncertainty_db``: expanded, NaN without one)."""
    if not bound and math.isfinite(value) and math.isfinite(uncertainty_db):
        return uncertainty_text(value, unit, uncertainty_db, digits)
    body = format_value(value, unit, digits)
    return f"{bound} {body}" if bound and body != "n/a" else body


def format_condition(key: str, value: object, conversion: str = "down") -> str:
    """One condition as text: ``RF 2.2 GHz``, ``25 °C``, ``LO 0 dBm``, ``study band``.

    ``conversion`` "up": the input conditions (``rf_*``) are the IF and the output the RF, in
    an upconverter's words (:mod:`sweeprig.analysis.direction`)."""
    if isinstance(value, str):
        return f"study {value}" if key == "study" else f"{key} {value}"
    if not isinstance(value, int | float) or not math.isfinite(float(value)):
        return f"{key} {value}"
    v = float(value)
    names = {
        "rf_freq_hz": "RF", "lo_freq_hz": "LO", "rf2_freq_hz": "RF2", "freq_hz": "at",
        "image_freq_hz": "image", "band_low_hz": "band from", "band_high_hz": "band to",
        "rf_power_dbm": "RF", "lo_power_dbm": "LO", "rf2_power_dbm": "RF2",
        "output_freq_hz": "IF",
    }
    if conversion == "up":
        names |= {"rf_freq_hz": "IF", "rf2_freq_hz": "IF2", "rf_power_dbm": "IF",
                  "rf2_power_dbm": "IF2", "output_freq_hz": "RF"}
    if key.endswith("_hz"):
        return f"{names.get(key, key)} {format_frequency(v)}"
    if key.endswith("_dbm"):
        return f"{names.get(key, key)} {v:g} dBm"
    if key == "temperature_c":
        return f"{v:g} °C"
    if key == "supply_v":
        return f"{v:g} V"
    if key in ("m", "n"):
        return f"{key} {int(v)}"
    if key == "in_band":
        return "in band" if v else "out of band"
    return f"{key} {v:g}"


def conditions_text(conditions: Mapping[str, object], skip: Iterable[str] = (),
                    conversion: str = "down") -> str:
    """Conditions as one line (``skip`` leaves keys out); m and n shown as ``m×n 2×-1``;
    ``conversion`` as in :func:`format_condition`."""
    skipped = set(skip)
    parts: list[str] = []
    m, n = conditions.get("m"), conditions.get("n")
    for key, value in conditions.items():
        if key in skipped or key in ("m", "n", "in_band"):
            continue
        parts.append(format_condition(key, value, conversion))
    if m is not None and n is not None and "m" not in skipped:
        parts.append(f"m×n {int(float(m))}×{int(float(n))}")  # type: ignore[arg-type]
    return ", ".join(parts)


def limit_text(limit: Limit) -> str:
    """``"≥ 9 dB and ≤ 14 dB"`` (in the figure's unit; amperes as mA)."""
    unit = FIGURE_CATALOGUE.get(limit.name, ("", ""))[0]
    edges = []
    if limit.min is not None:
        edges.append(f"≥ {_limit_number(limit.min, unit)}")
    if limit.max is not None:
        edges.append(f"≤ {_limit_number(limit.max, unit)}")
    where = {k: v for k, v in limit.conditions.items()}
    text = " and ".join(edges)
    return f"{text} ({conditions_text(where)})" if where else text


def limit_texts(limits: Iterable[Limit]) -> list[str]:
    """The distinct :func:`limit_text` of ``limits``, in order of first appearance."""
    return list(dict.fromkeys(limit_text(limit) for limit in limits))


_RANGE = re.compile(r"≥ (?P<low>\S+) (?P<unit>\S+) and ≤ (?P<high>\S+) (?P=unit)")


def compact_limit_text(text: str) -> str:
    """A limit text with each two-sided limit as a range: ``"≥ 40 mA and ≤ 60 mA"`` →
    ``"40…60 mA"`` (for narrow terminal columns)."""
    return _RANGE.sub(lambda m: f"{m['low']}…{m['high']} {m['unit']}", text)


def _limit_number(value: float, unit: str) -> str:
    """A limit as the sequence wrote it: up to three decimals, trailing zeros dropped
    (``15.5 dB``, ``-11 dBm``, ``60 mA``)."""
    number, _, shown_unit = format_value(value, unit, 3).partition(" ")
    if "." in number:
        number = number.rstrip("0").rstrip(".")
    return f"{number} {shown_unit}".strip()


def flag_badge(name: str) -> tuple[str, str]:
    """(short badge text, explanation) of a flag."""
    return FLAG_HELP.get(name, (name, name.replace("_", " ")))


def figure_label(name: str) -> str:
    """Datasheet label of a figure name."""
    return FIGURE_LABELS.get(name, name.replace("_", " "))


# ---------------------------------------------------------------------------------------------
# the summary


#: Conditions that make a summary group by default (one row per study, temperature, supply).
GROUP_KEYS: tuple[str, ...] = ("study", "temperature_c", "supply_v")


def summary_rows(run: RunFigures, by: Sequence[str] = GROUP_KEYS) -> list[SummaryRow]:
    """The summary table (see the module docstring), headline figures first in
    :data:`HEADLINE_FIGURES` order, then any other figure a limit names. ``by``: the
    conditions that make a group (``("study",)`` merges temperatures and supplies).

    Each group is read from columns (:func:`~sweeprig.analysis.figure_groups.held_groups`):
    only the figure a line shows is made."""
    from sweeprig.analysis.figure_groups import held_groups

    limited = [limit.name for limit in run.limits]
    names = list(HEADLINE_FIGURES) + [n for n in dict.fromkeys(limited)
                                      if n not in HEADLINE_FIGURES]
    judgements = run.assessment.judgements
    return [_summary_row(group, judgements.of_positions(group.positions), run.limits,
                         tuple(by), run.conversion)
            for group in held_groups(run.figures, names, by,
                                     conditions=run.figure_conditions)]


def _summary_row(group: HeldGroup, judged: JudgedGroup, limits: Sequence[Limit],
                 by: tuple[str, ...], conversion: str = "down") -> SummaryRow:
    name = group.name
    verdict = judged.verdict or NO_LIMIT
    shown_k = _worst(name, group, judged)
    shown = group.figure(shown_k)
    count = len(group)
    finite = np.isfinite(group.values)
    unit = group.unit
    range_text = ""
    if count > 1 and finite.any():
        numbers = group.values[finite]
        low, high = float(numbers.min()), float(numbers.max())
        range_text = f"{format_value(low, unit)} … {format_value(high, unit)}"
    first = group.mappings[0]  # (the first member's)
    fixed = {k: first[k] for k in by if k in first and k != "study"}
    if count == 1:
        text = conditions_text(shown.conditions, skip=("study",), conversion=conversion)
    else:
        text = conditions_text(fixed, conversion=conversion)
        spread = _spread_text(group, by, conversion)
        if spread:
            text += f"; {count} figures over {spread}"
        if name in ("spur_dbc", "spur_dbm"):
            c = shown.conditions
            where = f" at {format_frequency(float(c['freq_hz']))}" if "freq_hz" in c else ""
            if "m" in c and "n" in c:
                text += f"; worst m×n {int(float(c['m']))}×{int(float(c['n']))}{where}"
    applying = limit_texts(judged.limits)
    if not applying:
        applying = [limit_text(li) for li in limits if li.name == name and not li.conditions]
    counts = group.flag_counts()
    flags = tuple((f, counts[f]) for f in FLAGS if f in counts)
    value_text = figure_text(shown, 2)
    if count > 1 and (name in HIGHER_IS_BETTER or name in LOWER_IS_BETTER or len(judged)):
        value_text = f"worst {value_text}"
    elif count > 1 and range_text:
        value_text = range_text
    return SummaryRow(
        name=name,
        label=figure_label(name),
        study=str(first.get("study", "")),
        conditions_text=text.lstrip("; "),
        value_text=value_text,
        range_text=range_text,
        limit_text="; ".join(applying),
        verdict=verdict,
        flags=flags,
        count=count,
        figure=shown,
        points=shown.points,
        position=int(group.positions[shown_k]),
    )


def _spread_text(group: HeldGroup, by: tuple[str, ...], conversion: str = "down") -> str:
    """The conditions that vary inside a group (over its distinct conditions mappings), as
    ranges: ``RF 1.7 GHz–2.7 GHz``."""
    parts = []
    keys = [k for k in ("temperature_c", "supply_v") if k not in by]
    for key in (*keys, "rf_freq_hz", "output_freq_hz", "lo_freq_hz", "lo_power_dbm",
                "rf_power_dbm"):
        values = group.condition_numbers(key, finite=False)
        if len(values) > 1:
            if key == "lo_freq_hz" and any("rf_freq_hz" in p for p in parts):
                continue
            low = format_condition(key, values[0], conversion)
            high = format_condition(key, values[-1], conversion)
            if key in ("temperature_c", "supply_v"):
                parts.append(f"{low}…{high}")
            else:
                parts.append(f"{low}–{high.split(' ', 1)[1]}")
    if group.holds("m"):
        parts.append("the m×n products")
    return ", ".join(parts)


def _worst(name: str, group: HeldGroup, judged: JudgedGroup) -> int:
    """The member to show for a group (its index): the most failing, else the closest to
    its limit (:meth:`~sweeprig.analysis.judged_blocks.JudgedGroup.shown_position`), else
    the worst by the figure's better direction (the first of equals), else the first."""
    at = judged.shown_position()
    if at is not None:
        return int(np.searchsorted(group.positions, at))
    finite = np.flatnonzero(np.isfinite(group.values))
    if not finite.size:
        return 0
    if name in HIGHER_IS_BETTER:
        return int(finite[np.argmin(group.values[finite])])
    if name in LOWER_IS_BETTER:
        return int(finite[np.argmax(group.values[finite])])
    return int(finite[0])


# ---------------------------------------------------------------------------------------------
# JSON and tables


def _number(value: float) -> float | None:
    return float(value) if value is not None and math.isfinite(value) else None


def _plain(value: object) -> object:
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float):
        return _number(value)
    return value


def figure_verdicts(run: RunFigures) -> tuple[np.ndarray, np.ndarray]:
    """Each judged figure's position (ascending) and its worst verdict over the limits that
    judged it (a :data:`~sweeprig.analysis.judged_blocks.VERDICT_NAMES` code)."""
    return run.assessment.judgements.worst_by_position()


class _Stream:
    """A list of the figures document written entry by entry (never held whole);
    ``encoded``: its entries are JSON text already."""

    def __init__(self, entries: Iterable[object], encoded: bool = False) -> None:
        self.entries = entries
        self.encoded = encoded


def _texts3(table: Mapping[str, np.ndarray]) -> Any:
    """``figure_text(f, 3)`` of every figure of a figure table's columns (``table``:
    :func:`~sweeprig.analysis.figure_table.base_columns`), its common case (a number with
    its uncertainty) spelled out here, the others by :func:`value_text`. With pyarrow the
    numbers are written by :func:`~sweeprig.report.fixed_text.fixed_texts` (the same
    texts; Python's where it cannot tell), as pandas' text column; else an object array."""
    values, us, units, bounds = (table["value"], table["uncertainty_db"], table["unit"],
                                 table["bound"])
    common = (bounds == "") & np.isfinite(values) & np.isfinite(us)
    k = f"{COVERAGE_FACTOR:g}"
    arrow = arrow_compute()
    if arrow is None or not values.size:
        return np.array(_python_texts3(values, us, units, bounds, common), dtype=object)
    pa, _ = arrow
    value_texts, _ = fixed_texts(values, 3)
    u_texts, _ = fixed_texts(us, 3)
    made = common.copy()  # (the common case's numbers are finite: all written there)
    # every row's text is taken from one of these pieces: the common formula's (its own
    # row), a number shown without its uncertainty (a piece per unit and bound), Python's
    pieces = [joined(value_texts, large_text(" ± "), u_texts, large_text(" "),
                     pa.array(units, type=pa.large_string()), large_text(f" (k = {k})"))]
    take = np.arange(len(values))
    offset = len(values)
    finite = np.isfinite(values)
    if not finite.all():  # (no number: "n/a", whatever its bound)
        pieces.append(pa.array(["n/a"], type=pa.large_string()))
        take[~finite] = offset
        made[~finite] = True
        offset += 1
    plain = np.flatnonzero(~common & finite)
    # the plain numbers by unit and bound (a run has a few of each)
    unit_code, unit_names = pd.factorize(units[plain])
    bound_code, bound_names = pd.factorize(bounds[plain])
    pair = unit_code.astype(np.int64) * max(len(bound_names), 1) + bound_code
    for code in np.unique(pair).tolist():
        rows = plain[pair == code]
        unit = str(unit_names[code // max(len(bound_names), 1)])
        bound = str(bound_names[code % max(len(bound_names), 1)])
        number, suffix = _shown_number(values[rows], unit)
        texts, exact = fixed_texts(number, max(3, _UNIT_DIGITS.get(unit, 0)))
        pieces.append(joined(large_text(f"{bound} " if bound else ""), texts,
                             large_text(suffix)))
        take[rows[exact]] = offset + np.flatnonzero(exact)
        made[rows[exact]] = True
        offset += rows.size
    rest = np.flatnonzero(~made)
    if rest.size:
        pieces.append(pa.array(_python_texts3(values[rest], us[rest], units[rest],
                                              bounds[rest], common[rest]),
                               type=pa.large_string()))
        take[rest] = offset + np.arange(rest.size)
    return _text_column(pa.concat_arrays(pieces).take(pa.array(take)))


def _text_column(texts: Any) -> Any:
    """An Arrow text array as the column a frame would make of the same strings: pandas'
    text type holding the Arrow array itself where that type is held in Arrow, else an
    object array."""
    dtype = _inferred_text_dtype()
    if isinstance(dtype, pd.StringDtype) and dtype.storage == "pyarrow":
        return pd.array(texts, dtype=dtype)
    return texts.to_numpy(zero_copy_only=False)


def _python_texts3(values: np.ndarray, us: np.ndarray, units: np.ndarray, bounds: np.ndarray,
                   common: np.ndarray) -> list[str]:
    """:func:`_texts3` of these rows by Python's formatting, one by one: the common case
    (``common``: a number with its uncertainty) spelled out, the others by
    :func:`value_text`."""
    k = f"{COVERAGE_FACTOR:g}"
    return [f"{v:.3f} ± {u:.3f} {unit} (k = {k})" if ok else value_text(v, unit, b, u, 3)
            for v, u, unit, b, ok in zip(values.tolist(), us.tolist(), units.tolist(),
                                         bounds.tolist(), common.tolist(), strict=True)]


@functools.cache
def _inferred_text_dtype() -> Any:
    """The type a frame gives an object column of strings (pandas' own text type since
    pandas 3, held in Arrow; an object column before)."""
    return pd.DataFrame({"text": np.array(["text"], dtype=object)})["text"].dtype


def _document(run: RunFigures, budgets: FigureBudgets,
              summary: Sequence[SummaryRow] | None = None) -> dict[str, Any]:
    """Everything the report states but the per-figure rows, as JSON-able data
    (``figures.json``, format 4).

    The figures themselves are rows of the table named by ``figure_table`` (``figures.csv``
    beside the JSON, :func:`figures_frame`: one row per figure, its ``figure`` number, value,
    bound, unit, text, verdict, flags, run-store ``points`` (traceable to ``captures.csv``'s
    ``point``), its budget columns and conditions). ``judgements`` refer to figures by that
    number and to limits by their index in ``limits``. ``summary`` is the report's summary
    table (one row per headline figure and group of conditions). ``flag_meanings`` says in
    one line what every flag name means; ``suspect_flags`` lists those that make a limit
    check on the figure inconclusive.

    A figure's budget is its shared part, a row of the table named by ``budget_table``
    (``budgets.csv``: every distinct shared part once, its coverage factor, its lines'
    numbers in the table named by ``budget_terms_table``, ``budget-terms.csv``, and the
    readings whose noise matters with their sensitivities), and its own columns in the
    figure table (u_c, the SNR and sweeps of each such reading, a fitted figure's own
    lines): :mod:`sweeprig.report.budget_tables`. So the JSON stays small however many
    points the run has: its only lists that grow with the run are ``judgements`` and
    ``events``; the budget tables grow with the kinds of figure.

    The long lists (``judgements``, ``events``) are :class:`_Stream` objects here:
    :func:`figures_document` makes them lists, :func:`write_figures_json` writes them entry
    by entry.
    """
    limit_index = {id(li): i for i, li in enumerate(run.limits)}
    kinds = _condition_kinds(run)
    if summary is None:
        summary = summary_rows(run)
    return {
        "format": FIGURES_FORMAT,
        "generated_utc": datetime.now(UTC).isoformat(timespec="seconds"),
        "sweeprig_version": __version__,
        "run": {
            "id": run.run_id,
            "title": run.title,
            "part": run.part,
            "serial": run.serial,
            "operator": run.operator,
            "state": run.state,
            "status": run.status,
            "reason": run.reason,
            "simulated": run.simulated,
            "created_utc": run.created.isoformat(),
            "finished_utc": run.finished.isoformat() if run.finished else None,
            "points_done": run.points_done,
            "points_total": run.points_total,
            "duration_sim_s": run.duration_sim_s,
            "duration_wall_s": run.duration_wall_s,
            "sequence_path": run.sequence_path,
            "sequence_sha256": run.sequence_sha256,
            "sequence_sha256_matches_text": run.sequence_sha256_ok,
            "bench_path": run.bench_path,
            "bench_sha256": run.bench_sha256,
        },
        "verdict": run.verdict,
        "assessment_counts": run.assessment.counts,
        "notes": list(run.notes),
        "instruments": [
            {"role": i.role, "resource": i.resource, "profile": i.profile, "idn": i.idn}
            for i in run.instruments
        ],
        "conditions": {k: list(v) for k, v in run.conditions.items()},
        "studies": [
            {"name": s.name, "points": s.points, "points_planned": s.points_planned,
             "readings": list(s.readings), "roles": list(s.roles),
             "temperatures_c": list(s.temperatures_c), "supplies_v": list(s.supplies_v)}
            for s in run.studies
        ],
        "limits": [
            {"figure": li.name, "min": li.min, "max": li.max, "label": li.label,
             "conditions": {k: (list(v) if isinstance(v, tuple) else v)
                            for k, v in li.conditions.items()}}
            for li in run.limits
        ],
        "summary": [
            {"figure": r.position, "name": r.name, "label": r.label,
             "study": r.study, "conditions": r.conditions_text, "value": r.value_text,
             "range": r.range_text, "limit": r.limit_text, "verdict": r.verdict,
             "count": r.count, "flags": {name: count for name, count in r.flags}}
            for r in summary
        ],
        "figure_count": len(run.figures),
        "figure_table": {"file": FIGURE_ROWS_FILE, "rows": len(run.figures),
                         "columns": list(FIGURE_COLUMNS), "conditions": list(kinds),
                         "text_conditions": [k for k, text in kinds.items() if text]},
        "judgements": _Stream(_judgement_entries(run, limit_index), encoded=True),
        "untested_limits": [limit_index[id(li)] for li in run.assessment.untested],
        "budget_method": BUDGET_METHOD,
        "budget_table": {"file": BUDGETS_FILE, "rows": len(budgets.shared),
                         "columns": list(BUDGET_COLUMNS)},
        "budget_terms_table": {"file": BUDGET_TERMS_FILE, "rows": len(budgets.terms),
                               "columns": list(BUDGET_TERM_COLUMNS)},
        "flag_meanings": {name: FLAG_MEANINGS[name] for name in FLAGS},
        "suspect_flags": [name for name in FLAGS if name in SUSPECT_FLAGS],
        "events": _Stream(
            {"time_utc": e.time.isoformat(), "severity": e.severity, "kind": e.kind,
             "message": e.message, "point": e.point_index, "details": dict(e.details)}
            for e in run.events
        ),
    }


def _judgement_entries(run: RunFigures, limit_index: Mapping[int, int]) -> Iterator[str]:
    """The entries of the figures document's ``judgements`` as JSON text: the figure's
    number, the limit's index, the verdict and its reason (a judged block's from its
    columns: :func:`_block_entries`, several entries a text)."""
    encode = json.JSONEncoder(ensure_ascii=False, separators=(",", ":")).encode
    for part in run.assessment.judgements.parts:
        if isinstance(part, JudgedBlock):
            yield from _block_entries(part, limit_index[id(part.limit)])
        else:
            for j in part:
                yield encode({"figure": j.position, "limit": limit_index[id(j.limit)],
                              "verdict": j.verdict, "reason": j.reason})


#: Judgements of a block made into JSON entries at a time with pyarrow (a few MB of text).
_ENTRY_SLICE = 1 << 14


def _block_entries(part: JudgedBlock, limit: int) -> Iterator[str]:
    """The ``judgements`` entries of a judged block, each
    ``{"figure":N,"limit":L,"verdict":"V","reason":"R"}``. With pyarrow a slice of them a
    text, joined by commas as the document joins its entries, the plain numbers' reasons
    (:meth:`JudgedBlock.plain_wordings`) written by
    :func:`~sweeprig.report.fixed_text.fixed_texts`; the rest (and everything without
    pyarrow) one by one by :meth:`JudgedBlock.reasons_at`. The same text either way."""
    from json.encoder import encode_basestring

    def escaped(text: str) -> str:  # JSON escaping is per character: pieces join escaped
        return encode_basestring(text)[1:-1]

    arrow = arrow_compute()
    wordings = part.plain_wordings()
    positions = part.positions
    head = f',"limit":{limit},"verdict":"'
    if arrow is None:
        at = np.arange(len(part))
        for position, code, reason in zip(positions.tolist(), part.verdict.tolist(),
                                          part.reasons_at(at, wordings), strict=True):
            yield (f'{{"figure":{position}{head}{VERDICT_NAMES[code]}","reason":'
                   f'{encode_basestring(reason)}}}')
        return
    pa, pc = arrow
    plain, wording, texts = wordings
    unit = large_text(escaped(f" {part.block.unit}"))
    verdicts = pa.array(list(VERDICT_NAMES), type=pa.large_string())
    for lo in range(0, len(part), _ENTRY_SLICE):
        at = np.arange(lo, min(lo + _ENTRY_SLICE, len(part)))
        numbers, _ = fixed_texts(part.block.value[part.rows[at]], 3)
        number = joined(numbers, unit)
        made = plain[at]  # (a plain number is finite: written there)
        # each row's reason (JSON, quoted) taken from one of these pieces: per wording its
        # rows' reasons spelled out (computed for the whole slice), then Python's
        pieces, take, offset = [], np.zeros(at.size, dtype=np.int64), 0
        for w in np.unique(wording[at][made]).tolist():
            rows = np.flatnonzero(made & (wording[at] == w))
            words = texts[w]
            if isinstance(words, str):  # (the same reason for every row: one text)
                pieces.append(pa.array([encode_basestring(words)], type=pa.large_string()))
                take[rows] = offset
                offset += 1
                continue
            whole = [large_text('"')]
            for k, after in enumerate(words):
                whole += [large_text("; ")] * bool(k) + [number, large_text(escaped(after))]
            pieces.append(joined(*whole, large_text('"')))
            take[rows] = offset + rows
            offset += at.size
        rest = np.flatnonzero(~made)
        if rest.size:
            pieces.append(pa.array([encode_basestring(r) for r in part.reasons_at(
                at[rest], wordings)], type=pa.large_string()))
            take[rest] = offset + np.arange(rest.size)
        reasons = pa.concat_arrays(pieces).take(pa.array(take))
        entries = joined(large_text('{"figure":'),
                         pc.cast(pa.array(positions[at]), pa.large_string()), large_text(head),
                         verdicts.take(pa.array(part.verdict[at].astype(np.int64))),
                         large_text('","reason":'), reasons, large_text("}"))
        yield comma_joined(entries)


#: The ``format`` of ``figures.json``: 4 since a budget is a shared part (``budgets.csv``,
#: one row per kind of figure) and the figure's own noise inputs (columns of the figure
#: table); 3: every distinct budget a row of ``budgets.csv``; 2: every figure and its
#: budget in the JSON itself.
FIGURES_FORMAT = "sweeprig figures 4"
#: The formats :func:`read_figures_document` reads.
READABLE_FIGURES_FORMATS: tuple[str, ...] = ("sweeprig figures 2", "sweeprig figures 3",
                                             FIGURES_FORMAT)
#: The per-figure table beside ``figures.json`` (:func:`figures_frame`).
FIGURE_ROWS_FILE = "figures.csv"
_TERM_NUMBERS = frozenset({"half_width_db", "divisor", "standard_uncertainty_db",
                           "sensitivity", "contribution_db"})
#: The columns of the figure table before its condition columns (its budget columns:
#: :data:`~sweeprig.report.budget_tables.BUDGET_FIGURE_COLUMNS`).
FIGURE_COLUMNS: tuple[str, ...] = ("figure", "name", "value", "unit", "bound",
                                   "uncertainty_db", "text", "verdict", "flags", "points",
                                   *BUDGET_FIGURE_COLUMNS)


def figures_document(run: RunFigures) -> dict[str, Any]:
    """Everything the report states but the per-figure rows, as JSON-able data
    (``figures.json``; see :func:`_document` for what is in it)."""
    return {key: _listed(value) if isinstance(value, _Stream) else value
            for key, value in _document(run, figure_budgets(run)).items()}


def _listed(stream: _Stream) -> list[object]:
    """A streamed list of the figures document as plain data."""
    if not stream.encoded:
        return list(stream.entries)
    # (an encoded text may hold several entries, joined by commas: :func:`_block_entries`)
    return [entry for text in stream.entries for entry in json.loads(f"[{text}]")]


#: Entries encoded per write when streaming a long list of the figures document.
_JSON_CHUNK = 2000


def write_figures_json(run: RunFigures, path: Path, *, budgets: FigureBudgets | None = None,
                       rows_written: bool = False,
                       summary: Sequence[SummaryRow] | None = None) -> Path:
    """Write :func:`figures_document` to ``path`` (UTF-8, compact: one top-level key per
    line) and its tables beside it: :data:`BUDGET_TERMS_FILE`, :data:`BUDGETS_FILE` and
    (unless ``rows_written``: the
    caller wrote :func:`figures_frame` there already, with the same ``budgets``)
    :data:`FIGURE_ROWS_FILE`. ``summary``: :func:`summary_rows` of ``run`` when the caller
    has them. The long lists are encoded and written in chunks, so the whole text never sits
    in memory, and with the C encoder."""
    from sweeprig.report.csv_table import write_frame_csv

    if budgets is None:
        budgets = figure_budgets(run)
    folder = path.parent
    for name, make in ((BUDGET_TERMS_FILE, lambda: budget_terms_frame(budgets)),
                       (BUDGETS_FILE, lambda: budgets_frame(budgets)),
                       (FIGURE_ROWS_FILE, lambda: figures_frame(run, budgets))):
        if name == FIGURE_ROWS_FILE and rows_written:
            continue
        try:
            write_frame_csv(make(), folder / name)
        except OSError as exc:
            raise write_error(folder / name, exc) from None
    encode = json.JSONEncoder(ensure_ascii=False, allow_nan=False, default=_plain,
                              separators=(",", ":")).encode
    try:
        with path.open("w", encoding="utf-8") as out, collector_paused():
            out.write("{")
            for k, (key, value) in enumerate(_document(run, budgets, summary).items()):
                out.write(("," if k else "") + "\n" + encode(key) + ":")
                if not isinstance(value, _Stream):
                    out.write(encode(_finite(value)))
                    continue
                out.write("[")
                chunk: list[str] = []
                first = True
                for entry in value.entries:
                    chunk.append(entry if value.encoded else encode(entry))
                    if len(chunk) == _JSON_CHUNK:
                        out.write(("" if first else ",") + ",".join(chunk))
                        first, chunk = False, []
                if chunk:
                    out.write(("" if first else ",") + ",".join(chunk))
                out.write("]")
            out.write("\n}\n")
    except OSError as exc:
        raise write_error(path, exc) from None
    return path


def _finite(value: object) -> object:
    """``value`` with every non-finite float (at any depth) made None (JSON has no NaN)."""
    if isinstance(value, float):
        return _number(value)
    if isinstance(value, dict):
        return {k: _finite(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_finite(v) for v in value]
    return value


def read_figures_document(path: Path) -> dict[str, Any]:
    """Read a ``figures.json`` written by any format in :data:`READABLE_FIGURES_FORMATS`
    as the format-2 document: every figure an entry of ``figures`` (name, value, unit,
    bound, text, conditions, flags, points, uncertainty_db, budget with its totals and
    ``contributions`` as indices into ``budget_terms``, the list of every distinct line).
    Formats 3 and 4 are read with their tables beside them (format 4: each figure's lines
    put back together from its shared part and its own columns by
    :func:`~sweeprig.analysis.budget_parts.budget_lines`). Anything else: a StoreError
    naming the file.
    """
    import csv

    where = str(path)
    try:
        document = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, ValueError) as exc:
        raise StoreError(f"cannot read the figures file: {exc}", where=where,
                         fix="give the figures.json a report wrote") from None
    found = document.get("format") if isinstance(document, dict) else None
    if found not in READABLE_FIGURES_FORMATS:
        raise StoreError(
            f"the figures file's format is {found!r}, not one this version reads "
            f"({', '.join(READABLE_FIGURES_FORMATS)})", where=where,
            fix="write the report again with this version (sweeprig report RUN)")
    if found == "sweeprig figures 2":
        return document
    table = document["figure_table"]
    budget_table = document["budget_table"]
    terms_table = document["budget_terms_table"]
    folder = path.parent
    try:
        text = frozenset(table["text_conditions"])
        if found == FIGURES_FORMAT:
            lines, shared = read_budget_tables(folder, budget_table["file"],
                                               terms_table["file"])
            entries = BudgetEntries()
            with (folder / table["file"]).open(encoding="utf-8", newline="") as f:
                figures = []
                for row in csv.DictReader(f):
                    budget = figure_budget_from_row(row, lines, shared)
                    figures.append(_figure_entry(
                        row, table["conditions"], text,
                        None if budget is None else entries.entry(budget)))
            terms = entries.terms
        else:
            with (folder / terms_table["file"]).open(encoding="utf-8", newline="") as f:
                terms = [{k: float(v) if k in _TERM_NUMBERS else v for k, v in row.items()
                          if k != "term"} for row in csv.DictReader(f)]
            with (folder / budget_table["file"]).open(encoding="utf-8", newline="") as f:
                budgets = [_budget_entry(row) for row in csv.DictReader(f)]
            with (folder / table["file"]).open(encoding="utf-8", newline="") as f:
                figures = [_figure_entry(row, table["conditions"], text,
                                         budgets[int(row["budget"])] if row["budget"]
                                         else None)
                           for row in csv.DictReader(f)]
    except (OSError, KeyError, ValueError, IndexError) as exc:
        raise StoreError(f"cannot read a table of the figures file: {exc}", where=where,
                         fix=f"keep {table['file']}, {budget_table['file']} and "
                         f"{terms_table['file']} beside it, as the report wrote "
                         "them") from None
    if len(figures) != table["rows"]:
        raise StoreError(f"{table['file']} holds {len(figures)} figures, not the "
                         f"{table['rows']} the figures file states", where=where,
                         fix="write the report again (sweeprig report RUN)")
    return {**document, "figures": figures, "budget_terms": terms}


def _cell_number(text: str) -> float | None:
    if text == "":
        return None
    value = float(text)
    return value if math.isfinite(value) else None


def _budget_entry(row: Mapping[str, str]) -> dict[str, object]:
    return {"combined_standard_uncertainty_db":
            float(row["combined_standard_uncertainty_db"]),
            "coverage_factor": float(row["coverage_factor"]),
            "expanded_uncertainty_db": float(row["expanded_uncertainty_db"]),
            "contributions": [int(i) for i in row["contributions"].split()]}


def _figure_entry(row: Mapping[str, str], conditions: Sequence[str],
                  text_conditions: frozenset[str], budget: dict[str, object] | None
                  ) -> dict[str, object]:
    bound = row["bound"] or None
    conds: dict[str, object] = {}
    for key in conditions:
        cell = row[key]
        if cell == "":
            continue
        conds[key] = cell if key in text_conditions else float(cell)
    return {"name": row["name"], "value": _cell_number(row["value"]), "unit": row["unit"],
            "bound": bound, "text": row["text"], "conditions": conds,
            "flags": row["flags"].split(), "points": [int(p) for p in row["points"].split()],
            "uncertainty_db": _cell_number(row["uncertainty_db"]),
            "budget": budget}


def figures_frame(run: RunFigures, budgets: FigureBudgets | None = None) -> pd.DataFrame:
    """One row per figure (the figure table of ``figures.json``, :data:`FIGURE_COLUMNS`):
    ``figure`` (its number), ``name``, ``value``, ``unit``, ``bound`` ("<", ">" or empty),
    ``uncertainty_db`` (expanded, k = 2; NaN without a budget), ``text``, ``verdict`` (worst
    over its limits, empty when none applies), ``flags`` and ``points`` (space-separated),
    then the budget columns (:func:`~sweeprig.report.budget_tables.budget_columns`: its
    shared part's number in ``budgets.csv``, u_c, SNRs, sweeps, own lines; empty without a
    budget), then one column per condition."""
    if budgets is None:
        budgets = figure_budgets(run)
    kinds = _condition_kinds(run)
    return figure_rows_frame(_figure_columns(run, budgets, 0, len(run.figures), kinds,
                                             figure_verdicts(run),
                                             _coded_condition_texts(run, kinds)))


#: Figures per slice of the figure table when it is written (bounds the rows held at once).
FIGURE_SLICE_ROWS = 20_000


def figure_frames(run: RunFigures, budgets: FigureBudgets | None = None,
                  rows: int | None = None) -> Iterator[pd.DataFrame]:
    """:func:`figures_frame` in slices of ``rows`` figures (:data:`FIGURE_SLICE_ROWS`), each
    with every column of the whole table and the same column types: concatenated, they are
    the whole table. A large run's table is written slice by slice, never held whole."""
    for raw in figure_slices(run, budgets, rows):
        yield figure_rows_frame(raw)


def figure_slices(run: RunFigures, budgets: FigureBudgets | None = None,
                  rows: int | None = None) -> Iterator[dict[str, np.ndarray]]:
    """:func:`figure_frames` before their text: per slice the columns as numbers (flag
    masks; points as tuples, or as numbers where each figure of the slice is one point's
    from a block), :func:`figure_rows_frame` making each the slice's frame
    (where the table is written: a large run's in the helper process)."""
    if budgets is None:
        budgets = figure_budgets(run)
    step = rows or FIGURE_SLICE_ROWS
    kinds = _condition_kinds(run)
    verdicts = figure_verdicts(run)
    count = len(run.figures)
    coded = _coded_condition_texts(run, kinds)
    for first in range(0, max(count, 1), step):
        yield _figure_columns(run, budgets, first, min(first + step, count), kinds, verdicts,
                              coded)


@dataclass(frozen=True)
class CodedTexts:
    """A text column of a few distinct texts, as ``texts`` and each row's index among them
    (``codes``): how a figure-table slice carries its names, units, bounds, verdicts and
    text conditions (a small array to pickle for the helper process, and one Arrow ``take``
    to make its frame's column, where an array of strings took a check of each)."""

    codes: np.ndarray
    texts: tuple[str, ...]

    @classmethod
    def of(cls, values: np.ndarray) -> CodedTexts | np.ndarray:
        """``values`` (objects) coded, when every one is a str; else ``values`` itself."""
        from sweeprig.analysis.captures import text_codes

        coded = text_codes(values)
        return values if coded is None else cls(coded[1], tuple(coded[0].tolist()))

    def objects(self) -> np.ndarray:
        """The texts as an object array, a row each."""
        table = np.empty(len(self.texts), dtype=object)
        table[:] = self.texts
        return table[self.codes]

    def column(self) -> Any:
        """The frame's column of these texts: as pandas makes it of :meth:`objects`, by
        pyarrow where it is installed."""
        arrow = arrow_compute()
        if arrow is None:
            return self.objects()
        pa, _ = arrow
        return _text_column(pa.array(self.texts, type=pa.large_string()).take(
            pa.array(self.codes)))


def _coded_condition_texts(run: RunFigures, kinds: Mapping[str, bool]
                           ) -> dict[str, CodedTexts]:
    """Per text condition of ``kinds`` the run holds, coded: a code per distinct conditions
    mapping (the slices take their rows' codes from these)."""
    conditions = run.figure_conditions
    out: dict[str, CodedTexts] = {}
    for key, text in kinds.items():
        values = conditions.arrays.get(key)
        if text and values is not None:
            coded = CodedTexts.of(values)
            if isinstance(coded, CodedTexts):
                out[key] = coded
    return out


def _condition_kinds(run: RunFigures) -> dict[str, bool]:
    """Every condition key of the run's figures in order of first appearance, and whether
    its column is text (``study``, or any key with a text value)."""
    return run.figure_conditions.kinds


def _points_texts(points: np.ndarray) -> np.ndarray:
    """Each figure's run-store point indices, space-separated; a tuple met before (the
    figures of one point or one curve share theirs) is joined once, a single point is its
    number. ``points``: a tuple a figure, or the point numbers (int64) of figures of one
    point each (each distinct number written once)."""
    if points.dtype.kind in "iu":
        arrow = arrow_compute()
        if arrow is not None and points.size:  # (Arrow's text of an integer is Python's)
            pa, pc = arrow
            return _text_column(pc.cast(pa.array(points, type=pa.int64()), pa.large_string()))
        distinct, inverse = np.unique(points, return_inverse=True)
        return np.array(list(map(str, distinct.tolist())), dtype=object)[inverse.ravel()]
    texts: dict[tuple[int, ...], str] = {}
    out = np.empty(len(points), dtype=object)
    for i, p in enumerate(points.tolist()):
        text = texts.get(p)
        if text is None:
            text = texts[p] = str(p[0]) if len(p) == 1 else " ".join(map(str, p))
        out[i] = text
    return out


def _figure_columns(run: RunFigures, budgets: FigureBudgets, first: int, stop: int,
                    kinds: Mapping[str, bool], verdicts: tuple[np.ndarray, np.ndarray],
                    coded: Mapping[str, CodedTexts]) -> dict[str, Any]:
    """Rows ``first`` to ``stop`` of the figure table (see :func:`figures_frame`) as
    :func:`figure_slices` gives them, with a column for every key of ``kinds``;
    ``verdicts``: :func:`figure_verdicts` of ``run``; ``coded``: its text conditions'
    codes (:func:`_coded_condition_texts`). Names, units, bounds, verdicts and coded
    conditions are :class:`CodedTexts`."""
    from sweeprig.analysis.figure_block import columns_between

    # the one builder of a figure table's columns (a block's read from its columns); the
    # conditions from the run's columns (read once per distinct mapping, not once per slice)
    table = columns_between(run.figures, first, stop, point_numbers=True)
    count = stop - first
    verdict = np.zeros(count, dtype=np.uint8)  # (0: none; else 1 + its verdict's code)
    judged, codes = verdicts
    lo, hi = np.searchsorted(judged, [first, stop])
    verdict[judged[lo:hi] - first] = 1 + codes[lo:hi]
    conditions = run.figure_conditions
    which = conditions.which[first:stop]
    columns: dict[str, Any] = {
        "figure": np.arange(first, stop, dtype=np.int64),
        "name": CodedTexts.of(table["name"]),
        "value": table["value"],
        "unit": CodedTexts.of(table["unit"]),
        "bound": CodedTexts.of(table["bound"]),
        "uncertainty_db": table["uncertainty_db"],
        "verdict": CodedTexts(verdict, ("", *VERDICT_NAMES)),
        "flags": table["flags"],
        "points": table["points"],
        # the budget columns, as the budgets give them (whole numbers with empty cells:
        # object columns)
        **budget_columns(budgets, first, stop),
    }
    for key, text in kinds.items():
        values = conditions.arrays.get(key)
        held = coded.get(key)
        if held is not None:
            columns[key] = CodedTexts(held.codes[which], held.texts)
        elif values is None:  # (a key of ``kinds`` the run does not hold)
            columns[key] = np.full(count, "" if text else np.nan,
                                   dtype=object if text else float)
        else:
            columns[key] = values[which]
    return columns


def figure_rows_frame(columns: Mapping[str, Any]) -> pd.DataFrame:
    """A slice of :func:`figure_slices` as the figure table's frame: each figure's ``text``
    (its value as :func:`figure_text` writes it, 3 decimals) before its verdict, its flag
    mask as their names and its points as their numbers, space-separated."""
    import pandas as pd

    plain = {key: values.objects() for key in ("unit", "bound")
             if isinstance(values := columns[key], CodedTexts)}
    out: dict[str, object] = {}
    for key, values in columns.items():
        if key == "verdict":
            out["text"] = _texts3({**columns, **plain})
            out[key] = values.column() if isinstance(values, CodedTexts) else values
        elif isinstance(values, CodedTexts):
            out[key] = values.column()
        elif key == "flags":
            out[key] = _flag_texts(values)
        elif key == "points":
            out[key] = _points_texts(values)
        else:
            out[key] = values
    return pd.DataFrame(out)


def _flag_texts(masks: np.ndarray) -> Any:
    """Each flag mask's flag names, space-separated, each distinct mask's once (by pyarrow
    where it is installed, as a text column; else an object array)."""
    from sweeprig.analysis.figures import flags_from_mask

    distinct, inverse = np.unique(np.asarray(masks, dtype=np.int64), return_inverse=True)
    names = [" ".join(flags_from_mask(mask)) for mask in distinct.tolist()]
    arrow = arrow_compute()
    if arrow is None or not distinct.size:
        return np.array(names, dtype=object)[inverse.ravel()]
    pa, _ = arrow
    return _text_column(pa.array(names, type=pa.large_string()).take(
        pa.array(inverse.ravel())))


#: Table formats :func:`write_tables` writes.
TABLE_FORMATS: tuple[str, ...] = ("csv", "parquet")


def write_tables(
    run: RunFigures, folder: Path, formats: Sequence[str] | None = None, *,
    budgets: FigureBudgets | None = None,
) -> list[Path]:
    """Write ``captures`` and ``figures`` as CSV and/or Parquet into ``folder`` (by default
    :data:`TABLE_FORMATS`, Parquet left out when pyarrow, the ``parquet`` extra, is missing)
    and return their paths. ``budgets``: the run's :func:`figure_budgets`, when the caller
    has them (the figure table's ``budget`` numbers refer to them)."""
    with open_tables(run.captures, folder, formats) as writing:
        add_figure_table(writing, run, budgets)
        writing.finish()
    return writing.paths()


@contextlib.contextmanager
def open_tables(captures: pd.DataFrame, folder: Path, formats: Sequence[str] | None = None,
                  *, helper: bool | None = None) -> Iterator[TableWriting]:
    """The tables of :func:`write_tables` being written, the capture table first (given
    here, so it can start before the figures exist), the figure table with
    :func:`add_figure_table`; call ``finish()`` inside the block. For a large run
    (:data:`~sweeprig.report.table_writing.HELPER_CAPTURE_ROWS`; ``helper`` forces one way)
    a helper process on the other core writes them while the caller goes on
    (:mod:`sweeprig.report.table_writing`); else each is written when given."""
    from sweeprig.analysis.load import captures_as_written
    from sweeprig.parquet import parquet_available, require_parquet

    # (read at the call: the module's values, which tests set)
    from sweeprig.report.table_writing import CAPTURE_SLICE_ROWS, HELPER_CAPTURE_ROWS

    if formats is None:
        formats = [f for f in TABLE_FORMATS if f != "parquet" or parquet_available()]
    elif "parquet" in formats:
        require_parquet(str(folder))
    for fmt in formats:
        if fmt not in TABLE_FORMATS:
            raise ValueError(fmt)
    if helper is None:
        helper = len(captures) >= HELPER_CAPTURE_ROWS
    with TableWriting(helper=helper and bool(formats), where=folder,
                      formats=tuple(formats)) as writing:
        if formats:
            schema = None
            if "parquet" in formats:
                # from the whole table: a slice whose cells are all empty would not say
                schema = written_capture_schema(captures)
            # a frame of its own (the same columns) for a thread to slice while the figures
            # are made from the other; each slice's categorical text columns made text
            # where it is written (the helper's core, for a large run)
            own = captures.copy(deep=False)
            step = CAPTURE_SLICE_ROWS
            writing.add(TableJob(
                {fmt: folder / f"captures.{fmt}" for fmt in formats},
                (own.iloc[i:i + step] for i in range(0, max(len(own), 1), step)), schema,
                finish=captures_as_written))
        yield writing


def written_capture_schema(captures: pd.DataFrame) -> Any:
    """The Arrow schema of ``captures_as_written(captures)`` (the capture table's Parquet
    file), without making every row's text: a text column's type from one row per category
    (and one missing row, if any: the whole column's types, since a categorical's rows hold
    nothing else), every other column's from the whole table as it is."""
    import pyarrow as pa

    from sweeprig.analysis.load import TEXT_CAPTURE_COLUMNS, captures_as_written

    texts = [c for c in TEXT_CAPTURE_COLUMNS
             if c in captures and isinstance(captures[c].dtype, pd.CategoricalDtype)]
    if not texts:  # (then the table is as written)
        return pa.Schema.from_pandas(captures, preserve_index=False)
    rows: set[int] = set()
    for column in texts:
        _, first = np.unique(captures[column].cat.codes.to_numpy(), return_index=True)
        rows.update(first.tolist())
    sampled = pa.Schema.from_pandas(captures_as_written(captures.iloc[sorted(rows)]),
                                    preserve_index=False)
    whole = pa.Schema.from_pandas(captures.drop(columns=texts), preserve_index=False)
    return pa.schema([sampled.field(name) if name in texts else whole.field(name)
                      for name in sampled.names], metadata=sampled.metadata)


def add_figure_table(writing: TableWriting, run: RunFigures,
                     budgets: FigureBudgets | None = None) -> None:
    """Give ``writing`` (:func:`open_tables`) the figure table of ``run`` (``budgets``: its
    :func:`figure_budgets`, when the caller has them)."""
    if not writing.formats:
        return
    if budgets is None:
        budgets = figure_budgets(run)
    _ = run.figure_conditions  # made here, before a thread reads it
    writing.add(TableJob({fmt: writing.where / f"figures.{fmt}" for fmt in writing.formats},
                         figure_slices(run, budgets), finish=figure_rows_frame))


def make_folder(folder: Path, *, what: str = "report folder", option: str = "--out") -> Path:
    """Create an output folder (and parents); StoreError naming it when that is impossible."""
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise StoreError(
            f"cannot create the {what}: {exc.strerror or exc}",
            where=str(folder),
            fix=f"give a folder you can write to with {option}",
        ) from None
    return folder


def write_text_file(path: Path, text: str) -> None:
    """Write ``text`` (UTF-8) to ``path``; StoreError naming the file when that fails."""
    try:
        path.write_text(text, encoding="utf-8")
    except OSError as exc:
        raise write_error(path, exc) from None

