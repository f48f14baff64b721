"""Golden figures beside a sequence: expected values with tolerances, for regression.

``<sequence stem>.golden.toml`` beside the sequence (written and refreshed by
``sweeprig golden write SEQUENCE``)::

    format = 1
    sequence = "quick.toml"          # the file it belongs to (informative)

    [[figure]]
    name = "conversion_gain"         # a figure name of the analysis (figures.json)
    value = 12.55                    # expected, in the figure's unit
    tolerance = 0.5                  # ± in the same unit
    conditions = { study = "gain", rf_freq_hz = 2.3e9 }   # match these exactly (SI)

A golden figure matches the run's figures of that name whose conditions hold every listed
condition; each must be within ``value ± tolerance``; a golden figure that no run figure
matches is a miss ("not measured"). Unknown figure names, a missing or non-positive
tolerance, or keys outside this schema are refused with the file, line and key.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from pathlib import Path
from types import MappingProxyType

from sweeprig.analysis.figures import FIGURE_CATALOGUE, Figure
from sweeprig.errors import InputError
from sweeprig.seqtest.judge import Miss, conditions_text
from sweeprig.seqtest.shape import GOLDEN_SUFFIX

#: The figures ``sweeprig golden write`` records: datasheet numbers, not diagnostics.
RECORDED = ("conversion_gain", "gain_flatness", "input_p1db", "output_p1db", "iip3", "oip3",
            "iip2", "lo_if_isolation", "lo_rf_isolation", "rf_if_isolation",
            "image_rejection", "supply_current", "noise_figure")
_TOP_KEYS = {"format", "sequence", "figure"}
_FIGURE_KEYS = {"name", "value", "tolerance", "conditions"}
_COND_PRECISION = 9


@dataclass(frozen=True)
class GoldenFigure:
    """One expected figure: ``name``, ``value`` ± ``tolerance`` (figure's unit), matched
    on ``conditions``; ``where``: file:line of its entry."""

    name: str
    value: float
    tolerance: float
    conditions: Mapping[str, float | str]
    where: str


def golden_path(sequence_path: Path) -> Path:
    """The golden-figures file of a sequence: ``<stem>.golden.toml`` beside it."""
    return sequence_path.with_name(sequence_path.stem + GOLDEN_SUFFIX)


def load_golden(path: Path) -> tuple[GoldenFigure, ...]:
    """Read and check a golden-figures file (see the module docstring)."""
    from sweeprig.formats.loading import load_document

    doc = load_document(path)
    data = doc.data
    for key in data:
        if key not in _TOP_KEYS:
            raise InputError(f"unknown key {key!r} in a golden-figures file",
                             where=doc.where((key,)),
                             fix=f"use only {', '.join(sorted(_TOP_KEYS))}")
    if data.get("format", 1) != 1:
        raise InputError(f"golden-figures format {data.get('format')!r} is not 1",
                         where=doc.where(("format",)), fix="write format = 1")
    entries = data.get("figure", [])
    if not isinstance(entries, list):
        raise InputError("'figure' must be an array of tables ([[figure]])",
                         where=doc.where(("figure",)), fix="write each as [[figure]]")
    out = []
    for i, entry in enumerate(entries):
        out.append(_figure(entry, i, doc))
    return tuple(out)


def _figure(entry: object, i: int, doc: object) -> GoldenFigure:
    where = doc.where  # type: ignore[attr-defined]
    if not isinstance(entry, dict):
        raise InputError("a [[figure]] entry is not a table", where=where(("figure", i)),
                         fix="write each expected figure as a [[figure]] table")
    for key in entry:
        if key not in _FIGURE_KEYS:
            raise InputError(f"unknown key {key!r} in a golden figure",
                             where=where(("figure", i, key)),
                             fix=f"use only {', '.join(sorted(_FIGURE_KEYS))}")
    name = entry.get("name")
    if name not in FIGURE_CATALOGUE:
        close = [n for n in FIGURE_CATALOGUE if isinstance(name, str) and (
            n.startswith(name[:4]) or name in n)][:4]
        hint = f" (did you mean {', '.join(close)}?)" if close else ""
        raise InputError(
            f"unknown figure {name!r}{hint}", where=where(("figure", i, "name")),
            fix="use a figure name of the analysis, as in figures.json (e.g. "
                "conversion_gain, input_p1db, iip3), or refresh the file with "
                "`sweeprig golden write`")
    value, tolerance = entry.get("value"), entry.get("tolerance")
    for key, number in (("value", value), ("tolerance", tolerance)):
        if isinstance(number, bool) or not isinstance(number, int | float) \
                or not math.isfinite(number):
            raise InputError(f"{key} {number!r} is not a finite number",
                             where=where(("figure", i, key)),
                             fix=f"write {key} as a plain number in the figure's unit")
    if tolerance <= 0:  # type: ignore[operator]
        raise InputError(f"tolerance {tolerance!r} is not positive",
                         where=where(("figure", i, "tolerance")),
                         fix="write the allowed ± deviation, e.g. tolerance = 0.5")
    conditions = entry.get("conditions", {})
    if not isinstance(conditions, dict) or not all(
            isinstance(v, str | int | float) and not isinstance(v, bool)
            for v in conditions.values()):
        raise InputError("conditions must be a table of numbers (SI) and texts",
                         where=where(("figure", i, "conditions")),
                         fix='write e.g. conditions = { study = "gain", rf_freq_hz = 2.4e9 }')
    return GoldenFigure(str(name), float(value), float(tolerance),  # type: ignore[arg-type]
                        MappingProxyType(dict(conditions)), where(("figure", i)))


def _holds(figure: Figure, conditions: Mapping[str, float | str]) -> bool:
    for key, wanted in conditions.items():
        have = figure.conditions.get(key)
        if have is None:
            return False
        if isinstance(wanted, str) or isinstance(have, str):
            if str(have) != str(wanted):
                return False
        elif round(float(have), _COND_PRECISION) != round(float(wanted), _COND_PRECISION) \
                and not math.isclose(float(have), float(wanted), rel_tol=1e-9):
            return False
    return True


def golden_misses(golden: Iterable[GoldenFigure], figures: Iterable[Figure]) -> tuple[Miss, ...]:
    """Every golden figure the run missed: out of tolerance, or not measured."""
    figures = tuple(figures)
    out = []
    for g in golden:
        unit = FIGURE_CATALOGUE[g.name][0]
        matched = [f for f in figures if f.name == g.name and _holds(f, g.conditions)]
        against = f"{g.value:g} ± {g.tolerance:g} {unit}"
        if not matched:
            out.append(Miss(g.name, conditions_text(g.conditions), against, "not measured",
                            math.nan, unit, f"golden {g.where}"))
            continue
        for f in matched:
            off = f.value - g.value if f.is_number else math.nan
            if not (math.isfinite(off) and abs(off) <= g.tolerance):
                by = abs(off) - g.tolerance if math.isfinite(off) else math.nan
                out.append(Miss(g.name, conditions_text(f.conditions), against, f.text(3),
                                by, unit, f"golden {g.where}"))
    return tuple(out)


def golden_text(figures: Iterable[Figure], *, sequence_name: str, tolerance_db: float,
                tolerance_a: float) -> str:
    """The golden-figures file for a run's figures (plain numbers of :data:`RECORDED`;
    ``tolerance_db`` for dB/dBm figures, ``tolerance_a`` for currents)."""
    lines = [
        f"# Golden figures of {sequence_name}: written by `sweeprig golden write`; a test run",
        "# of the sequence fails when a figure leaves value ± tolerance. Refresh on purpose.",
        "format = 1",
        f'sequence = "{sequence_name}"',
    ]
    for f in figures:
        if f.name not in RECORDED or not f.is_number:
            continue
        unit = FIGURE_CATALOGUE[f.name][0]
        tol = tolerance_a if unit == "A" else tolerance_db
        cond = ", ".join(
            f'{k} = "{v}"' if isinstance(v, str) else f"{k} = {float(v)!r}"
            for k, v in f.conditions.items() if isinstance(v, str | int | float))
        lines += ["", "[[figure]]", f'name = "{f.name}"', f"value = {f.value!r}",
                  f"tolerance = {tol!r}", f"conditions = {{ {cond} }}"]
    return "\n".join(lines) + "\n"
