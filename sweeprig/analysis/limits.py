"""Spec limits as plain data, and pass / fail / inconclusive verdicts on figures.

A :class:`Limit` names a figure (see ``FIGURE_CATALOGUE`` in
:mod:`sweeprig.analysis.figures`), a ``min`` and/or ``max`` in the figure's unit (inclusive),
and optionally conditions that restrict it (``{"temperature_c": 85}``, a ``(low, high)``
range, or a string such as a study name). A limit applies to every figure of that name whose
conditions hold all of the limit's keys with matching values (numbers to 1e-9 relative).

Judging one figure against one limit:

* a number passes when min ≤ value ≤ max, else fails;
* an upper bound "< X" passes a max when X ≤ max and fails a min when X ≤ min; a lower bound
  "> X" passes a min when X ≥ min and fails a max when X ≥ max; any other case cannot be
  judged: inconclusive;
* a number whose expanded uncertainty interval value ± U holds a limit edge is judged on
  its value, and the judgement says the uncertainty straddles the limit; with
  ``guard_band=True`` it is inconclusive instead (so a pass or a fail holds over all of
  value ± U);
* NaN values, and figures carrying a suspect flag (``SUSPECT_FLAGS``: overload, analyzer
  distortion, too few points, ...), are inconclusive whatever their value.

The overall verdict is ``fail`` if anything failed, else ``inconclusive`` if anything was
inconclusive or a limit found no figure at all, else ``pass`` (an empty check is
inconclusive).
"""

from __future__ import annotations

import difflib
import math
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import TYPE_CHECKING, Literal

from sweeprig.analysis.figures import (
    FIGURE_CATALOGUE,
    SUSPECT_FLAGS,
    Figure,
    value_words,
)
from sweeprig.errors import InputError
from sweeprig.units import parse_quantity

if TYPE_CHECKING:
    from sweeprig.analysis.judged_blocks import Judgements

Verdict = Literal["pass", "fail", "inconclusive"]
PASS: Verdict = "pass"
FAIL: Verdict = "fail"
INCONCLUSIVE: Verdict = "inconclusive"

ConditionValue = float | str | tuple[float, float]


@dataclass(frozen=True)
class Limit:
    """A spec limit on figure ``name``: ``min``/``max`` (inclusive, the figure's unit),
    restricted to figures whose conditions match ``conditions``."""

    name: str
    min: float | None = None
    max: float | None = None
    conditions: Mapping[str, ConditionValue] = field(default_factory=dict, hash=False)
    label: str = ""

    def applies_to(self, figure: Figure) -> bool:
        """True when ``figure`` has this limit's name and matching conditions."""
        if figure.name != self.name:
            return False
        return all(_matches(figure.conditions.get(k), v) for k, v in self.conditions.items())

    def text(self) -> str:
        """The limit as people write it, e.g. ``"iip3 ≥ 10 (temperature_c=85)"``."""
        unit = FIGURE_CATALOGUE.get(self.name, ("", ""))[0]
        parts = []
        if self.min is not None:
            parts.append(f"≥ {self.min:g} {unit}".strip())
        if self.max is not None:
            parts.append(f"≤ {self.max:g} {unit}".strip())
        where = ", ".join(f"{k}={v}" for k, v in self.conditions.items())
        return f"{self.label or self.name} {' and '.join(parts)}" + (f" ({where})" if where else "")


@dataclass(frozen=True, slots=True)
class Judgement:
    """One figure judged against one limit. ``suspect``: the suspect flags that made it
    inconclusive (usually none); ``position``: the figure's number among the figures judged
    (a run's figure table; -1: judged alone, :func:`judge`); :attr:`reason` says why in
    words."""

    figure: Figure
    limit: Limit
    verdict: Verdict
    suspect: tuple[str, ...] = ()
    position: int = -1

    @property
    def straddles(self) -> bool:
        """True when the figure's expanded uncertainty interval value ± U holds a limit
        edge: the verdict on the value alone is not certain at the stated coverage."""
        return bool(straddled_edges(self.figure, self.limit))

    @property
    def reason(self) -> str:
        """The verdict explained, e.g. ``"12.000 dBm meets min 10"``."""
        f = self.figure
        return judgement_reason(f.value, f.bound, f.unit, f.uncertainty_db, self.limit,
                                self.verdict, self.suspect)


def judgement_reason(value: float, bound: str | None, unit: str, uncertainty: float,
                     limit: Limit, verdict: Verdict, suspect: tuple[str, ...] = ()) -> str:
    """:attr:`Judgement.reason` of a figure of these fields (``uncertainty``: expanded,
    k = 2, in ``unit``), judged ``verdict`` against ``limit``."""
    if not math.isfinite(value):
        return "no value"
    if suspect:
        return "flagged: " + ", ".join(suspect)
    texts: dict[str, list[str]] = {PASS: [], FAIL: [], INCONCLUSIVE: []}
    for edge, lower in ((limit.min, True), (limit.max, False)):
        if edge is not None:
            outcome = _edge_outcome(value, bound, edge, lower)
            texts[outcome].append(_edge_text(value_words(value, unit, bound, 3), bound, edge,
                                             lower, outcome))
    chosen = texts[verdict] or texts[PASS]
    for edge, lower in _straddled(value, bound, uncertainty, limit):
        chosen.append(f"the uncertainty ± {uncertainty:.3f} {unit} (k = 2) "
                      f"straddles {'min' if lower else 'max'} {edge:g}")
    return "; ".join(chosen) or "no bounds"


def straddled_edges(figure: Figure, limit: Limit) -> list[tuple[float, bool]]:
    """The limit's edges (value, is-min) inside the figure's value ± U (k = 2); none for a
    bound or a figure without an uncertainty."""
    return _straddled(figure.value, figure.bound, figure.uncertainty_db, limit)


def _straddled(value: float, bound: str | None, uncertainty: float,
               limit: Limit) -> list[tuple[float, bool]]:
    if bound is not None or not math.isfinite(value) or not math.isfinite(uncertainty):
        return []
    return [(edge, lower) for edge, lower in ((limit.min, True), (limit.max, False))
            if edge is not None and value - uncertainty < edge < value + uncertainty]


@dataclass(frozen=True)
class Assessment:
    """All judgements (:class:`~sweeprig.analysis.judged_blocks.Judgements`: a sequence of
    :class:`Judgement`, a large run's held as columns), the limits no figure matched, and
    the overall verdict."""

    verdict: Verdict
    judgements: Judgements
    untested: tuple[Limit, ...] = ()

    def __post_init__(self) -> None:
        from sweeprig.analysis.judged_blocks import Judgements

        if not isinstance(self.judgements, Judgements):
            object.__setattr__(self, "judgements", Judgements([tuple(self.judgements)]))

    @property
    def counts(self) -> dict[str, int]:
        """Number of judgements per verdict."""
        return self.judgements.counts

    @property
    def straddled(self) -> int:
        """How many judgements had a limit edge inside the figure's value ± U."""
        return self.judgements.straddled


def judge(
    figure: Figure, limit: Limit, *, suspect_flags: Iterable[str] = SUSPECT_FLAGS,
    guard_band: bool = False,
) -> Judgement:
    """Judge ``figure`` against ``limit`` (see the module docstring). ``guard_band``: a
    number with an uncertainty passes only when value ± U lies inside the limit and fails
    only when it lies outside; in between it is inconclusive."""
    suspect_set = suspect_flags if isinstance(suspect_flags, frozenset) else frozenset(
        suspect_flags
    )
    return _judge(figure, limit, suspect_set, guard_band)


def _judge(figure: Figure, limit: Limit, suspect_set: frozenset[str],
           guard_band: bool = False, position: int = -1) -> Judgement:
    flags = figure.flags
    suspect = tuple(sorted(f for f in flags if f in suspect_set)) if flags else ()
    value = figure.value
    if not math.isfinite(value) or suspect:
        return Judgement(figure, limit, INCONCLUSIVE, suspect, position)
    if guard_band and straddled_edges(figure, limit):
        return Judgement(figure, limit, INCONCLUSIVE, (), position)
    verdict = PASS
    for edge, lower in ((limit.min, True), (limit.max, False)):
        if edge is None:
            continue
        outcome = _edge_outcome(value, figure.bound, edge, lower)
        if outcome == FAIL:
            return Judgement(figure, limit, FAIL, (), position)
        if outcome == INCONCLUSIVE:
            verdict = INCONCLUSIVE
    return Judgement(figure, limit, verdict, (), position)


def _edge_outcome(value: float, bound: str | None, edge: float, lower: bool) -> Verdict:
    """One side of a limit: a number is judged directly; "< X" can pass a max or fail a
    min, "> X" can pass a min or fail a max; anything else is inconclusive."""
    if bound is None:
        return PASS if (value >= edge if lower else value <= edge) else FAIL
    if bound == "<":
        if value <= edge:
            return FAIL if lower else PASS
    elif value >= edge:  # ">"
        return PASS if lower else FAIL
    return INCONCLUSIVE


def _edge_text(text: str, bound: str | None, edge: float, lower: bool,
               outcome: Verdict) -> str:
    word = "min" if lower else "max"
    if outcome == INCONCLUSIVE:
        return f"{text} cannot be judged against {word} {edge:g}"
    if bound is None:
        return f"{text} {'meets' if outcome == PASS else 'misses'} {word} {edge:g}"
    return f"{text} is {'within' if outcome == PASS else 'outside'} {word} {edge:g}"


def assess(
    figures: Sequence[Figure],
    limits: Iterable[Limit],
    *,
    suspect_flags: Iterable[str] = SUSPECT_FLAGS,
    guard_band: bool = False,
) -> Assessment:
    """Judge every figure against every limit that applies to it, limit by limit, each
    limit's figures in order; overall verdict (``guard_band``: see :func:`judge`). A
    judgement's ``position`` is its figure's index in ``figures``; a run's
    :class:`~sweeprig.analysis.figure_block.Figures` are judged block by block, from their
    columns (:mod:`sweeprig.analysis.judged_blocks`)."""
    from sweeprig.analysis.judged_blocks import judged_parts

    limits = list(limits)
    judgements, untested = judged_parts(figures, limits, frozenset(suspect_flags), guard_band)
    verdicts = {verdict for verdict, count in judgements.counts.items() if count}
    return Assessment(_worst_verdict(verdicts, bool(untested)), judgements, untested)


def overall_verdict(judgements: Iterable[Judgement], untested: Iterable[Limit] = ()) -> Verdict:
    """fail > inconclusive > pass; nothing judged, or a limit without figures: inconclusive."""
    return _worst_verdict({j.verdict for j in judgements}, any(True for _ in untested))


def _worst_verdict(verdicts: set[str], untested: bool) -> Verdict:
    if FAIL in verdicts:
        return FAIL
    if INCONCLUSIVE in verdicts or not verdicts or untested:
        return INCONCLUSIVE
    return PASS


# ---------------------------------------------------------------------------------------------
# limits from plain data (a part file, a dict)

_UNIT_KINDS = {"dB": "level_db", "dBc": "level_db", "dBm": "power", "A": "current", "W": "power"}
_CONDITION_SUFFIX_KINDS = (("_hz", "frequency"), ("_dbm", "power"), ("_c", "temperature"),
                           ("_v", "voltage"))


def limits_from_mapping(data: Mapping[str, object], *, where: str = "limits") -> tuple[Limit, ...]:
    """Limits from plain data: ``{figure name: {"min": .., "max": .., "conditions": {..},
    "label": ..}}`` or a list of such tables per name. Values are numbers in the figure's
    unit or strings with a unit ("10 dBm", "-60 dBc", "120 mA"). Raises InputError naming
    the entry that is wrong."""
    if not isinstance(data, Mapping):
        raise InputError(
            f"limits must be a table of figure names, got {type(data).__name__}",
            where=where,
            fix='write e.g. {"iip3": {"min": 10}}',
        )
    out: list[Limit] = []
    for name, spec in data.items():
        here = f"{where}.{name}"
        if name not in FIGURE_CATALOGUE:
            close = difflib.get_close_matches(str(name), list(FIGURE_CATALOGUE), n=3)
            raise InputError(
                f"{name!r} is not a figure sweeprig computes",
                where=here,
                fix=("did you mean " + ", ".join(close) + "?") if close
                else "see FIGURE_CATALOGUE in sweeprig.analysis.figures",
            )
        entries = spec if isinstance(spec, list | tuple) else [spec]
        for i, entry in enumerate(entries):
            out.append(_limit(str(name), entry, f"{here}[{i}]" if len(entries) > 1 else here))
    return tuple(out)


def _limit(name: str, entry: object, where: str) -> Limit:
    if not isinstance(entry, Mapping):
        raise InputError(
            f"a limit must be a table with min and/or max, got {type(entry).__name__}",
            where=where,
            fix='write e.g. {"min": 10, "max": 20}',
        )
    unknown = set(entry) - {"min", "max", "conditions", "label"}
    if unknown:
        raise InputError(
            f"unknown key(s) {', '.join(sorted(map(str, unknown)))}",
            where=where,
            fix="a limit has the keys min, max, conditions and label",
        )
    unit = FIGURE_CATALOGUE[name][0]
    low = _limit_value(entry.get("min"), unit, f"{where}.min")
    high = _limit_value(entry.get("max"), unit, f"{where}.max")
    if low is None and high is None:
        raise InputError("the limit has neither min nor max", where=where,
                         fix="give min, max or both")
    if low is not None and high is not None and low > high:
        raise InputError(f"min {low:g} is above max {high:g}", where=where,
                         fix="swap them or correct one")
    conditions = entry.get("conditions", {})
    if not isinstance(conditions, Mapping):
        raise InputError("conditions must be a table", where=f"{where}.conditions",
                         fix='write e.g. {"temperature_c": 85}')
    parsed = {str(k): _condition(str(k), v, f"{where}.conditions.{k}")
              for k, v in conditions.items()}
    label = entry.get("label", "")
    return Limit(name, low, high, MappingProxyType(parsed), str(label))


def _limit_value(value: object, unit: str, where: str) -> float | None:
    if value is None:
        return None
    kind = _UNIT_KINDS.get(unit)
    if isinstance(value, str) and unit == "dBc" and value.strip().lower().endswith("dbc"):
        value = value.strip()[:-1]
    if kind is None:
        if isinstance(value, int | float) and not isinstance(value, bool) and math.isfinite(value):
            return float(value)
        raise InputError(f"{value!r} is not a number", where=where,
                         fix=f"give a plain number in {unit}")
    number = parse_quantity(value, kind, where=where)
    if unit == "W" and isinstance(value, str):
        return 1e-3 * 10.0 ** (number / 10.0)  # parsed as dBm; a bare number is already W
    return number


def _condition(key: str, value: object, where: str) -> ConditionValue:
    if isinstance(value, bool):
        return float(value)
    if isinstance(value, str) and not any(key.endswith(s) for s, _ in _CONDITION_SUFFIX_KINDS):
        return value
    if isinstance(value, list | tuple):
        if len(value) != 2:
            raise InputError("a condition range needs two values [low, high]", where=where,
                             fix="write e.g. [-40, 85]")
        low, high = (_condition_number(key, v, where) for v in value)
        return (min(low, high), max(low, high))
    return _condition_number(key, value, where)


def _condition_number(key: str, value: object, where: str) -> float:
    for suffix, kind in _CONDITION_SUFFIX_KINDS:
        if key.endswith(suffix):
            return parse_quantity(value, kind, where=where)
    if isinstance(value, int | float) and not isinstance(value, bool) and math.isfinite(value):
        return float(value)
    raise InputError(f"{value!r} is not a number", where=where, fix="give a plain number")


def _matches(actual: object, wanted: ConditionValue) -> bool:
    if actual is None:
        return False
    if isinstance(wanted, tuple):
        return isinstance(actual, int | float) and wanted[0] <= float(actual) <= wanted[1]
    if isinstance(wanted, str) or isinstance(actual, str):
        return actual == wanted
    a, b = float(actual), float(wanted)
    return abs(a - b) <= 1e-9 * max(1.0, abs(a), abs(b))
