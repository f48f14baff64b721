"""The live line of a run: what is being measured now, fitted to the terminal's width.

One line: the study, the point count, the values that define the point (RF and LO frequency
and power, supply, temperature) in the units an engineer writes them (``70 MHz``, not
``0.07 GHz``), the latest gain, and the ETA. When the terminal is too narrow for all of it,
the least important fields go first — values the study holds constant before the ones it
sweeps, then the gain, then the study's name — while the count and the ETA always stay whole.
Field order and priorities are ours (common practice, no source).
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from typing import TYPE_CHECKING

from rich.console import Console, ConsoleOptions, RenderResult
from rich.segment import Segment
from rich.text import Text

from sweeprig.text import one_line
from sweeprig.units import format_frequency

if TYPE_CHECKING:
    from sweeprig.formats.sequence import Sequence
    from sweeprig.plan.expand import Point

#: A study axis (sequence vocabulary) → the live line's field it sweeps.
AXIS_FIELDS = {"rf_frequency": "rf_freq", "rf_power": "rf_power", "lo_frequency": "lo_freq",
               "lo_power": "lo_power"}
#: Priority of each field when the study holds it constant (higher stays longer).
_PRIORITY = {"activity": 95, "study": 90, "gain": 80, "temperature": 60, "supply": 55,
             "rf_freq": 50, "rf_power": 45, "lo_power": 40, "lo_freq": 30}
#: Added to a field the study sweeps: it outlives every constant one and the gain.
_SWEPT_BONUS = 100
#: Longest study name shown (cut with an ellipsis).
STUDY_CHARS = 16
_GAP = "  "


@dataclass(frozen=True)
class Field:
    """One piece of the line: ``group`` joins fields under one label (``RF 2.4 GHz -20 dBm``)."""

    key: str
    text: str
    group: str = ""


def swept_fields(sequence: Sequence) -> dict[str, frozenset[str]]:
    """Per study name, the live-line fields its points sweep (conditions included)."""
    from sweeprig.plan.expand import layout

    plan = layout(sequence)
    conditions = set()
    if plan.temperatures is not None and plan.temperatures.count > 1:
        conditions.add("temperature")
    if plan.supplies is not None and plan.supplies.count > 1:
        conditions.add("supply")
    return {block.study.name: frozenset(
        {AXIS_FIELDS[a.name] for a in block.axes if a.name in AXIS_FIELDS and a.count > 1}
        | conditions) for block in plan.blocks}


def point_fields(point: Point, gain_db: float | None) -> list[Field]:
    """The fields of one point, in display order."""
    fields = [Field("study", one_line(point.study))]
    fields.append(Field("rf_freq", format_frequency(point.rf_freq_hz), "RF"))
    fields.append(Field("rf_power", f"{point.rf_power_dbm:g} dBm", "RF"))
    fields.append(Field("lo_freq", format_frequency(point.lo_freq_hz), "LO"))
    fields.append(Field("lo_power", f"{point.lo_power_dbm:g} dBm", "LO"))
    if point.supply_v is not None:
        fields.append(Field("supply", f"{point.supply_v:g} V"))
    if point.temperature_c is not None:
        fields.append(Field("temperature", f"{point.temperature_c:g} °C"))
    if gain_db is not None:
        fields.append(Field("gain", f"gain {gain_db:+.2f} dB"))
    return fields


def fit_line(fields: Iterable[Field], count: str, eta: str, width: int,
             swept: Iterable[str] = ()) -> str:
    """The line within ``width`` characters: fields dropped least important first, the count
    and the ETA always whole (they alone may exceed a very narrow width)."""
    kept = list(fields)
    boosted = set(swept)

    def priority(field: Field) -> int:
        return _PRIORITY.get(field.key, 0) + (_SWEPT_BONUS if field.key in boosted else 0)

    while True:
        line = _join(kept, count, eta)
        if len(line) <= width or not kept:
            return line
        if len(kept) == 1 and kept[0].key == "activity":  # what the run waits for: cut it
            room = width - len(_join([], count, eta)) - len(_GAP)
            if room >= 8:
                text = kept[0].text
                return _join([Field("activity", text[:room - 1] + "…")], count, eta)
        kept.remove(min(reversed(kept), key=priority))  # ties: the later field goes first


def _join(fields: list[Field], count: str, eta: str) -> str:
    parts: list[str] = []
    group_at: dict[str, int] = {}
    for field in fields:
        text = field.text
        if field.key == "study" and len(text) > STUDY_CHARS:
            text = text[:STUDY_CHARS - 1] + "…"
        if field.group and field.group in group_at:
            parts[group_at[field.group]] += " " + text
            continue
        if field.group:
            group_at[field.group] = len(parts)
            text = f"{field.group} {text}"
        parts.append(text)
        if field.key in ("study", "activity"):
            parts.append(count)
    if not fields or fields[0].key not in ("study", "activity"):
        parts.insert(0, count)
    parts.append(eta)
    return _GAP.join(parts)


class LiveLine:
    """The run's live line as a rich renderable: it fits itself to the width it is given."""

    def __init__(self, total: int, swept: Mapping[str, frozenset[str]] | None = None) -> None:
        self.total = total
        self.done = 0
        self.swept = dict(swept or {})
        self._fields: list[Field] = []
        self._study = ""
        self._eta = "eta …"

    def point(self, point: Point, gain_db: float | None, eta: str | None = None) -> None:
        """A point was stored."""
        self.done += 1
        self._study = point.study
        self._fields = point_fields(point, gain_db)
        if eta is not None:
            self._eta = f"eta {eta}"

    def waiting(self, label: str, eta: str | None = None) -> None:
        """The run waits (chamber, soak...): the label replaces the point's values."""
        self._study = ""
        self._fields = [Field("activity", f"waiting: {one_line(label)}")]
        if eta is not None:
            self._eta = f"eta {eta}"

    def text(self, width: int) -> str:
        """The line as it shows at ``width`` columns."""
        count = f"{self.done}/{self.total}"
        return fit_line(self._fields, count, self._eta, width,
                        self.swept.get(self._study, frozenset()))

    def __rich_console__(self, console: Console, options: ConsoleOptions) -> RenderResult:
        yield Text(self.text(options.max_width), no_wrap=True, overflow="ellipsis")
        if not console.is_terminal:  # printed once, at the end: a line of its own
            yield Segment.line()
