"""Predicted duration of a plan on a real bench (the simulated bench runs on virtual time).

Adds up, per point: the settling time after the source changes (``conditions.settle``, once
per point and once more per image reading, which retunes the RF), the analyzer sweeps
(2.5·span/RBW² per sweep × averages, at least 1 ms — common practice, no single source), and
a fixed overhead per instrument command. A noise-figure reading counts its hot and cold
readings (and their repeat with more attenuation) at its averaging, RBW and span, the
settling after each switch of the noise source, and one system calibration per IF and
attenuation (:mod:`sweeprig.plan.noise_setup`). Per temperature: the chamber's way there (see
:func:`chamber_travel_s`: the air's ramp, then the wait until the DUT probe, which lags the
air, is within ``conditions.temperature_tolerance``, polled as the engine polls) plus
``conditions.soak``. Per supply change: one settling time.

With ``[conditions.adaptive_soak]`` a soak lasts between its minimum and its maximum: the
estimate counts each soak at its shortest possible end (the minimum, but not before the
first full window of readings, at the next reading) — what a part that follows the probe
takes — and says how much longer the run is if every soak runs to its maximum
(``DurationEstimate.soak_extra_max_s``, ``total_max_s``).

Sweep times depend on each point's auto analyzer settings; a study with more points than
``sample_limit`` is estimated from evenly spread sample points (``DurationEstimate.sampled``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

from sweeprig.formats.bench import Bench
from sweeprig.formats.sequence import Sequence
from sweeprig.plan.expand import PointBuilder, layout
from sweeprig.plan.noise_setup import NoiseSettings
from sweeprig.plan.noise_setup import calibration_time as noise_calibration_time
from sweeprig.plan.noise_setup import point_time as noise_point_time

#: Commands per point to set the sources (frequency and power of each source in use).
SOURCE_COMMANDS_PER_POINT = 4
#: Commands per analyzer reading: center, span, RBW, attenuation, reference level,
#: averages, start, wait for completion, marker position, marker read.
ANALYZER_COMMANDS_PER_READING = 10
#: Commands per power-meter or supply reading.
SIMPLE_COMMANDS_PER_READING = 2
#: Time constant of the DUT probe behind the chamber air, s, when the bench does not say
#: (an assumption: the simulated chamber's figure; a real one depends on the fixture).
PROBE_TAU_S = 120.0
#: How often the engine looks at the probe while it waits for the temperature, s (the
#: engine's own poll period, ``sweeprig.engine.runner.CHAMBER_POLL_S``).
CHAMBER_POLL_S = 10.0


def chamber_travel_s(from_c: float, to_c: float, *, ramp_c_per_min: float,
                     probe_tau_s: float, tolerance_c: float,
                     poll_s: float = CHAMBER_POLL_S) -> float:
    """Time from a new set point until the engine sees the DUT probe within tolerance, s.

    The air ramps linearly at ``ramp_c_per_min`` over ``|Δ|/rate``; the probe follows it as a
    first-order lag (time constant τ), so while the air ramps at rate k the probe falls
    behind by k·τ·(1 − e^(−t/τ)), and once the air holds, that lag decays as e^(−t/τ): the
    probe is within the tolerance ``τ·ln(lag/tolerance)`` after the ramp (solution of
    dP/dt = (A − P)/τ for a ramp then a step; any text on first-order systems). The engine
    looks every ``poll_s`` from the set point on, so the wait ends at the first look after.
    Both start at ``from_c`` (the previous condition held long enough).
    """
    delta = abs(to_c - from_c)
    if delta <= tolerance_c:
        return 0.0
    rate_c_per_s = ramp_c_per_min / 60.0
    ramp_s = delta / rate_c_per_s
    lag_c = rate_c_per_s * probe_tau_s * (1.0 - math.exp(-ramp_s / probe_tau_s))
    hold_s = probe_tau_s * math.log(lag_c / tolerance_c) if lag_c > tolerance_c else 0.0
    exact_s = ramp_s + hold_s
    if not math.isfinite(exact_s):
        return math.inf  # (a set point no chamber reaches: the pre-flight refuses it)
    return math.ceil(exact_s / poll_s - 1e-9) * poll_s if poll_s > 0 else exact_s


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
    soak_extra_max_s: float = 0.0
    conditions_s: tuple[tuple[float, float], ...] = ()
    """(temperature, degC; chamber travel + soak, s) for each temperature in run order."""

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

    @property
    def total_max_s(self) -> float:
        """The total if every adaptive soak runs to its maximum (= total_s without one)."""
        return self.total_s + self.soak_extra_max_s


def soak_range_s(sequence: Sequence) -> tuple[float, float]:
    """(shortest, longest) time of one soak, s: both ``conditions.soak`` for a fixed soak.

    An adaptive soak reads its criterion every ``every`` from its start and can end once
    ``minimum`` has passed and the readings cover a whole ``window``: at the first reading
    at or after both.
    """
    cond = sequence.conditions
    adaptive = cond.adaptive_soak
    if adaptive is None:
        return float(cond.soak), float(cond.soak)
    longest = float(cond.soak if adaptive.maximum is None else adaptive.maximum)
    earliest = max(float(adaptive.minimum), float(adaptive.window))
    every = float(adaptive.every)
    shortest = math.ceil(earliest / every - 1e-9) * every if every > 0 else earliest
    return min(shortest, longest), longest


def estimate_duration(
    sequence: Sequence,
    bench: Bench | None = None,
    *,
    command_overhead_s: float = 0.01,
    ramp_c_per_min: float = 5.0,
    start_temperature_c: float = 23.0,
    sample_limit: int = 500,
    probe_tau_s: float = PROBE_TAU_S,
    planned: PointBuilder | None = None,
) -> DurationEstimate:
    """Predict how long the plan takes on a real bench (see the module docstring).

    ``planned``: a builder of the same sequence and bench holding points already planned
    (the pre-flight's): the points it keeps are not planned again.

    ``command_overhead_s``: time per SCPI command round trip (10 ms: common practice for
    LAN instruments, no single source). ``ramp_c_per_min``: chamber air ramp rate (the
    simulated chamber's default is 5 degC/min). ``probe_tau_s``: the DUT probe's lag behind
    the air (:data:`PROBE_TAU_S` when not known).
    """
    lay = layout(sequence)
    builder = (planned if planned is not None and planned.sequence is sequence
               and planned.bench is bench else PointBuilder(sequence, bench))
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
        calibrations: dict[tuple[float | None, float], NoiseSettings] = {}
        for local in locals_:
            point = builder.point(first + local)
            settle_s += settle
            commands = SOURCE_COMMANDS_PER_POINT
            for r in point.readings:
                if r.noise is not None:  # hot/cold readings: sweeprig.plan.noise_setup
                    t = noise_point_time(r.noise)
                    sweep_s += t.sweep_s
                    settle_s += t.settle_s
                    commands += t.commands
                    calibrations.setdefault((r.freq_hz, r.noise.attenuation_db), r.noise)
                elif r.analyzer is not None:
                    sweep_s += r.analyzer.measure_time_s
                    commands += ANALYZER_COMMANDS_PER_READING
                else:
                    commands += SIMPLE_COMMANDS_PER_READING
                if r.rf_retune_hz is not None:
                    settle_s += settle
                    commands += 2
            overhead_s += commands * command_overhead_s
        scale = block.count / len(locals_) * passes
        cal_sweep_s = cal_settle_s = cal_overhead_s = 0.0
        for settings in calibrations.values():  # once per run at each IF and attenuation
            t = noise_calibration_time(settings)
            cal_sweep_s += t.sweep_s
            cal_settle_s += t.settle_s
            cal_overhead_s += t.commands * command_overhead_s
        calibrations.clear()
        studies.append(StudyDuration(block.study.name, block.count * passes,
                                     settle_s * scale + cal_settle_s,
                                     sweep_s * scale + cal_sweep_s,
                                     overhead_s * scale + cal_overhead_s, sampled))
    chamber_s = 0.0
    soak_s, soak_max_s = soak_range_s(sequence)
    extra_max_s = 0.0
    per_condition: list[tuple[float, float]] = []
    if lay.temperatures is not None:
        current = start_temperature_c
        tolerance_c = float(sequence.conditions.temperature_tolerance)
        for t in lay.temperatures.all_values():
            travel_s = chamber_travel_s(current, float(t), ramp_c_per_min=ramp_c_per_min,
                                        probe_tau_s=probe_tau_s, tolerance_c=tolerance_c)
            per_condition.append((float(t), travel_s + soak_s))
            chamber_s += travel_s + soak_s
            extra_max_s += soak_max_s - soak_s
            current = float(t)
    supply_s = passes * settle if lay.supplies is not None else 0.0
    notes: tuple[str, ...] = ("sweep times estimated from sample points",) if any_sampled else ()
    if sequence.conditions.adaptive_soak is not None and lay.temperatures is not None:
        notes += (f"adaptive soak: each soak counted at its shortest, "
                  f"{format_duration(soak_s)}; up to {format_duration(extra_max_s)} more if "
                  f"every soak runs to its maximum of {format_duration(soak_max_s)}",)
    return DurationEstimate(tuple(studies), chamber_s, supply_s, any_sampled, notes,
                            extra_max_s, tuple(per_condition))


def format_duration(seconds: float) -> str:
    """``5400`` → ``"1 h 30 min"``; short times in s; a time without end (a set point no
    chamber reaches) as ``"no end"``."""
    if not math.isfinite(seconds):
        return "no end"
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
