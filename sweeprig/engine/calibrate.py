"""Source power calibration at the DUT's RF input plane, with the bench's power meter.

For each RF source connection a sequence uses (``rf``, and ``rf2`` in two-tone studies) and
every frequency it needs there, the source is set to a known level, the power meter (its
sensor at the DUT RF port plane, as the bench file describes it) reads what arrives, and the
loss of the connection is the setting minus the reading: cables, combiner and the source's own
level error together. The whole sweep is repeated (``repeats``) and the spread between the
repeats is the calibration's repeatability. The result is a calibration file
(:mod:`sweeprig.formats.calibration`) with the instruments' ``*IDN?`` replies, the chamber
probe's (or the given) temperature and an expiry.

Levels: a source's level error changes with its setting as well as with frequency, so each
source connection is measured over a grid of levels at the DUT plane as well as over the
frequencies: by default the levels the sequence gives that source, from the lowest to the
highest in steps of at most :data:`LEVEL_STEP_DB` (both ends included), or the grid the
caller gives (``levels``). The table stores, at each frequency and grid level, the loss that
puts exactly that level at the plane (interpolated between the levels actually read there);
a run interpolates it in frequency and level and refuses a point outside it. Levels above
the sensor's comfortable range (:func:`level_cap_dbm`) are not measured: the points that
need them are refused by the run's pre-flight check, which names them.

Where the bench's switch routes the sensor to the DUT LO input plane (``pm_lo``), the LO
source is measured there the same way. Where it can put a calibration thru in the part's
place (``thru``, and ``part`` to put the part back), the output paths are measured too
(receiver calibration): the RF source, through the thru, puts a tone on each output path at
every frequency the sequence reads there; the power meter reads the tone at the DUT RF plane
and the analyzer what arrives at its input; the path's loss is the difference, the
analyzer's own level error included (it is the instrument that reads the run). Connections
the bench cannot reach by itself keep the bench file's typed losses, and the command says so.

The power meter: before its first reading calibrate switches every source off and zeroes the
sensor where the bench file asks for it (``[sensor] zero``, the profile's ``zero`` action),
then reads the zeroing back (the profile's ``zeroed`` flag and a reading with RF off). Each
reading is the meter's average of ``[sensor] averages`` readings, corrected by the sensor's
calibration factor at its frequency (``[sensor] cal_factor``, :mod:`sweeprig.formats.sensor`).

Closed-loop levelling (``levelling=True``): at each frequency the source is set, read, and
set again by the difference until the meter reads the target level within
:data:`LEVEL_TOLERANCE_DB` (at most :data:`LEVEL_MAX_ITERATIONS` settings, never above the
bench's source limit); the loss is then measured at the very level the part will be given.

Attended calibration (``operator``): where the bench's switch has no route for the sensor
(``pm_rf``, ``pm_lo``), every source is switched off and the operator is told which cable to
move, step by step; ``operator`` returns False (end of input) to stop, RF off, nothing written.

Safety: the level at the DUT plane is low for the output paths (at most −10 dBm, and 10 dB
under the part's RF rating and the sensor's limit) and, for a source's level grid, within
the levels the sequence gives that source (already checked against the part's ratings by the
run's pre-flight) and never above 10 dB under the sensor's limit; every source setting goes
through the drivers' limit guard; on every exit the bench is put in its safe state and read
back, RF off. A power meter that reads nonsense (NaN, out of its range, a reading far from
what the setting and the typed loss predict) ends the calibration with a message and
nothing written.
"""

from __future__ import annotations

import contextlib
import dataclasses
import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from pathlib import Path

import numpy as np

from sweeprig.clock import Clock, VirtualClock, WallClock
from sweeprig.engine.connect import BenchDrivers, open_bench
from sweeprig.engine.safe import SafeOutcome, make_safe
from sweeprig.errors import BenchUnsafeError, InputError, SweeprigError
from sweeprig.formats.bench import Bench, load_bench
from sweeprig.formats.calibration import calibration_text
from sweeprig.formats.sequence import Sequence, load_sequence
from sweeprig.instruments import available_profiles
from sweeprig.plan.expand import iter_points

#: Highest level at the DUT plane while calibrating, dBm (a sensor's and a part's comfortable
#: range; common practice, no source).
CAL_LEVEL_MAX_DBM = -10.0
#: Margin under the part's RF rating and the sensor's maximum input, dB.
CAL_MARGIN_DB = 10.0
#: Largest step between the levels of a source's calibration grid, dB: a source's level
#: error changes smoothly between its attenuator steps, so linear interpolation over 5 dB
#: leaves well under 0.01 dB there (common practice, no source; give a finer grid with
#: ``levels`` for a source with steps inside the range).
LEVEL_STEP_DB = 5.0
#: Highest level measured at a DUT plane for a source's level grid without a stated sensor
#: limit, dBm (a common sensor's +20 dBm maximum less :data:`CAL_MARGIN_DB`; common
#: practice, no source).
LEVEL_GRID_MAX_DBM = 10.0
#: A reading further than this from the level the typed loss predicts is refused as nonsense
#: (a wrong cable, a sensor on another port, a meter not zeroed), dB.
PLAUSIBLE_DB = 6.0
SETTLE_S = 0.05
#: Closed-loop levelling: the meter must read the target within this, dB (issue 10's figure).
LEVEL_TOLERANCE_DB = 0.05
#: Closed-loop levelling: at most this many settings per frequency.
LEVEL_MAX_ITERATIONS = 6
#: With every source off a zeroed sensor reads its noise (tens of dB under this), dBm; a
#: reading above it is an offset of a sensor not zeroed (common practice, no source).
ZERO_CHECK_DBM = -50.0


@dataclass(frozen=True)
class CalibrationResult:
    """What a calibration measured: per connection the frequencies, mean losses and the
    standard deviation between repeats; the pooled repeatability; simulated seconds taken;
    the connections left to their typed losses, with why; the file written."""

    tables: dict[str, tuple[list[float], list[float]]]
    spread_db: dict[str, float]
    repeatability_db: float | None
    duration_s: float
    skipped: dict[str, str]
    path: Path
    safe: SafeOutcome | None
    #: Closed-loop levelling: the settings each frequency took, per connection (empty when
    #: the levelling was off).
    level_iterations: dict[str, list[int]] = dataclasses.field(default_factory=dict)
    #: Whether the sensor was zeroed by the calibration (read back).
    zeroed: bool = False
    #: Per source connection, the levels of its grid (dBm at the DUT plane); its entry in
    #: ``tables`` then holds one row of losses per level.
    levels: dict[str, list[float]] = dataclasses.field(default_factory=dict)


#: The output connection behind each DUT port the analyzer reads.
PORT_CONNECTION = {"if": "if", "rf": "rf_port", "lo": "lo_port"}
#: Analyzer settings while measuring an output path: span, RBW (Hz), attenuation (dB),
#: reference level (dBm); a tone 80 dB or more above the noise (invented figures that suit a
#: mid-range analyzer; common practice, no source).
SA_SPAN_HZ, SA_RBW_HZ, SA_ATTENUATION_DB, SA_REF_LEVEL_DBM = 100e3, 10e3, 10.0, 0.0


def needed_frequencies(sequence: Sequence, bench: Bench) -> dict[str, list[float]]:
    """Per connection, the distinct frequencies the sequence's points need there: sources
    (``rf``, ``rf2``, ``lo``) where they are set, output paths (``if``, ``rf_port``,
    ``lo_port``) where the analyzer reads, and the point's tones on each path it reads."""
    out: dict[str, set[float]] = {c: set() for c in ("rf", "rf2", "lo", *PORT_CONNECTION.values())}
    for point in iter_points(sequence, bench):
        out["rf"].add(float(point.rf_freq_hz))
        out["lo"].add(float(point.lo_freq_hz))
        if point.rf2_freq_hz is not None:
            out["rf2"].add(float(point.rf2_freq_hz))
        tones = {float(point.rf_freq_hz), float(point.lo_freq_hz)}
        if point.rf2_freq_hz is not None:
            tones.add(float(point.rf2_freq_hz))
        for reading in point.readings:
            if reading.rf_retune_hz is not None:
                out["rf"].add(float(reading.rf_retune_hz))
                tones.add(float(reading.rf_retune_hz))
        for reading in point.readings:
            if reading.instrument == "sa" and reading.freq_hz is not None:
                path = out[PORT_CONNECTION[reading.port or "if"]]
                path.add(float(reading.freq_hz))
                # the tones reach the analyzer on this path too: the pre-flight checks its
                # input level there with this path's loss
                path.update(tones)
    return {k: sorted(v) for k, v in out.items() if v}


def needed_levels(sequence: Sequence, bench: Bench) -> dict[str, list[float]]:
    """Per source connection (``rf``, ``rf2``, ``lo``), the distinct levels (dBm at the DUT
    plane) the sequence's points give it."""
    out: dict[str, set[float]] = {c: set() for c in ("rf", "rf2", "lo")}
    for point in iter_points(sequence, bench):
        out["rf"].add(round(float(point.rf_power_dbm), 6))
        out["lo"].add(round(float(point.lo_power_dbm), 6))
        if point.rf2_power_dbm is not None:
            out["rf2"].add(round(float(point.rf2_power_dbm), 6))
    return {k: sorted(v) for k, v in out.items() if v}


def level_cap_dbm(bench: Bench) -> float:
    """The highest level a source's level grid measures at a DUT plane, dBm:
    :data:`CAL_MARGIN_DB` under the sensor's maximum input (:data:`LEVEL_GRID_MAX_DBM`
    without one)."""
    limit = bench.limits.power_meter_max_input
    return LEVEL_GRID_MAX_DBM if limit is None else float(limit) - CAL_MARGIN_DB


def level_grid(needed: list[float], cap_dbm: float,
               step_db: float = LEVEL_STEP_DB) -> list[float]:
    """The grid of calibration levels over ``needed`` (dBm): from the lowest to the highest
    in equal steps of at most ``step_db``, both ends included, none above ``cap_dbm``."""
    low, high = min(needed), min(max(needed), cap_dbm)
    if high <= low:
        return [round(min(low, cap_dbm), 6)]
    count = math.ceil((high - low) / step_db - 1e-9)
    return [round(float(v), 6) for v in np.linspace(low, high, count + 1)]


def _losses_at_levels(targets: list[float], readings: np.ndarray,
                      losses: np.ndarray) -> np.ndarray:
    """Per frequency (columns), the loss that puts exactly each target level at the plane:
    ``losses[i, j]`` was measured where the plane read ``readings[i, j]``; linear in the
    reading between them and beyond the ends (a fraction of a dB: the setting's error)."""
    if len(targets) == 1:
        return losses.copy()
    out = np.empty((len(targets), losses.shape[1]))
    t = np.asarray(targets, dtype=float)
    for j in range(losses.shape[1]):
        order = np.argsort(readings[:, j])
        x, y = readings[order, j], losses[order, j]
        v = np.interp(t, x, y)
        low, high = t < x[0], t > x[-1]
        v[low] = y[0] + (t[low] - x[0]) * (y[1] - y[0]) / (x[1] - x[0])
        v[high] = y[-1] + (t[high] - x[-1]) * (y[-1] - y[-2]) / (x[-1] - x[-2])
        out[:, j] = v
    return out


def calibration_level_dbm(bench: Bench) -> float:
    """The level at the DUT plane while calibrating (see the module docstring)."""
    level = CAL_LEVEL_MAX_DBM
    for limit in (bench.limits.part.rf_input_max, bench.limits.power_meter_max_input):
        if limit is not None:
            level = min(level, float(limit) - CAL_MARGIN_DB)
    return level


def calibrate_sources(
    sequence_path: str | Path,
    bench_path: str | Path | None,
    out: str | Path,
    *,
    sim: bool = False,
    repeats: int = 2,
    valid_for: timedelta = timedelta(days=7),
    temperature_c: float | None = None,
    on_step: Callable[[str], None] = lambda _m: None,
    sim_description: str | Path | None = None,
    levelling: bool = False,
    operator: Callable[[str], bool] | None = None,
    levels: Mapping[str, list[float]] | None = None,
) -> CalibrationResult:
    """Calibrate the RF source connections of ``sequence`` on the bench and write the
    calibration file ``out`` (see the module docstring). ``sim_description``: the simulated
    bench's description (a file or a shipped name) when calibrating it. ``levels``: per
    source connection (``rf``, ``rf2``, ``lo``), the grid of levels (dBm at its DUT plane)
    to measure; a connection not named gets the grid over the sequence's own levels (see
    the module docstring). Raises a located
    :class:`SweeprigError` for bad input or a nonsense reading (nothing written)."""
    if repeats < 1:
        raise InputError(f"repeats = {repeats}: at least one sweep is needed",
                         where="sweeprig calibrate --repeats", fix="give 2 or more")
    for connection, grid in (levels or {}).items():
        if connection not in SOURCE_CONNECTIONS or not grid or \
                not all(math.isfinite(v) for v in grid):
            raise InputError(f"the level grid of {connection!r} is empty, holds a value that "
                             "is not a number, or names no source connection",
                             where="sweeprig calibrate --levels",
                             fix='give levels in dBm at the DUT planes, e.g. --levels '
                             '"-30,-20,-10"')
    sequence = load_sequence(Path(sequence_path))
    if bench_path is None:
        if not sim:
            raise InputError("no bench given", where="sweeprig calibrate",
                             fix="give --bench BENCH.toml, or --sim for the simulated bench")
        from sweeprig.engine.session import SIM_BENCH_FILE, shipped_sequences_dir

        bench_path = shipped_sequences_dir() / SIM_BENCH_FILE
    bench = load_bench(Path(bench_path), known_profiles=available_profiles())
    if bench.roles.pm is None:
        raise InputError("the bench has no power meter: source calibration measures with it",
                         where=bench.where(("roles",)),
                         fix="add roles.pm (sensor at the DUT RF port plane) to the bench file")
    needs = needed_frequencies(sequence, bench)
    skipped: dict[str, str] = {}
    for connection in list(needs):
        if connection in SOURCE_CONNECTIONS and bench.role(connection) is None:
            skipped[connection] = "the bench has no such source"
            del needs[connection]
    pm_lo = bench.switch_route("pm_lo")
    if "lo" in needs and pm_lo is None and operator is None:
        skipped["lo"] = ("the bench's switch has no route of the power-meter sensor to the "
                         "DUT LO plane (switch channels pm_lo): the LO keeps the bench file's "
                         "typed loss (or calibrate attended: --attended)")
        del needs["lo"]
    thru, part = bench.switch_route("thru"), bench.switch_route("part")
    outputs = [c for c in PORT_CONNECTION.values() if c in needs]
    if outputs and (thru is None or part is None or bench.roles.sa is None
                    or "rf" not in needs):
        why = ("the bench cannot put a calibration thru in the part's place by itself "
               "(switch channels thru and part), or has no analyzer or RF source: "
               "the output paths keep the bench file's typed losses")
        for connection in outputs:
            skipped[connection] = why
            del needs[connection]
        outputs = []
    for freqs in needs.values():  # the sensor reads at every one: its factor must be known
        for freq in freqs:
            bench.sensor.cal_factor_db(freq, bench.where(("sensor", "cal_factor")))
    level = calibration_level_dbm(bench)
    cap = level_cap_dbm(bench)
    wanted = needed_levels(sequence, bench)
    grids = {c: level_grid(wanted[c], cap) for c in needs
             if c in SOURCE_CONNECTIONS and c in wanted}
    for connection, given in (levels or {}).items():
        grid_levels = sorted({round(float(v), 6) for v in given})
        if grid_levels[-1] > cap:
            raise InputError(
                f"the level grid of {connection} reaches {grid_levels[-1]:g} dBm, above "
                f"{cap:g} dBm ({CAL_MARGIN_DB:g} dB under the power meter's maximum input)",
                where="sweeprig calibrate --levels",
                fix="give levels no higher than that; points above the grid are refused by "
                "the run (caution: the sensor's maximum input protects it)")
        if connection in needs:
            grids[connection] = grid_levels
    roles = {c: "calibration source" for c in needs if c in SOURCE_CONNECTIONS}
    roles["pm"] = "calibration power meter"
    if outputs:
        roles |= {"sa": "receiver calibration", "switch": "calibration routes"}
    elif bench.roles.switch is not None and (pm_lo is not None or bench.switch_route("pm_rf")):
        roles["switch"] = "calibration routes"
    if bench.roles.chamber is not None and temperature_c is None:
        roles["chamber"] = "temperature of the calibration"
    if temperature_c is None and "chamber" not in roles:
        raise InputError("the calibration's temperature is unknown: the bench has no chamber "
                         "to read it from", where="sweeprig calibrate",
                         fix="give --temperature (the room temperature, e.g. 23)")
    simulated = sim or bench.is_simulated()
    sim_bench = None
    clock: Clock = WallClock()
    drivers: BenchDrivers | None = None
    safe: SafeOutcome | None = None
    try:
        resources: dict[str, str] = {}
        if simulated:
            from sweeprig.sim.bench import start_sim_bench

            clock = VirtualClock(realtime_factor=0.0)
            sim_bench = start_sim_bench(sim_description, clock=clock)
            resources = dict(sim_bench.resources)
        t0 = clock.now()
        drivers = open_bench(bench, roles, resources=resources, clock=clock)
        idns = {role: d.idn or "" for role, d in drivers.items() if role != "simctl"}
        if temperature_c is None:
            assert drivers.chamber is not None
            temperature_c = float(drivers.chamber.probe_temperature_c())
        pm = drivers.pm
        assert pm is not None
        pm.set_averages(bench.sensor.averages)
        bench_ops = _Steps(drivers, bench, clock, level, levelling=levelling,
                           operator=operator)
        bench_ops.zero_check([c for c in needs if c in SOURCE_CONNECTIONS])
        sweeps: dict[str, list[object]] = {c: [] for c in needs}
        for repeat in range(repeats):
            for connection, freqs in needs.items():
                if connection in SOURCE_CONNECTIONS:
                    grid = grids[connection]
                    rows = [bench_ops.source_sweep(connection, freqs, p) for p in grid]
                    sweeps[connection].append(_losses_at_levels(
                        grid, np.asarray([r for _l, r in rows]),
                        np.asarray([loss for loss, _r in rows])).tolist())
                    on_step(f"sweep {repeat + 1} of {repeats}: {connection}, "
                            f"{len(freqs)} frequencies × {len(grid)} levels")
                    continue
                losses = bench_ops.output_sweep(connection, freqs)
                sweeps[connection].append(losses)
                on_step(f"sweep {repeat + 1} of {repeats}: {connection}, {len(freqs)} "
                        "frequencies")
        bench_ops.route("part")
        bench_ops.route("pm_rf", ask=False)
        duration = clock.now() - t0
        if bench_ops.operator_steps:
            on_step("every RF output is off: put the cables back as the part needs them "
                    "(the part's inputs connected, the power sensor away from them) before "
                    "the run")
    except BaseException:
        safe = _finish(drivers, bench, sim_bench)
        raise
    safe = _finish(drivers, bench, sim_bench)
    if safe is not None and not safe.ok:
        raise BenchUnsafeError("BENCH NOT PROVEN SAFE after the calibration: " + "; ".join(
            message for _n, message in safe.failed), where=str(bench_path),
            fix="make each instrument named here safe by hand now; nothing was written")
    tables: dict[str, tuple[list[float], list[float]]] = {}
    spread: dict[str, float] = {}
    variances: list[float] = []
    for connection, runs in sweeps.items():
        data = np.asarray(runs, dtype=float)  # repeats × [levels ×] frequencies
        tables[connection] = (needs[connection], data.mean(axis=0).tolist())
        if repeats > 1:
            var = data.var(axis=0, ddof=1)
            variances += var.ravel().tolist()
            spread[connection] = float(np.sqrt(var.max()))
    repeatability = float(math.sqrt(np.mean(variances))) if variances else None
    now = datetime.now(UTC)
    text = calibration_text(
        created=now, expires=now + valid_for, temperature_c=float(temperature_c),
        bench=bench.bench.name,
        method=(f"source levels at the DUT input planes by power meter "
                f"({bench.sensor.averages} averages"
                + (", sensor zeroed first" if bench_ops.zeroed else "")
                + f"; {bench.sensor.describe()})"
                + (f", levelled in closed loop to {level:g} dBm within "
                   f"{LEVEL_TOLERANCE_DB:g} dB" if levelling else f", {level:g} dBm at the plane")
                + (", sensor moved by the operator where the switch has no route"
                   if operator is not None else "")
                + (", output paths through a calibration thru by the analyzer against the "
                   "power meter" if any(c in tables for c in PORT_CONNECTION.values()) else "")
                + ", sources over a grid of levels at the DUT planes"
                + f", {repeats} sweep(s)"),
        instruments=idns, tables=tables, repeatability_db=repeatability,
        levels={c: (grids[c], tables[c][1]) for c in grids  # type: ignore[misc]
                if c in tables})
    path = Path(out)
    try:
        path.write_text(text, encoding="utf-8")
    except OSError as exc:
        raise InputError(f"cannot write the calibration file: {exc.strerror}",
                         where=str(path), fix="choose a writable path") from None
    return CalibrationResult(tables, spread, repeatability, duration, skipped, path, safe,
                             level_iterations=bench_ops.iterations, zeroed=bench_ops.zeroed,
                             levels={c: grids[c] for c in grids if c in tables})


SOURCE_CONNECTIONS = ("rf", "rf2", "lo")


#: What the operator is asked to do for each calibration route the switch cannot make.
OPERATOR_STEPS = {
    "pm_rf": ("connect the power sensor at the DUT RF input plane: the end of the cable that "
              "goes to the part's RF input (the part out of the way)"),
    "pm_lo": ("connect the power sensor at the DUT LO input plane: the end of the cable that "
              "goes to the part's LO input (the part out of the way)"),
}


class _Steps:
    """The calibration's bench operations (one sweep of one connection at a time)."""

    def __init__(self, drivers: BenchDrivers, bench: Bench, clock: Clock, level: float, *,
                 levelling: bool = False,
                 operator: Callable[[str], bool] | None = None) -> None:
        self.d, self.bench, self.clock, self.level = drivers, bench, clock, level
        self.levelling, self.operator = levelling, operator
        self.iterations: dict[str, list[int]] = {}
        self.zeroed = False
        self._sensor_at: str | None = None  # where the operator last put the sensor
        self.operator_steps = 0

    def _all_off(self) -> None:
        for role in SOURCE_CONNECTIONS:
            source = getattr(self.d, role, None)
            if source is not None:
                source.set_output(False)
                source.check_errors()

    def route(self, name: str, *, ask: bool = True) -> None:
        """Close the switch channel of a calibration route, when the bench has it; otherwise,
        in an attended calibration, switch every source off and ask the operator to make the
        route by hand (``ask``), once per move."""
        channel = self.bench.switch_route(name)
        switch = self.d.switch
        if channel is not None and switch is not None:
            switch.route(channel)  # sent, checked and read back
            return
        if self.operator is None or not ask or name not in OPERATOR_STEPS:
            return
        if self._sensor_at == name:
            return
        self._all_off()  # RF off before anyone touches a cable
        self.operator_steps += 1
        prompt = (f"step {self.operator_steps}: every RF output is off. Now "
                  f"{OPERATOR_STEPS[name]}; press Enter when done (end of input stops the "
                  "calibration)")
        if not self.operator(prompt):
            raise SweeprigError(
                "the calibration was stopped by the operator (end of input) at step "
                f"{self.operator_steps}; every RF output is off and nothing was written",
                where="sweeprig calibrate --attended",
                fix="start the calibration again and answer each step with Enter once the "
                "cable is moved")
        self._sensor_at = name

    def zero_check(self, connections: list[str]) -> None:
        """Every calibration source off; zero the sensor where the bench asks for it and the
        meter can (read back: the meter's flag); then the meter must read next to nothing: a
        reading above :data:`ZERO_CHECK_DBM` means a sensor not zeroed (or a signal at it)."""
        for connection in connections:
            source = getattr(self.d, connection)
            source.set_output(False)
            source.check_errors()
        pm = self.d.pm
        assert pm is not None
        self.route("pm_rf")
        pm.check_errors()
        where = "power meter (role pm), before the calibration"
        if self.bench.sensor.zero and pm.can_zero:
            try:
                pm.zero()
                pm.check_errors()
            except SweeprigError as exc:
                raise SweeprigError(
                    f"zeroing the sensor failed ({exc.what}); nothing was written and no RF "
                    "was switched on", where=where,
                    fix="check that every RF output is off and nothing else feeds the "
                    "sensor, then calibrate again") from None
            if pm.zeroed() is False:
                raise SweeprigError(
                    "the power meter says its sensor's zeroing did not succeed; nothing was "
                    "written and no RF was switched on", where=where,
                    fix="check that every RF output is off and nothing else feeds the sensor, "
                    "zero it again, then calibrate again")
            self.zeroed = True
        self.clock.sleep(SETTLE_S)
        reading = pm.read_power_dbm()
        if not math.isfinite(reading):
            raise SweeprigError(
                f"the power meter read {reading} with every source off (not a number: no "
                "sensor, or a fault); nothing was written and no RF was switched on",
                where=where,
                fix="check that the sensor is connected and zeroed, then calibrate again")
        if reading > ZERO_CHECK_DBM:
            raise SweeprigError(
                f"the power meter reads {reading:.1f} dBm with every source off"
                + (" even after zeroing" if self.zeroed else "")
                + ": the sensor is not zeroed (or a signal reaches it); nothing was "
                "written and no RF was switched on", where=where,
                fix="zero the sensor with every RF output off (the meter's zero function), "
                "check that nothing else feeds the DUT plane and that the sensor is sound, "
                "then calibrate again; follow your lab's rules for the sensor's maximum input")

    def _read(self, freq: float) -> float:
        """The power at the sensor's plane, dBm: the meter's reading corrected by the
        sensor's calibration factor at ``freq``."""
        pm = self.d.pm
        assert pm is not None
        self.clock.sleep(SETTLE_S)
        reading = pm.read_power_dbm()
        if not math.isfinite(reading):
            return reading
        return reading - self.bench.sensor.cal_factor_db(freq)

    def _plane_reading(self, connection: str, freq: float, reading_at: float,
                       level: float | None = None) -> tuple[float, float]:
        """Set ``connection``'s source to put ``level`` (default: the calibration level) at
        its DUT plane (by the typed loss, or in closed loop) at ``freq``, output on, and read
        the power meter there: (the source's setting, the reading), dBm."""
        source = getattr(self.d, connection)
        pm = self.d.pm
        assert pm is not None
        target = self.level if level is None else level
        setting = target + self.bench.loss(connection).at(freq, target)
        source.set_frequency(freq)
        source.set_power(setting)
        source.set_output(True)
        pm.set_frequency(reading_at)
        # A query to each instrument proves it has carried out the settings before the
        # meter reads (writes to two instruments are not ordered), and drains any error.
        source.check_errors()
        pm.check_errors()
        reading = self._read(reading_at)
        _check_reading(reading, target, connection, freq)
        if self.levelling:
            setting, reading = self._level(connection, freq, setting, reading, target)
        return setting, reading

    def _level(self, connection: str, freq: float, setting: float,
               reading: float, target: float) -> tuple[float, float]:
        """Closed-loop levelling: set again by (target − reading) until within
        :data:`LEVEL_TOLERANCE_DB`; never above the bench's (or profile's) source limit."""
        source = getattr(self.d, connection)
        high = source.limits("power")[1]
        count = 1
        while abs(reading - target) > LEVEL_TOLERANCE_DB:
            if count >= LEVEL_MAX_ITERATIONS:
                raise SweeprigError(
                    f"closed-loop levelling of {connection} at {freq / 1e9:g} GHz did not "
                    f"reach {target:g} dBm within {LEVEL_TOLERANCE_DB:g} dB in "
                    f"{LEVEL_MAX_ITERATIONS} settings (last {reading:.3f} dBm); nothing "
                    "was written", where=f"power meter (role pm), {connection}",
                    fix="check the cabling and the sensor, or calibrate without levelling")
            nxt = setting + (target - reading)
            if high is not None and nxt > high:
                raise SweeprigError(
                    f"closed-loop levelling of {connection} at {freq / 1e9:g} GHz would set "
                    f"{nxt:.2f} dBm, above the source limit {high:g} dBm; nothing was "
                    "written", where=f"{connection} source, bench limits",
                    fix="check the cabling (a loss far above the typed one), or calibrate "
                    "without levelling")
            setting = nxt
            source.set_power(setting)
            source.check_errors()
            reading = self._read(freq)
            _check_reading(reading, target, connection, freq)
            count += 1
        self.iterations.setdefault(connection, []).append(count)
        return setting, reading

    def source_sweep(self, connection: str, freqs: list[float],
                     level: float) -> tuple[list[float], list[float]]:
        """The loss of a source connection at each frequency, ``level`` aimed at its DUT
        plane: (setting − reading, dB; the reading, dBm) per frequency."""
        self.route("pm_lo" if connection == "lo" else "pm_rf")
        source = getattr(self.d, connection)
        losses, readings = [], []
        for freq in freqs:
            setting, reading = self._plane_reading(connection, freq, freq, level)
            losses.append(setting - reading)
            readings.append(reading)
        source.set_output(False)
        source.check_errors()
        return losses, readings

    def output_sweep(self, connection: str, freqs: list[float]) -> list[float]:
        """The loss of an output path at each frequency, the thru in the part's place: the
        power meter's reading at the DUT RF plane − the analyzer's, dB."""
        port = next(p for p, c in PORT_CONNECTION.items() if c == connection)
        sa, switch = self.d.sa, self.d.switch
        assert sa is not None and switch is not None
        self.route("pm_rf")
        self.route("thru")
        switch.select(self.bench.switch_channel(port))
        switch.check_errors()
        losses = []
        for freq in freqs:
            _setting, plane = self._plane_reading("rf", freq, freq)
            sa.configure(centre_hz=freq, span_hz=SA_SPAN_HZ, rbw_hz=SA_RBW_HZ,
                         ref_level_dbm=SA_REF_LEVEL_DBM, attenuation_db=SA_ATTENUATION_DB)
            sa.check_errors()
            sa.sweep()
            level = sa.marker_level_dbm(freq)
            if not math.isfinite(level) or abs(plane - self.bench.loss(connection).at(freq)
                                                - level) > PLAUSIBLE_DB:
                raise SweeprigError(
                    f"the analyzer read {level:.2f} dBm at {freq / 1e9:g} GHz on the "
                    f"{connection} path where about "
                    f"{plane - self.bench.loss(connection).at(freq):.2f} dBm was expected; "
                    "nothing was written", where=f"analyzer (role sa), {connection} path",
                    fix="check that the calibration thru is fitted in the part's place, the "
                    "switch routes the analyzer to this port, and the bench file's typed loss "
                    "of this path")
            losses.append(plane - level)
        rf = self.d.rf
        assert rf is not None
        rf.set_output(False)
        rf.check_errors()
        self.route("part")
        return losses


def _check_reading(reading: float, expected_dbm: float, connection: str, freq: float) -> None:
    """Refuse a reading that is not a number or far from what the setting predicts."""
    where = f"power meter (role pm), {connection} at {freq / 1e9:g} GHz"
    if not math.isfinite(reading):
        raise SweeprigError(
            f"the power meter read {reading} (not a number: over range or no sensor); "
            "nothing was written", where=where,
            fix="check that the sensor is connected at the DUT RF port plane, zeroed and "
            "within its range, then calibrate again. Caution: reduce the power at once if the "
            "sensor was over range")
    if abs(reading - expected_dbm) > PLAUSIBLE_DB:
        raise SweeprigError(
            f"the power meter read {reading:.2f} dBm where about {expected_dbm:.2f} dBm was "
            f"expected (more than {PLAUSIBLE_DB:g} dB off); nothing was written", where=where,
            fix="check the cabling, that the sensor sits at the DUT RF port plane and is "
            "zeroed, and the bench file's typed loss of this connection")


def _finish(drivers: BenchDrivers | None, bench: Bench, sim_bench: object) -> SafeOutcome | None:
    outcome = None
    if drivers is not None:
        state = bench.safe_state
        supply = None if state.supply in (None, "off") else float(state.supply)
        chamber = None if state.chamber in (None, "off") else float(state.chamber)
        outcome = make_safe(drivers, supply_safe_v=supply, chamber_idle_c=chamber)
        part = bench.switch_route("part")
        if part is not None and drivers.switch is not None:
            with contextlib.suppress(SweeprigError):  # the part back in (RF is already off)
                drivers.switch.route(part)
        drivers.close()
    if sim_bench is not None:
        sim_bench.close()  # type: ignore[attr-defined]
    return outcome
