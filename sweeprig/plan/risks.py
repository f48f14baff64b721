"""Before the run: which planned readings cannot be trusted, and why.

Every analyzer reading carries the risks the planner predicts at its settings
(:mod:`sweeprig.plan.readings`, :mod:`sweeprig.plan.margins`). :func:`survey_risks` gathers
them over the plan (readings do not depend on the temperature or the supply, so one pass stands
for all), with the figures that were assumed rather than stated; :func:`risk_error` is the
refusal when the sequence's ``[analyzer] on_risk = "refuse"``.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from sweeprig.errors import InputError
from sweeprig.formats.bench import ASSUMED, SOURCE_ROLES, Bench
from sweeprig.formats.sequence import Sequence
from sweeprig.plan.expand import Layout, PointBuilder
from sweeprig.plan.readings import DEFAULT_PART_NOISE_FIGURE_DB

#: Points of one pass planned exactly; a bigger pass is sampled evenly.
EXACT_POINTS = 2_000

#: What each risk means, in one line (for check and plan).
RISK_MEANINGS: dict[str, str] = {
    "analyzer_compression": "the analyzer's first mixer compresses or overloads",
    "analyzer_distortion": "the analyzer's own distortion is within the distortion margin",
    "source_harmonic": "a source harmonic lands on the product within the distortion margin",
    "reciprocal_mixing": "the analyzer's phase noise on a neighbour is within the noise margin",
    "noise": "the noise in the RBW is within the noise margin",
    "rbw_merged": "another line is too close for the RBW to separate",
    "above_reference": "the analyzer input is above the reading's reference level (the "
    "analyzer may call the reading uncalibrated)",
}


@dataclass(frozen=True)
class RiskGroup:
    """Readings of one name in one study that share a risk."""

    study: str
    study_index: int
    reading: str
    risk: str
    count: int
    first_point: int
    reason: str


@dataclass(frozen=True)
class RiskSurvey:
    """The plan's risks: groups, counts over the whole run, and the assumptions behind them."""

    groups: tuple[RiskGroup, ...]
    readings_total: int
    readings_at_risk: int
    assumptions: tuple[str, ...]
    notes: tuple[str, ...] = ()

    def counts(self) -> dict[str, int]:
        """Readings carrying each risk, over the whole run."""
        out: dict[str, int] = {}
        for g in self.groups:
            out[g.risk] = out.get(g.risk, 0) + g.count
        return out


def assumptions(sequence: Sequence, bench: Bench) -> tuple[str, ...]:
    """The figures the predictions use that neither file states."""
    if not any(r.kind not in ("supply_current", "input_power")
               for s in sequence.study for r in s.readings()):
        return ()
    specs = bench.analyzer_specs()
    out: list[str] = []
    texts = {
        "noise_figure": f"analyzer noise figure {specs.noise_figure_db:g} dB "
                        "(roles.sa.noise_figure)",
        "toi": f"analyzer third-order intercept {specs.toi_dbm:+g} dBm ([analyzer] toi)",
        "soi": f"analyzer second-order intercept {specs.soi_dbm:+g} dBm ([analyzer] soi)",
        "p1db": f"analyzer 1 dB compression {specs.p1db_dbm:+g} dBm ([analyzer] p1db)",
        "overload": f"analyzer overload level {specs.overload_dbm:+g} dBm ([analyzer] overload)",
        "phase_noise": "analyzer phase noise " + ", ".join(
            f"{lv:g} dBc/Hz at {_freq(o)}" for o, lv in specs.phase_noise)
        + " ([analyzer] phase_noise)",
    }
    for name in ("noise_figure", "toi", "soi", "p1db", "overload", "phase_noise"):
        if name in specs.assumed:
            out.append(f"{texts[name]}: {ASSUMED}")
    roles = ["rf", "lo"] + (["rf2"] if sequence.uses_two_tone() else [])
    for role in SOURCE_ROLES:
        if role not in roles:
            continue
        levels, assumed = bench.source_harmonics_dbc(role)
        if assumed:
            out.append(f"{role} source harmonics {', '.join(f'{h:g}' for h in levels)} dBc "
                       f"([sources.{role}] harmonics): {ASSUMED}")
    if sequence.part.expected_noise_figure is None:
        nf = max(DEFAULT_PART_NOISE_FIGURE_DB, -sequence.part.expected_gain + 3.0)
        out.append(f"part noise figure {nf:g} dB ([part] expected_noise_figure): assumed, not "
                   "stated by the sequence")
    return tuple(out)


def survey_indices(lay: Layout, exact_points: int = EXACT_POINTS) -> list[int]:
    """The points :func:`survey_risks` plans: every point of one pass, or ``exact_points``
    of them spread evenly over a bigger pass."""
    size = lay.pass_size
    if size <= exact_points:
        return list(range(size))
    step = size / exact_points
    return sorted({int(k * step) for k in range(exact_points)})


def survey_risks(sequence: Sequence, bench: Bench, *,
                 exact_points: int = EXACT_POINTS,
                 builder: PointBuilder | None = None) -> RiskSurvey:
    """Plan every reading of one pass (sampled evenly above ``exact_points``) and gather
    the readings whose predictions fall within their margins. ``builder``: the points'
    builder of the caller (for points it has kept, :func:`survey_indices`), else a new one
    for ``sequence`` and ``bench``."""
    if builder is None:
        builder = PointBuilder(sequence, bench)
    lay = builder.layout
    passes = lay.n_temperatures * lay.n_supplies
    size = lay.pass_size
    notes: tuple[str, ...] = ()
    indices = survey_indices(lay, exact_points)
    if size <= exact_points:
        scale = float(passes)
    else:
        scale = passes * size / len(indices)
        notes = (f"risks predicted at {len(indices):,} of {size:,} points per pass and "
                 "scaled",)
    found: dict[tuple[int, str, str], list[Any]] = {}
    total = at_risk = 0
    for index in indices:
        point = builder.point(index)
        for reading in point.readings:
            if reading.instrument not in ("sa", "noise"):  # noise: sweeprig.plan.noise_setup
                continue
            total += 1
            if not reading.risks:
                continue
            at_risk += 1
            reasons = reading.predicted.reasons if reading.predicted is not None else ()
            for i, risk in enumerate(reading.risks):
                key = (point.study_index, reading.name, risk)
                if key not in found:
                    found[key] = [point.study, 0, point.index,
                                  reasons[i] if i < len(reasons) else ""]
                found[key][1] += 1
    groups = tuple(
        RiskGroup(study=v[0], study_index=k[0], reading=k[1], risk=k[2],
                  count=round(v[1] * scale), first_point=v[2], reason=v[3])
        for k, v in sorted(found.items(), key=lambda kv: (kv[0][0], kv[1][2], kv[0][1],
                                                          kv[0][2])))
    return RiskSurvey(groups, round(total * scale), round(at_risk * scale),
                      assumptions(sequence, bench), notes)


def summary_lines(survey: RiskSurvey, limit: int = 12) -> list[str]:
    """One line per group (at most ``limit``, then how many more)."""
    lines = [f"{g.study}: {g.reading}: {g.risk} ({RISK_MEANINGS.get(g.risk, g.risk)}) in "
             f"{g.count:,} reading(s), e.g. point {g.first_point}: {g.reason}"
             for g in survey.groups]
    if len(lines) > limit:
        more = f"... and {len(lines) - limit} more (sweeprig plan lists them all)"
        lines = [*lines[:limit], more]
    return lines


def headline(survey: RiskSurvey) -> str:
    counts = ", ".join(f"{risk} {n:,}" for risk, n in sorted(survey.counts().items()))
    return (f"{survey.readings_at_risk:,} of {survey.readings_total:,} analyzer readings "
            f"cannot be trusted as planned ({counts}): the run records each risk with the "
            "reading so the analysis can flag it")


def risk_error(sequence: Sequence, survey: RiskSurvey) -> InputError:
    """The refusal of a sequence with ``on_risk = "refuse"`` and readings at risk."""
    first = survey.groups[0]
    return InputError(
        f"{headline(survey).split(':')[0]}; first: study {first.study!r} reading "
        f"{first.reading!r}: {first.risk} ({RISK_MEANINGS.get(first.risk, first.risk)}): "
        f"{first.reason}",
        where=sequence.where(("study", first.study_index, "read")),
        fix="change the analyzer settings or the drive levels of these readings, state the "
        "bench's analyzer and source figures where they are assumed, or set [analyzer] "
        'on_risk = "warn" to measure them with the risk recorded (`sweeprig plan` lists '
        "every reading at risk)")


def _freq(hz: float) -> str:
    for unit, size in (("GHz", 1e9), ("MHz", 1e6), ("kHz", 1e3)):
        if hz >= size:
            return f"{hz / size:g} {unit}"
    return f"{hz:g} Hz"
