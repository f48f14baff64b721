"""The bench file's ``[uncertainty]`` table as :class:`InstrumentSpecs` for the budgets.

A run's figures are reduced from the store, so the specifications come from the bench text
stored with the run (the bench file as it was when the run started). A value the table leaves
out keeps its default, marked in the budget as an assumption.
"""

from __future__ import annotations

import tomllib
from dataclasses import dataclass, replace

from pydantic import ValidationError

from sweeprig.analysis.uncertainty import InstrumentSpecs, Spec
from sweeprig.formats.bench import SpecLimit, UncertaintySpecs

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
