"""Predicted duration of a plan on a real bench (the simulated bench runs on virtual time).

Adds up, per point: the settling time after the source changes (``conditions.settle``, once
per point and once more per image reading, which retunes the RF), the analyzer sweeps
(2.5·span/RBW² per sweep × averages, at least 1 ms — common practice, no single source), and
a fixed overhead per instrument command. Per temperature: the chamber ramp (|ΔT| at
``ramp_c_per_min``, starting from ``start_temperature_c``) plus ``conditions.soak``. Per
supply change: one settling time.

Sweep times depend on each point's auto analyzer settings; a study with more points than
``sample_limit`` is estimated from evenly spread sample points (``DurationEstimate.sampled``).
"""

from __future__ import annotations

from dataclasses import dataclass, field

from sweeprig.formats.bench import Bench
from sweeprig.formats.sequence import Sequence
from sweeprig.plan.expand import PointBuilder, layout

#: Commands per point to set the sources (frequency and power of each source in use).
SOURCE_COMMANDS_PER_POINT = 4
#: Commands per analyzer reading: center, span, RBW, attenuation, reference level,
#: averages, start, wait for completion, marker position, marker read.
ANALYZER_COMMANDS_PER_READING = 10
#: Commands per power-meter or supply reading.
SIMPLE_COMMANDS_PER_READING = 2


@dataclass(frozen=True)
class StudyDuration:
    """Predicted time of one study over all conditions, s."""

    name: str
    points: int
    settle_s: float
    sweep_s: float
    overhead_s: float
    sampled: bool

    @property
    def total_s(self) -> float:
        return self.settle_s + self.sweep_s + self.overhead_s


@dataclass(frozen=True)
class DurationEstimate:
    """Predicted real-bench duration, s, with its parts."""

    studies: tuple[StudyDuration, ...]
    chamber_s: float
    supply_s: float
    sampled: bool = False
    notes: tuple[str, ...] = field(default=())

    @property
    def settle_s(self) -> float:
        return sum(s.settle_s for s in self.studies) + self.supply_s

    @property
    def sweep_s(self) -> float:
        return sum(s.sweep_s for s in self.studies)

    @property
    def overhead_s(self) -> float:
        return sum(s.overhead_s for s in self.studies)

    @property
    def total_s(self) -> float:
        return sum(s.total_s for s in self.studies) + self.chamber_s + self.supply_s


def estimate_duration(
    sequence: Sequence,
    bench: Bench | None = None,
    *,
    command_overhead_s: float = 0.01,
    ramp_c_per_min: float = 5.0,
    start_temperature_c: float = 23.0,
    sample_limit: int = 500,
) -> DurationEstimate:
    """Predict how long the plan takes on a real bench (see the module docstring).

    ``command_overhead_s``: time per SCPI command round trip (10 ms: common practice for
    LAN instruments, no single source). ``ramp_c_per_min``: chamber air ramp rate (the
    simulated chamber's default is 5 degC/min).
    """
    lay = layout(sequence)
    builder = PointBuilder(sequence, bench)
    settle = sequence.conditions.settle
    passes = lay.n_temperatures * lay.n_supplies
    studies: list[StudyDuration] = []
    any_sampled = False
    for block in lay.blocks:
        first = lay.first_index(0, 0, block)
        if block.count <= sample_limit:
            locals_ = list(range(block.count))
            sampled = False
        else:
            step = block.count / sample_limit
            locals_ = sorted({int(k * step) for k in range(sample_limit)})
            sampled = True
            any_sampled = True
        settle_s = sweep_s = overhead_s = 0.0
        for local in locals_:
            point = builder.point(first + local)
            settle_s += settle
            commands = SOURCE_COMMANDS_PER_POINT
            for r in point.readings:
                if r.analyzer is not None:
                    sweep_s += r.analyzer.measure_time_s
                    commands += ANALYZER_COMMANDS_PER_READING
                else:
                    commands += SIMPLE_COMMANDS_PER_READING
                if r.rf_retune_hz is not None:
                    settle_s += settle
                    commands += 2
            overhead_s += commands * command_overhead_s
        scale = block.count / len(locals_) * passes
        studies.append(StudyDuration(block.study.name, block.count * passes, settle_s * scale,
                                     sweep_s * scale, overhead_s * scale, sampled))
    chamber_s = 0.0
    if lay.temperatures is not None:
        current = start_temperature_c
        for t in lay.temperatures.all_values():
            chamber_s += abs(float(t) - current) / ramp_c_per_min * 60.0
            chamber_s += sequence.conditions.soak
            current = float(t)
    supply_s = passes * settle if lay.supplies is not None else 0.0
    notes = ("sweep times estimated from sample points",) if any_sampled else ()
    return DurationEstimate(tuple(studies), chamber_s, supply_s, any_sampled, notes)


def format_duration(seconds: float) -> str:
    """``5400`` → ``"1 h 30 min"``; short times in s."""
    if seconds < 60:
        return f"{seconds:.1f} s"
    minutes = seconds / 60.0
    if minutes < 60:
        return f"{minutes:.1f} min"
    hours, minutes = divmod(round(minutes), 60)
    if hours < 48:
        return f"{hours} h {minutes:02d} min"
    days, hours = divmod(hours, 24)
    return f"{days} d {hours} h"
