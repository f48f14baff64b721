"""What the uncertainty budgets take from a run: the bench file's ``[uncertainty]`` table as
:class:`InstrumentSpecs`, and the calibration stored with the run as a
:class:`CalibrationState`.

A run's figures are reduced from the store, so the specifications come from the bench text
stored with the run (the bench file as it was when the run started). A value the table leaves
out keeps its default, marked in the budget as an assumption.
"""

from __future__ import annotations

import tomllib
from collections.abc import Iterable
from dataclasses import dataclass, replace

from pydantic import ValidationError

from sweeprig.analysis.uncertainty import (
    UNCALIBRATED,
    CalibrationState,
    InstrumentSpecs,
    Spec,
)
from sweeprig.errors import SweeprigError
from sweeprig.formats.bench import SpecLimit, UncertaintySpecs
from sweeprig.formats.calibration import INPUT_CONNECTIONS, OUTPUT_CONNECTIONS
from sweeprig.store.base import EventRecord
from sweeprig.units import parse_quantity

_SPEC_KEYS = ("input_level", "output_path", "analyzer_absolute", "analyzer_linearity",
              "power_meter")


@dataclass(frozen=True)
class BenchSpecs:
    """The specifications, whether limits are judged with a guard band, and remarks."""

    specs: InstrumentSpecs
    guard_band: bool = False
    notes: tuple[str, ...] = ()


def specs_from_table(table: UncertaintySpecs, source: str = "bench file") -> BenchSpecs:
    """Specifications from a validated ``[uncertainty]`` table (``source`` names the file)."""
    specs = InstrumentSpecs()
    changes: dict[str, object] = {}
    for key in _SPEC_KEYS:
        value = getattr(table, key)
        if value is None:
            continue
        origin = f"{source} [uncertainty].{key}"
        if isinstance(value, SpecLimit):
            changes[key] = Spec(float(value.value), value.shape, origin)
        else:
            changes[key] = Spec(float(value), "rectangular", origin)
    if table.bench_match is not None or table.part_match is not None:
        changes["bench_match"] = (table.bench_match if table.bench_match is not None
                                  else specs.bench_match)
        changes["part_match"] = (table.part_match if table.part_match is not None
                                 else specs.part_match)
        given = [k for k in ("bench_match", "part_match") if getattr(table, k) is not None]
        changes["match_origin"] = f"{source} [uncertainty].{' and '.join(given)}" + (
            "" if len(given) == 2 else "; the other a default (assumption)")
    return BenchSpecs(replace(specs, **changes), table.guard_band)  # type: ignore[arg-type]


def specs_from_bench_text(text: str | None, source: str = "bench file") -> BenchSpecs:
    """Specifications from a bench file's text (as stored with a run). A missing table gives
    the defaults; an unreadable one the defaults and a note saying why."""
    if not text:
        return BenchSpecs(InstrumentSpecs(), notes=(
            "no bench file is stored with the run: the uncertainty budgets use default "
            "instrument specifications (assumptions)",))
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        return BenchSpecs(InstrumentSpecs(), notes=(
            f"the stored bench file is not valid TOML ({exc}): the uncertainty budgets use "
            "default instrument specifications (assumptions)",))
    raw = data.get("uncertainty")
    if raw is None:
        return BenchSpecs(InstrumentSpecs())
    try:
        table = UncertaintySpecs.model_validate(raw)
    except ValidationError as exc:
        first = exc.errors()[0]
        where = ".".join(str(p) for p in first.get("loc", ()))
        return BenchSpecs(InstrumentSpecs(), notes=(
            f"the stored bench file's [uncertainty] table could not be read ({where}: "
            f"{first.get('msg', '')}): the budgets use default specifications (assumptions)",))
    for key in ("bench_match", "part_match"):
        gamma = getattr(table, key)
        if gamma is not None and not 0.0 <= gamma < 1.0:
            return BenchSpecs(InstrumentSpecs(), notes=(
                f"the stored bench file's [uncertainty].{key} = {gamma:g} is not a |Γ| "
                "(0 to below 1): the budgets use default specifications (assumptions)",))
    return specs_from_table(table, source)


def calibration_state(events: Iterable[EventRecord]) -> tuple[CalibrationState, str | None]:
    """What the run's calibration corrected, from the calibration stored with the run (its
    ``calibration`` event), and a note naming it (and any warning the run recorded about
    it, such as an accepted expiry); uncalibrated and None without one."""
    events = list(events)
    warnings = [e.message for e in events if e.kind == "calibration" and e.severity == "warning"]
    for event in events:
        if event.kind != "calibration" or "text" not in event.details:
            continue
        try:
            data = tomllib.loads(str(event.details["text"]))
        except tomllib.TOMLDecodeError:
            return UNCALIBRATED, ("the calibration stored with the run cannot be read: the "
                                  "budgets treat the run as uncalibrated")
        tables = data.get("loss", {}) if isinstance(data.get("loss"), dict) else {}
        repeatability = None
        raw = data.get("repeatability")
        if raw is not None:
            try:
                repeatability = parse_quantity(raw, "level_db")
            except SweeprigError:
                repeatability = None
        path = str(event.details.get("path", "calibration"))
        state = CalibrationState(
            connections=frozenset(c for c in tables if c in (*INPUT_CONNECTIONS,
                                                                *OUTPUT_CONNECTIONS)),
            repeatability_db=repeatability,
            origin=f"{path} repeatability")
        note = f"figures corrected by the {event.message} (stored with the run)"
        return state, note + "".join(f"; WARNING: {w}" for w in warnings)
    return UNCALIBRATED, None
