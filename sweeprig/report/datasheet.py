"""The electrical-characteristics table: one row per figure and study, min / typ / max over
the corners measured.

A datasheet states each parameter once per set of test conditions, with its spread over the
corners the part was measured at (frequency, temperature, supply, LO drive). Here a row is
every figure of one name from one study (the study fixes the test conditions; its swept
settings and the run's temperatures and supplies are the corners):

* **min** / **max**: the smallest and largest value over the row's figures (a bound keeps its
  sign, e.g. ``> 5.60``: the sweep ended before compression at that corner);
* **typ**: the median of the measured numbers at the nominal corner: the temperature nearest
  +25 °C, the middle supply voltage and the middle LO drive of those measured (every
  frequency of the row counts). Common practice for a datasheet's typical column, no source;
  "—" when no number was measured there;
* **±U**: the largest expanded uncertainty (k = 2, JCGM 100:2008) of the row's figures;
* **limit** and **result**: the ``[[spec]]`` limits that judged the row's figures and the worst
  verdict, with how many figures had it, and how many judgements had a limit inside the
  figure's ± U (the verdict is then on the measured value, not certain at k = 2);
* **notes**: the validity flags met in the row, each a footnote spelled out under the table.

For the worst m×n spur the corners are the points: at each point only its worst counted
product enters (the strongest spur inside the output band, expected products left out), so
"max" is the worst spur over all corners.
"""

from __future__ import annotations

import math
import statistics
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from sweeprig.analysis.figure_groups import HeldGroup
from sweeprig.analysis.figures import FLAGS, Figure
from sweeprig.analysis.judged_blocks import JudgedGroup
from sweeprig.analysis.reduce import RunFigures
from sweeprig.report.tables import (
    HEADLINE_FIGURES,
    NO_LIMIT,
    figure_label,
    format_condition,
    limit_text,
    limit_texts,
)

#: Conditions that make the corners of a row, in the order the conditions column names them.
CORNER_KEYS: tuple[str, ...] = ("temperature_c", "supply_v", "rf_freq_hz", "output_freq_hz",
                                "lo_freq_hz", "lo_power_dbm", "rf_power_dbm")
#: The temperature a datasheet's typical column is stated at, °C (common practice, no source).
ROOM_C = 25.0
#: Figures whose corners are run-store points: the worst product per point enters the row.
PER_POINT_WORST = frozenset({"spur_dbc"})

#: Display unit and scale of a figure unit (amperes and watts as milli-).
_DISPLAY = {"A": ("mA", 1e3), "W": ("mW", 1e3)}
#: Decimals per display unit (slopes need more).
_DIGITS = {"dB/°C": 4, "dB/dB": 3, "mA": 1, "mW": 1}


@dataclass(frozen=True)
class DatasheetRow:
    """One line of the electrical-characteristics table (see the module docstring).

    ``count``: how many figures the row is computed from (after the per-point reduction
    of spurs); ``minimum``/``maximum``: the figures holding the extremes; ``typical``: the
    median at the nominal corner (NaN when none); ``uncertainty``: the largest expanded
    uncertainty (figure unit, NaN when none); ``judged``: verdict → number of figures;
    ``flags``: (flag name, number of figures carrying it)."""

    name: str
    label: str
    study: str
    conditions_text: str
    unit: str
    count: int
    minimum: Figure | None
    typical: float
    maximum: Figure | None
    uncertainty: float
    limit_text: str
    verdict: str
    judged: Mapping[str, int]
    flags: tuple[tuple[str, int], ...]
    #: Judgements of the row whose value ± U holds a limit edge (the verdict is on the
    #: measured value; at k = 2 it is not certain).
    straddled: int = 0

    @property
    def display_unit(self) -> str:
        return _DISPLAY.get(self.unit, (self.unit, 1.0))[0]

    def number_text(self, value: float, bound: str | None = None) -> str:
        """A value of this row in its display unit, without the unit (``"—"`` for NaN)."""
        if value is None or not math.isfinite(value):
            return "—"
        unit, scale = _DISPLAY.get(self.unit, (self.unit, 1.0))
        digits = _DIGITS.get(unit, 2)
        text = f"{value * scale:.{digits}f}".replace("-", "−")
        return f"{bound} {text}" if bound else text

    @property
    def min_text(self) -> str:
        f = self.minimum
        return "—" if f is None else self.number_text(f.value, f.bound)

    @property
    def typ_text(self) -> str:
        return self.number_text(self.typical)

    @property
    def max_text(self) -> str:
        f = self.maximum
        return "—" if f is None else self.number_text(f.value, f.bound)

    @property
    def uncertainty_text(self) -> str:
        return "—" if not math.isfinite(self.uncertainty) else \
            "± " + self.number_text(self.uncertainty)

    @property
    def verdict_text(self) -> str:
        """``pass``, ``fail 3/45``, ``inconclusive 2/45`` or ``—`` (no limit)."""
        if self.verdict == NO_LIMIT:
            return NO_LIMIT
        total = sum(self.judged.values())
        count = self.judged.get(self.verdict, 0)
        text = self.verdict if count == total else f"{self.verdict} {count}/{total}"
        return f"{text} ({self.straddled} within ±U)" if self.straddled else text


def datasheet_rows(run: RunFigures) -> list[DatasheetRow]:
    """The table of ``run``: headline figures in :data:`HEADLINE_FIGURES` order, then any
    other figure a limit names; within a figure, studies in run order. Each row is read
    from its figures' columns (:func:`~sweeprig.analysis.figure_groups.held_groups`): only
    the figures holding its extremes are made."""
    from sweeprig.analysis.figure_groups import held_groups

    names = list(HEADLINE_FIGURES) + [n for n in dict.fromkeys(li.name for li in run.limits)
                                      if n not in HEADLINE_FIGURES]
    order = {s.name: i for i, s in enumerate(run.studies)}
    groups = sorted(held_groups(run.figures, names, ("study",), as_text=True,
                                conditions=run.figure_conditions),
                    key=lambda g: (names.index(g.name), order.get(str(g.key[0]), len(order)),
                                   str(g.key[0])))
    judgements = run.assessment.judgements
    return [_row(group, judgements.of_positions(group.positions), run) for group in groups]


def corner_rows(name: str, group: HeldGroup) -> np.ndarray:
    """The members (their indices, int64) a row's min / typ / max are taken over: all of
    them, except for :data:`PER_POINT_WORST` figures: the largest finite value of each
    run-store point (the first of equals), in order of each point's first member."""
    if name not in PER_POINT_WORST:
        return np.arange(len(group), dtype=np.int64)
    values = group.values.tolist()
    worst: dict[tuple[int, ...], int] = {}
    for k, (points, value) in enumerate(zip(group.points.tolist(), values, strict=True)):
        if not math.isfinite(value):
            continue
        held = worst.get(points)
        if held is None or value > values[held]:
            worst[points] = k
    return np.array(list(worst.values()), dtype=np.int64)


def nominal_rows(group: HeldGroup, rows: np.ndarray) -> np.ndarray:
    """Those of the members ``rows`` at the nominal corner: temperature nearest
    :data:`ROOM_C`, the middle supply and the middle LO drive of those present (lower middle
    of an even count), each decided once per distinct conditions mapping."""
    chosen = rows
    for key in ("temperature_c", "supply_v", "lo_power_dbm"):
        held = np.unique(group.mapping_of[chosen])
        values = group.condition_numbers(key, among=held)
        if not values:
            continue
        pick = (min(values, key=lambda t: (abs(t - ROOM_C), t)) if key == "temperature_c"
                else values[(len(values) - 1) // 2])
        kept = held[group.close_to(key, pick, held)]
        chosen = chosen[np.isin(group.mapping_of[chosen], kept)]
    return chosen


def _row(group: HeldGroup, judged: JudgedGroup, run: RunFigures) -> DatasheetRow:
    name, study = group.name, str(group.key[0])
    rows = corner_rows(name, group)
    finite = rows[np.isfinite(group.values[rows])]
    minimum = maximum = None
    if finite.size:
        minimum = group.figure(int(finite[np.argmin(group.values[finite])]))
        maximum = group.figure(int(finite[np.argmax(group.values[finite])]))
    at_nominal = nominal_rows(group, finite)
    typical_numbers = group.values[at_nominal[group.bounds[at_nominal] == ""]].tolist()
    typical = statistics.median(typical_numbers) if typical_numbers else math.nan
    spreads = group.uncertainty_db[np.isfinite(group.uncertainty_db)]
    counts = judged.counts
    verdict = judged.verdict or NO_LIMIT
    limits = limit_texts(judged.limits)
    if not limits:
        limits = [limit_text(li) for li in run.limits if li.name == name
                  and li.conditions.get("study", study) == study]
    flag_counts = group.flag_counts()
    return DatasheetRow(
        name=name,
        label=figure_label(name),
        study=study,
        conditions_text=corners_text(group.mappings, run.conversion,
                                     numbers=group.condition_numbers),
        unit=group.unit,
        count=int(rows.size),
        minimum=minimum,
        typical=typical,
        maximum=maximum,
        uncertainty=float(spreads.max()) if spreads.size else math.nan,
        limit_text="; ".join(limits),
        verdict=verdict,
        judged={k: v for k, v in counts.items() if v},
        flags=tuple((f, flag_counts[f]) for f in FLAGS if f in flag_counts),
        straddled=judged.straddled,
    )


def corners_text(mappings: Sequence[Mapping[str, object]], conversion: str = "down", *,
                 numbers: Callable[[str], list[float]] | None = None) -> str:
    """The test conditions of a row (``mappings``: its figures' distinct conditions
    mappings): each corner setting as one value, or its range (``−40…85 °C, 3.3 V,
    RF 1.7–2.7 GHz, IF 100 MHz, LO 0 dBm``), in the words of the part's ``conversion`` (an
    upconverter's input is its IF, its output its RF); the LO frequency is left out when it
    follows a swept input or output frequency. ``numbers``: the distinct numbers of a key in
    ``mappings`` when the caller has them (:meth:`HeldGroup.condition_numbers`), else
    :func:`~sweeprig.analysis.figure_table.condition_numbers`."""
    from sweeprig.analysis.figure_table import condition_numbers

    if numbers is None:
        def numbers(key: str) -> list[float]:
            return condition_numbers(mappings, key)

    parts: list[str] = []
    swept_signal = False
    for key in CORNER_KEYS:
        values = numbers(key)
        if not values:
            continue
        if key == "lo_freq_hz" and len(values) > 1 and swept_signal:
            continue
        if key in ("rf_freq_hz", "output_freq_hz") and len(values) > 1:
            swept_signal = True
        low = format_condition(key, values[0], conversion)
        if len(values) == 1:
            parts.append(low)
        elif key in ("temperature_c", "supply_v"):
            parts.append(f"{low.split(' ')[0]}…{format_condition(key, values[-1], conversion)}")
        else:
            high = format_condition(key, values[-1], conversion).split(" ", 1)[1]
            parts.append(f"{low}–{high}")
    return ", ".join(parts).replace("-", "−")
