"""Night plans: several parts, one after another, on one bench (sweeprig's own format).

A night plan names a sequence and a serial number per part; ``sweeprig night`` runs them in
order, the bench made safe between parts and the operator asked to change the part where it
must be changed by hand. Every key is documented in ``docs/sequence-format.md`` ("Night
plans"); :func:`load_night` is the entry point.
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Literal

from pydantic import Field, PrivateAttr

from sweeprig.errors import InputError
from sweeprig.formats.fields import Frozen, LocatedFile, StrictBool
from sweeprig.formats.loading import load_document, validate

_SERIAL_PATTERN = r"^[^\x00-\x1f\x7f]{1,64}$"


class NightPart(Frozen):
    """One part of the night: its sequence and its serial number."""

    sequence: str = Field(min_length=1, description="sequence file (relative to the plan)")
    serial: str = Field(pattern=_SERIAL_PATTERN, description="the part's serial number (it "
                        "replaces the sequence's [part] serial for this run)")


class NightSettings(Frozen):
    """How the night runs."""

    bench: str | None = Field(None, description="bench file (relative to the plan); the "
                              "command line's --bench or --sim wins")
    change: Literal["by_hand", "none"] = Field(
        "by_hand", description="by_hand: between parts the bench is made safe and the "
        "operator is asked to change the part and confirm; none: the parts need no change "
        "(the same part measured again, or a fixture sweeprig does not drive)")
    stop_on_abort: StrictBool = Field(
        False, description="true: a part's abort ends the night; false: the next part runs "
        "(a bench not proven safe always ends the night)")


class NightPlan(LocatedFile):
    """A whole night plan file."""

    format: Literal[1] = Field(1, description="version of this file format")
    night: NightSettings = Field(default_factory=NightSettings)
    part: tuple[NightPart, ...] = Field(min_length=1, description="the parts, in order")
    _path: str | None = PrivateAttr(None)

    def sequence_path(self, index: int) -> Path:
        """The sequence file of part ``index``, resolved against the plan's folder."""
        return self._folder() / self.part[index].sequence

    def bench_path(self) -> Path | None:
        """The plan's bench file, resolved against its folder (None when not given)."""
        return None if self.night.bench is None else self._folder() / self.night.bench

    def _folder(self) -> Path:
        return Path(self._path).parent if self._path else Path(".")


NIGHT_DOCS = "docs/sequence-format.md"


def load_night(path: str | os.PathLike[str]) -> NightPlan:
    """Read and validate a night plan; a missing sequence file or a serial number given
    twice is an :class:`InputError` naming the plan's file and line."""
    doc = load_document(path)
    plan = validate(NightPlan, doc, docs=NIGHT_DOCS)
    plan._where = doc.where
    plan._source = doc.display
    plan._path = str(path)
    seen: dict[str, int] = {}
    for i, part in enumerate(plan.part):
        if part.serial in seen:
            raise InputError(f"serial number {part.serial!r} is given twice "
                             f"(part[{seen[part.serial]}] and part[{i}])",
                             where=plan.where(("part", i, "serial")),
                             fix="give every part its own serial number; to measure one part "
                             "twice, run it twice on different nights or tell them apart, "
                             'e.g. "L07-0012-b"')
        seen[part.serial] = i
        sequence = plan.sequence_path(i)
        if not sequence.is_file():
            raise InputError(f"the sequence file {part.sequence!r} does not exist "
                             f"(looked for {sequence})",
                             where=plan.where(("part", i, "sequence")),
                             fix="give the sequence file's path relative to the night plan")
    bench = plan.bench_path()
    if bench is not None and not bench.is_file():
        raise InputError(f"the bench file {plan.night.bench!r} does not exist (looked for "
                         f"{bench})", where=plan.where(("night", "bench")),
                         fix="give the bench file's path relative to the night plan, or "
                         "--bench / --sim on the command line")
    return plan
