"""One sequence file as a test: static check, pre-flight, a run on the simulated bench,
judged against the sequence's own ``[[spec]]`` limits (and its golden figures, if any).

:func:`test_sequence` does it all and returns a :class:`SequenceVerdict`;
:func:`miss_table` renders what missed as a plain-text table (figure, conditions, limit or
expected value, measured value, missed by). Nothing here knows pytest.
"""

from __future__ import annotations

import math
import tempfile
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from pathlib import Path

from sweeprig.analysis.figures import FIGURE_CATALOGUE, Figure
from sweeprig.analysis.limits import FAIL, INCONCLUSIVE, Judgement

#: Condition keys shown in the table, with their display (SI value → text).
_SHOWN = (("study", None), ("temperature_c", ("degC", 1.0)), ("supply_v", ("V", 1.0)),
          ("rf_freq_hz", ("GHz", 1e-9)), ("lo_power_dbm", ("dBm LO", 1.0)),
          ("rf_power_dbm", ("dBm RF", 1.0)))


@dataclass(frozen=True)
class Miss:
    """One figure that missed: what, where (conditions text), against what, its value, and
    by how much (in the figure's unit; NaN when not a number, e.g. a flagged figure)."""

    figure: str
    conditions: str
    against: str
    value: str
    missed_by: float
    unit: str
    why: str = ""


@dataclass(frozen=True)
class SequenceVerdict:
    """A sequence run as a test: ``failed`` limit checks and golden misses make it fail;
    ``inconclusive`` ones are reported (and fail it only when asked to be strict)."""

    sequence: Path
    run_verdict: str
    failed: tuple[Miss, ...]
    inconclusive: tuple[Miss, ...]
    golden: tuple[Miss, ...]
    notes: tuple[str, ...] = ()
    figures: tuple[Figure, ...] = field(default=(), repr=False)
    sim_part: str = ""

    def passed(self, *, strict: bool = False) -> bool:
        """True when nothing failed (and, with ``strict``, nothing was inconclusive)."""
        return not (self.failed or self.golden or (strict and self.inconclusive))


def conditions_text(conditions: Mapping[str, object]) -> str:
    """The conditions a figure was measured under, short: ``gain, 25 degC, 2.4 GHz``."""
    parts = []
    for key, show in _SHOWN:
        if key not in conditions:
            continue
        value = conditions[key]
        if show is None:
            parts.append(str(value))
        elif isinstance(value, int | float):
            parts.append(f"{float(value) * show[1]:g} {show[0]}")
    return ", ".join(parts)


def _missed_by(j: Judgement) -> float:
    value, limit = j.figure.value, j.limit
    if not math.isfinite(value):
        return math.nan
    gaps = []
    if limit.min is not None:
        gaps.append(limit.min - value)
    if limit.max is not None:
        gaps.append(value - limit.max)
    return max(gaps) if gaps else math.nan


def limit_misses(judgements: Iterable[Judgement], verdict: str) -> tuple[Miss, ...]:
    """The judgements of ``verdict`` (fail or inconclusive) as table rows."""
    out = []
    for j in judgements:
        if j.verdict != verdict:
            continue
        unit = FIGURE_CATALOGUE.get(j.figure.name, ("", ""))[0]
        out.append(Miss(j.figure.name, conditions_text(j.figure.conditions),
                        j.limit.text(), j.figure.text(3), _missed_by(j), unit, j.reason))
    return tuple(out)


def miss_table(rows: Iterable[Miss], title: str) -> str:
    """``rows`` as an aligned plain-text table under ``title`` (empty string for no rows)."""
    rows = list(rows)
    if not rows:
        return ""
    head = ("figure", "conditions", "limit / expected", "measured", "missed by", "why")
    body = [(r.figure, r.conditions, r.against, r.value,
             f"{r.missed_by:.3f} {r.unit}".strip() if math.isfinite(r.missed_by) else "-",
             r.why) for r in rows]
    widths = [max(len(str(x)) for x in col) for col in zip(head, *body, strict=True)]
    lines = [title, "  ".join(h.ljust(w) for h, w in zip(head, widths, strict=True)).rstrip(),
             "  ".join("-" * w for w in widths)]
    lines += ["  ".join(str(c).ljust(w) for c, w in zip(row, widths, strict=True)).rstrip()
              for row in body]
    return "\n".join(lines)


#: The simulated bench a sequence test runs on unless told otherwise: the nearly error-free
#: one, so the figures judged are the part's (or its twin's) own. The default simulated bench
#: carries a real bench's errors (sources up to 1 dB off) that only a calibration removes; a
#: sequence judged there fails or is inconclusive for the bench's sake, not the sequence's.
SEQUENCE_SIM_BENCH = "clean"


def test_sequence(sequence_path: Path, *, bench_path: Path | None = None,
                  store_folder: Path | None = None, use_golden: bool = True,
                  sim_description: str | Path | None = SEQUENCE_SIM_BENCH) -> SequenceVerdict:
    """Check, pre-flight, run on the simulated bench and judge one sequence.

    ``bench_path``: the bench the sequence is meant for (pre-flight only; the run is always
    on the simulated bench, with the sequence's ``[part] sim_part`` or the bench's own part).
    ``sim_description``: that simulated bench (a shipped name or a sim-bench file; default
    :data:`SEQUENCE_SIM_BENCH`; ``None``: the default simulated bench, with its errors).
    Raises :class:`~sweeprig.errors.SweeprigError` for a sequence that does not load or that
    the pre-flight refuses, and for a golden-figures file that is wrong (``use_golden``
    False: the golden file is not read, as when it is about to be rewritten).
    """
    from sweeprig.analysis.reduce import reduce_run
    from sweeprig.engine.session import load_run_files, run_loaded
    from sweeprig.seqtest.golden import golden_misses, golden_path, load_golden
    from sweeprig.store.sqlite import SqliteRunStore

    if bench_path is not None:  # the named bench: its limits, its resources, no instrument
        load_run_files(sequence_path, bench_path, sim=False)
    files = load_run_files(sequence_path, None, sim=True, sim_description=sim_description)
    golden_file = golden_path(sequence_path)
    golden = load_golden(golden_file) if use_golden and golden_file.is_file() else None
    with tempfile.TemporaryDirectory(prefix="sweeprig-seqtest-", dir=store_folder) as folder:
        store = Path(folder) / "run.sqlite"
        outcome = run_loaded(files, store_path=store, sim_description=sim_description)
        with SqliteRunStore(store, create=False) as db:
            run = reduce_run(db, outcome.run_id)
    notes = list(run.notes)
    if outcome.status != "complete":
        notes.insert(0, f"the run ended {outcome.status}: {outcome.reason or ''}".strip())
    judgements = run.assessment.judgements
    return SequenceVerdict(
        sequence=sequence_path,
        run_verdict=run.verdict,
        failed=limit_misses(judgements, FAIL) + _run_problem(outcome.status, outcome.reason),
        inconclusive=limit_misses(judgements, INCONCLUSIVE),
        golden=golden_misses(golden, run.figures) if golden is not None else (),
        notes=tuple(notes),
        figures=run.figures,
        sim_part=str(files.sequence.part.sim_part or ""),
    )


def _run_problem(status: str, reason: str | None) -> tuple[Miss, ...]:
    if status == "complete":
        return ()
    return (Miss("(the run)", "", "complete", status, math.nan, "", reason or ""),)
