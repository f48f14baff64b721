"""A night: several parts run one after another on one bench (see
:mod:`sweeprig.formats.night`).

Every part's files are loaded and pre-flight checked before the first part runs, so a night
with one bad part runs nothing; each part is then an ordinary run (its own run id, report,
summary and next steps), and each run ends with the bench made safe and read back.
"""

from __future__ import annotations

import dataclasses
import json
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path

from sweeprig.engine.night_journal import PartEnd
from sweeprig.engine.session import LoadedFiles, load_run_files
from sweeprig.errors import InputError, SweeprigError
from sweeprig.formats.night import NightPart, NightPlan, load_night
from sweeprig.plan.duration import estimate_duration

NIGHT_SUMMARY_FORMAT = 1

__all__ = ["NightItem", "PartEnd", "night_status", "predicted_night_s", "prepare_night",
           "with_serial", "write_night_summary"]


@dataclass(frozen=True)
class NightItem:
    """One part of a loaded night: what the plan says and its checked files."""

    index: int
    part: NightPart
    files: LoadedFiles


def prepare_night(plan_path: Path, *, bench: Path | None, sim: bool,
                  sim_description: str | Path | None = None
                  ) -> tuple[NightPlan, list[NightItem]]:
    """Load the plan and every part's files, with the pre-flight check, touching no
    instrument; the first problem is an :class:`InputError` naming the plan's file and line
    (and the part's own message)."""
    plan = load_night(plan_path)
    bench_path = bench if bench is not None else plan.bench_path()
    items = []
    for i, part in enumerate(plan.part):
        try:
            files = load_run_files(plan.sequence_path(i), bench_path, sim=sim,
                                   sim_description=sim_description)
        except SweeprigError as exc:
            refusal = InputError(
                f"part[{i}] (serial {part.serial}) cannot run: {exc.message()}",
                where=plan.where(("part", i, "sequence")),
                fix="fix that part's sequence (or the bench), or leave the part out of the "
                "night; nothing has run",
            )
            refusal.exit_code = exc.exit_code  # a safety refusal stays one (exit 3)
            raise refusal from None
        items.append(NightItem(i, part, with_serial(files, part.serial)))
    return plan, items


def with_serial(files: LoadedFiles, serial: str) -> LoadedFiles:
    """``files`` with the part's serial number in place of the sequence's: the run records
    it (``runs``, ``status``, the report); the stored sequence stays the file as written, so
    a resume finds it unchanged."""
    seq = files.sequence
    sequence = seq.model_copy(update={"part": seq.part.model_copy(update={"serial": serial})})
    return dataclasses.replace(files, sequence=sequence)


def predicted_night_s(items: list[NightItem]) -> float:
    """The night's predicted bench time, s: each part's own prediction
    (:func:`~sweeprig.plan.duration.estimate_duration`, chamber travel from room temperature
    included), summed; the operator's part changes are not counted."""
    return sum(estimate_duration(i.files.sequence, i.files.bench).total_s for i in items)


def write_night_summary(folder: Path, plan_source: str, ends: list[PartEnd],
                        store: Path, predicted_s: float | None = None) -> Path:
    """Write ``night-summary.json`` into ``folder``; return its path. ``predicted_s``: the
    night's predicted bench time, written beside the measured one."""
    folder.mkdir(parents=True, exist_ok=True)
    document = {
        "format": NIGHT_SUMMARY_FORMAT,
        "written_utc": datetime.now(UTC).isoformat(timespec="seconds"),
        "plan": plan_source,
        "store": str(store),
        "status": night_status(ends),
        "bench_s": sum(end.bench_s for end in ends),
        "predicted_bench_s": predicted_s,
        "parts": [end.__dict__ for end in ends],
    }
    path = folder / "night-summary.json"
    tmp = path.with_name(path.name + ".tmp")
    tmp.write_text(json.dumps(document, indent=2, default=str) + "\n", encoding="utf-8")
    tmp.replace(path)
    return path


def night_status(ends: list[PartEnd]) -> str:
    """``complete`` when every part completed, ``unsafe`` when one ended unsafe, else
    ``partial``."""
    if any(e.status == "unsafe" for e in ends):
        return "unsafe"
    return "complete" if all(e.status == "complete" for e in ends) else "partial"
