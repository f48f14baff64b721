"""Source power calibration at the DUT's RF input plane, with the bench's power meter.

For each RF source connection a sequence uses (``rf``, and ``rf2`` in two-tone studies) and
every frequency it needs there, the source is set to a known level, the power meter (its
sensor at the DUT RF port plane, as the bench file describes it) reads what arrives, and the
loss of the connection is the setting minus the reading: cables, combiner and the source's own
level error together. The whole sweep is repeated (``repeats``) and the spread between the
repeats is the calibration's repeatability. The result is a calibration file
(:mod:`sweeprig.formats.calibration`) with the instruments' ``*IDN?`` replies, the chamber
probe's (or the given) temperature and an expiry.

Connections the power meter cannot reach by itself (the LO port, the output paths) are not
measured here: they keep the bench file's typed losses, and the command says so.

Safety: the level at the DUT plane is low (at most −10 dBm, and 10 dB under the part's RF
rating and the sensor's limit); every source setting goes through the drivers' limit guard;
on every exit the bench is put in its safe state and read back, RF off. A power meter that
reads nonsense (NaN, out of its range, a reading far from what the setting and the typed
loss predict) ends the calibration with a message and nothing written.
"""

from __future__ import annotations

import math
from collections.abc import Callable
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
#: A reading further than this from the level the typed loss predicts is refused as nonsense
#: (a wrong cable, a sensor on another port, a meter not zeroed), dB.
PLAUSIBLE_DB = 6.0
SETTLE_S = 0.05
AVERAGES = 16


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


def needed_frequencies(sequence: Sequence, bench: Bench) -> dict[str, list[float]]:
    """Per RF source connection, the distinct frequencies the sequence's points put there."""
    out: dict[str, set[float]] = {"rf": set(), "rf2": set()}
    for point in iter_points(sequence, bench):
        out["rf"].add(float(point.rf_freq_hz))
        if point.rf2_freq_hz is not None:
            out["rf2"].add(float(point.rf2_freq_hz))
    return {k: sorted(v) for k, v in out.items() if v}


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
) -> CalibrationResult:
    """Calibrate the RF source connections of ``sequence`` on the bench and write the
    calibration file ``out`` (see the module docstring). Raises a located
    :class:`SweeprigError` for bad input or a nonsense reading (nothing written)."""
    if repeats < 1:
        raise InputError(f"repeats = {repeats}: at least one sweep is needed",
                         where="sweeprig calibrate --repeats", fix="give 2 or more")
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
        if bench.role(connection) is None:
            skipped[connection] = "the bench has no such source"
            del needs[connection]
    skipped.setdefault("lo", "the power meter's sensor is at the DUT RF port plane, not the "
                       "LO port: the LO keeps the bench file's typed loss")
    skipped.setdefault("if / rf_port / lo_port", "output paths are not measured by a source "
                       "calibration: they keep the bench file's typed losses")
    level = calibration_level_dbm(bench)
    roles = {c: "calibration source" for c in needs} | {"pm": "calibration power meter"}
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
            sim_bench = start_sim_bench(None, clock=clock)
            resources = dict(sim_bench.resources)
        t0 = clock.now()
        drivers = open_bench(bench, roles, resources=resources, clock=clock)
        idns = {role: d.idn or "" for role, d in drivers.items() if role != "simctl"}
        if temperature_c is None:
            assert drivers.chamber is not None
            temperature_c = float(drivers.chamber.probe_temperature_c())
        pm = drivers.pm
        assert pm is not None
        pm.set_averages(AVERAGES)
        sweeps: dict[str, list[list[float]]] = {c: [] for c in needs}
        for repeat in range(repeats):
            for connection, freqs in needs.items():
                source = getattr(drivers, connection)
                typed = bench.loss(connection)
                losses: list[float] = []
                for freq in freqs:
                    setting = level + typed.at(freq)
                    source.set_frequency(freq)
                    source.set_power(setting)
                    source.set_output(True)
                    pm.set_frequency(freq)
                    # A query to each instrument proves it has carried out the settings
                    # before the meter reads (writes to two instruments are not ordered),
                    # and drains any error they raised.
                    source.check_errors()
                    pm.check_errors()
                    clock.sleep(SETTLE_S)
                    reading = pm.read_power_dbm()
                    _check_reading(reading, level, connection, freq)
                    losses.append(setting - reading)
                source.set_output(False)
                source.check_errors()
                sweeps[connection].append(losses)
                on_step(f"sweep {repeat + 1} of {repeats}: {connection}, {len(freqs)} "
                        "frequencies")
        duration = clock.now() - t0
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
        data = np.asarray(runs, dtype=float)  # repeats × frequencies
        tables[connection] = (needs[connection], data.mean(axis=0).tolist())
        if repeats > 1:
            var = data.var(axis=0, ddof=1)
            variances += var.tolist()
            spread[connection] = float(np.sqrt(var.max()))
    repeatability = float(math.sqrt(np.mean(variances))) if variances else None
    now = datetime.now(UTC)
    text = calibration_text(
        created=now, expires=now + valid_for, temperature_c=float(temperature_c),
        bench=bench.bench.name,
        method=(f"RF source levels at the DUT RF port plane by power meter ({AVERAGES} "
                f"averages), {level:g} dBm at the plane, {repeats} sweep(s)"),
        instruments=idns, tables=tables, repeatability_db=repeatability)
    path = Path(out)
    try:
        path.write_text(text, encoding="utf-8")
    except OSError as exc:
        raise InputError(f"cannot write the calibration file: {exc.strerror}",
                         where=str(path), fix="choose a writable path") from None
    return CalibrationResult(tables, spread, repeatability, duration, skipped, path, safe)


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
        drivers.close()
    if sim_bench is not None:
        sim_bench.close()  # type: ignore[attr-defined]
    return outcome
