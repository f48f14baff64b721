"""Pre-flight safety check: every point against every limit, before any output is enabled.

For every point of the plan (vectorised per study, so large plans stay quick):

* source setting = DUT-plane power + path loss ≤ ``limits.source_max_power.<role>`` (the RF
  source also at the image frequency when a study reads the image response);
* DUT port power ≤ the part's absolute maximum (RF: both tones together; LO);
* predicted analyzer input ≤ ``limits.analyzer_max_input``: at the IF port the wanted
  output(s) (RF power + expected gain), LO leakage (LO power − expected LO→IF isolation) and
  RF feedthrough (RF power − expected RF→IF isolation), each minus the IF path loss, added
  as powers; at the RF port the full RF power as if reflected plus the LO leakage. An
  isolation the part file does not give counts as 0 dB (the safe side);
* power-meter input ≤ ``limits.power_meter_max_input`` (when the sequence reads it);
* supply set points ≤ ``limits.supply_max_voltage`` and the part's ``supply_max``;
* chamber set points within ``limits.chamber_min`` .. ``limits.chamber_max``.

:func:`preflight` raises :class:`~sweeprig.errors.SafetyLimitError` on the first violation;
:func:`check_limits` returns the full :class:`PreflightReport` (per-port maxima) either way.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from sweeprig.errors import InputError, SafetyLimitError
from sweeprig.formats.bench import Bench
from sweeprig.formats.sequence import Sequence, required_roles
from sweeprig.plan import frequencies as fp
from sweeprig.plan.expand import Layout, StudyBlock, layout, point_at

#: Points evaluated per numpy batch.
CHUNK = 1 << 18
#: Tolerance of "≤ limit" against float noise, in the limit's unit.
TOLERANCE = 1e-9

CAUTION = ("Caution: RF power can damage the DUT and the analyzer; check the attenuators and "
           "path losses, and follow your lab's rules.")


@dataclass
class PortCheck:
    """One limit checked over the whole plan.

    ``label``: what is checked ("lo source setting", "analyzer input (IF port)" ...).
    ``unit``: "dBm", "V" or "degC". ``limit``: the bound; ``limit_key``: the bench key that
    sets it, with file and line. ``bound``: "max" or "min". ``worst``: the largest predicted
    value (smallest for a "min" bound), at point ``worst_index``. ``violation_index`` and
    ``violation_value``: the first point (in index order) past the limit, if any.
    """

    label: str
    unit: str
    limit: float
    limit_key: str
    bound: str = "max"
    port: str = ""
    worst: float = -math.inf
    worst_index: int | None = None
    violation_index: int | None = None
    violation_value: float | None = None

    @property
    def ok(self) -> bool:
        return self.violation_index is None

    @property
    def margin(self) -> float:
        """Distance to the limit (positive = inside), in ``unit``."""
        if self.worst_index is None:
            return math.inf
        return self.limit - self.worst if self.bound == "max" else self.worst - self.limit

    def _offer(self, values: np.ndarray, index_of: Callable[[int], int]) -> None:
        """Take a batch of predicted values; ``index_of`` maps batch position → point index."""
        if values.size == 0:
            return
        if self.bound == "max":
            k = int(np.argmax(values))
            better = self.worst_index is None or values[k] > self.worst
            bad = np.nonzero(values > self.limit + TOLERANCE)[0]
        else:
            k = int(np.argmin(values))
            better = self.worst_index is None or values[k] < self.worst
            bad = np.nonzero(values < self.limit - TOLERANCE)[0]
        if better:
            self.worst = float(values[k])
            self.worst_index = index_of(k)
        if bad.size:
            idx = index_of(int(bad[0]))
            if self.violation_index is None or idx < self.violation_index:
                self.violation_index = idx
                self.violation_value = float(values[bad[0]])


@dataclass
class PreflightReport:
    """Every check with its worst predicted value; ``ok`` when nothing is past a limit."""

    checks: list[PortCheck] = field(default_factory=list)
    points_checked: int = 0

    @property
    def ok(self) -> bool:
        return all(c.ok for c in self.checks)

    @property
    def violations(self) -> list[PortCheck]:
        return [c for c in self.checks if not c.ok]


def _need(bench: Bench, value: float | None, key: tuple[str, ...], why: str) -> float:
    if value is None:
        raise InputError(
            f"the bench gives no {'.'.join(key)}, which {why} needs",
            where=bench.where(key[:-1]) if len(key) > 1 else bench.where(key),
            fix=f"add {key[-1]} = ... under [{'.'.join(key[:-1])}] in the bench file "
            "(a limit is required before power is applied)",
        )
    return value


def check_roles(sequence: Sequence, bench: Bench) -> None:
    """InputError when the bench lacks a role the sequence needs (names the reason)."""
    for role, why in required_roles(sequence).items():
        if bench.role(role) is None:
            raise InputError(
                f"the bench has no {role!r} role, but {why}",
                where=bench.where(("roles",)),
                fix=f"add [roles.{role}] with resource = ... and profile = ... to the bench file",
            )


def _loss(bench: Bench, sequence: Sequence, block: StudyBlock, connection: str,
          freq_hz: np.ndarray) -> np.ndarray:
    try:
        return bench.loss(connection).loss_db(freq_hz)
    except InputError as exc:
        raise InputError(
            f"study {block.study.name!r}: {exc.what}", where=exc.where,
            fix=exc.fix) from None


#: Natural log of the power ratio of 1 dB: a level L dB is exp(L * _NEPER_PER_DB) in power.
_NEPER_PER_DB = math.log(10.0) / 10.0


def _power_sum(*levels_dbm: np.ndarray) -> np.ndarray:
    """Total power (dBm) of incoherent components, summed in the log domain (no overflow for
    absurd levels, -inf for no power)."""
    total = np.full(np.broadcast(*levels_dbm).shape, -np.inf)
    for level in levels_dbm:
        total = np.logaddexp(total, np.asarray(level, dtype=float) * _NEPER_PER_DB)
    return total / _NEPER_PER_DB


def check_limits(sequence: Sequence, bench: Bench) -> PreflightReport:
    """Evaluate every limit over every point; never raises SafetyLimitError.

    Raises InputError when a limit that the sequence needs is missing from the bench file,
    when a role is missing, or when a path-loss table does not cover a frequency used.
    """
    check_roles(sequence, bench)
    roles = required_roles(sequence)
    lim = bench.limits
    lay = layout(sequence)
    report = PreflightReport(points_checked=lay.total)

    def check(label: str, unit: str, value: float | None, key: tuple[str, ...], why: str,
              bound: str = "max", port: str = "") -> PortCheck:
        limit = _need(bench, value, key, why)
        c = PortCheck(label, unit, limit, bench.where(key), bound, port)
        report.checks.append(c)
        return c

    src = {r: check(f"{r} source setting", "dBm", getattr(lim.source_max_power, r),
                    ("limits", "source_max_power", r), f"the {r} source", port=r)
           for r in ("rf", "rf2", "lo") if r in roles}
    dut_rf = check("DUT RF input (all tones)", "dBm", lim.part.rf_input_max,
                   ("limits", "part", "rf_input_max"), "driving the DUT RF port", port="rf")
    dut_lo = check("DUT LO input", "dBm", lim.part.lo_input_max,
                   ("limits", "part", "lo_input_max"), "driving the DUT LO port", port="lo")
    sa_if = sa_rf = pm = None
    kinds = sequence.reading_kinds()
    if "sa" in roles:
        sa_if = check("analyzer input (IF port)", "dBm", lim.analyzer_max_input,
                      ("limits", "analyzer_max_input"), "the spectrum analyzer", port="if")
        if "lo_at_rf" in kinds:
            sa_rf = PortCheck("analyzer input (RF port)", "dBm", sa_if.limit, sa_if.limit_key,
                              port="rf")
            report.checks.append(sa_rf)
    if "input_power" in kinds and lim.power_meter_max_input is not None:
        pm = check("power meter input", "dBm", lim.power_meter_max_input,
                   ("limits", "power_meter_max_input"), "the power meter", port="rf")
    if sequence.conditions.supply is not None:
        assert lay.supplies is not None
        volts = lay.supplies.all_values()
        for value, key, label in (
                (lim.supply_max_voltage, ("limits", "supply_max_voltage"), "bench limit"),
                (lim.part.supply_max, ("limits", "part", "supply_max"), "part rating")):
            c = check(f"supply voltage ({label})", "V", value, key, "setting the DUT supply",
                      port="dc")
            _offer_outer(c, volts, lay, which="supply")
        _need(bench, lim.supply_max_current, ("limits", "supply_max_current"),
              "setting the DUT supply")
    if sequence.conditions.temperature is not None:
        assert lay.temperatures is not None
        temps = lay.temperatures.all_values()
        for value, key, bound in ((lim.chamber_max, ("limits", "chamber_max"), "max"),
                                  (lim.chamber_min, ("limits", "chamber_min"), "min")):
            c = check(f"chamber set point ({bound})", "degC", value, key, "the chamber",
                      bound=bound, port="chamber")
            _offer_outer(c, temps, lay, which="temperature")

    part = sequence.part
    g = part.expected_gain
    iso_lo_if = part.expected_lo_if_isolation or 0.0
    iso_lo_rf = part.expected_lo_rf_isolation or 0.0
    iso_rf_if = part.expected_rf_if_isolation or 0.0
    conv, side = sequence.mixing.conversion, sequence.mixing.lo_side
    for block in lay.blocks:
        study = block.study
        study_kinds = {r.kind for r in study.readings()}
        base = lay.first_index(0, 0, block)
        for start in range(0, block.count, CHUNK):
            local = np.arange(start, min(start + CHUNK, block.count), dtype=np.int64)
            v = _axis_values(block, local)
            f_rf, p_rf, p_lo = v["rf_frequency"], v["rf_power"], v["lo_power"]
            if block.if_freq_hz is None:
                f_lo = v["lo_frequency"]
            else:
                f_lo = fp.lo_for_if(f_rf, block.if_freq_hz, conv, side)
            two = "tone_spacing" in v
            f2 = f_rf + v["tone_spacing"] if two else None

            def index_of(k: int, _local: np.ndarray = local, _base: int = base) -> int:
                return _base + int(_local[k])

            src["rf"]._offer(p_rf + _loss(bench, sequence, block, "rf", f_rf), index_of)
            if "image" in study_kinds:
                f_img = fp.image_hz(f_rf, f_lo)
                if np.any(f_img <= 0):
                    k = int(np.nonzero(f_img <= 0)[0][0])
                    raise InputError(
                        f"{point_at(sequence, index_of(k)).describe()} has no image frequency "
                        "(2·LO − RF is not above 0)",
                        where=sequence.where(("study", block.study_index, "read")),
                        fix="remove the image reading from this study or change the plan")
                src["rf"]._offer(p_rf + _loss(bench, sequence, block, "rf", f_img),
                                 index_of)
            src["lo"]._offer(p_lo + _loss(bench, sequence, block, "lo", f_lo), index_of)
            rf_total = p_rf + (10.0 * math.log10(2.0) if two else 0.0)
            dut_rf._offer(rf_total, index_of)
            dut_lo._offer(np.asarray(p_lo, dtype=float), index_of)
            if two:
                assert f2 is not None
                src["rf2"]._offer(p_rf + _loss(bench, sequence, block, "rf2", f2),
                                  index_of)
            if pm is not None and "input_power" in study_kinds:
                pm._offer(rf_total, index_of)
            if sa_if is not None:
                tone_freqs = [f_rf] + ([f2] if two else [])
                if "image" in study_kinds:
                    tone_sets = [tone_freqs, [fp.image_hz(f_rf, f_lo), *tone_freqs[1:]]]
                else:
                    tone_sets = [tone_freqs]
                for tones in tone_sets:
                    parts = [p_lo - iso_lo_if - _loss(bench, sequence, block, "if", f_lo)]
                    for f in tones:
                        f_out = fp.wanted_output_hz(f, f_lo, conv, side)
                        parts.append(p_rf + g - _loss(bench, sequence, block, "if", f_out))
                        parts.append(p_rf - iso_rf_if - _loss(bench, sequence, block, "if", f))
                    sa_if._offer(_power_sum(*parts), index_of)
            if sa_rf is not None and "lo_at_rf" in study_kinds:
                parts = [p_lo - iso_lo_rf - _loss(bench, sequence, block, "rf_port", f_lo)]
                for f in [f_rf] + ([f2] if two else []):
                    parts.append(p_rf - _loss(bench, sequence, block, "rf_port", f))
                sa_rf._offer(_power_sum(*parts), index_of)
    return report


def _axis_values(block: StudyBlock, local: np.ndarray) -> dict[str, np.ndarray]:
    """Axis values (by name) for local point indices of a study, vectorised."""
    shape = tuple(a.count for a in block.axes)
    idx = np.unravel_index(local, shape)
    return {a.name: a.values(i).astype(float) for a, i in zip(block.axes, idx, strict=True)}


def _offer_outer(check: PortCheck, values: np.ndarray, lay: Layout, which: str) -> None:
    """Offer temperature or supply set points; the index is the first point using each."""
    n_v = lay.n_supplies

    def index_of(k: int) -> int:
        t_idx, v_idx = (k, 0) if which == "temperature" else (0, k)
        return (t_idx * n_v + v_idx) * lay.pass_size

    check._offer(np.asarray(values, dtype=float), index_of)


def safety_error(sequence: Sequence, check: PortCheck) -> SafetyLimitError:
    """The SafetyLimitError for a failed check, naming the point, port, value and limit."""
    assert check.violation_index is not None and check.violation_value is not None
    point = point_at(sequence, check.violation_index)
    word = "above" if check.bound == "max" else "below"
    what = (f"{check.label} would be {check.violation_value:.2f} {check.unit}, {word} the "
            f"limit {check.limit:g} {check.unit} set at {check.limit_key}; first at "
            f"{point.describe()}. {CAUTION}")
    return SafetyLimitError(
        what,
        where=sequence.where(("study", point.study_index)),
        fix="lower the power (or change the frequencies or conditions) in the sequence, or "
        "correct the limit or path loss in the bench file if it is wrong",
    )


def preflight(sequence: Sequence, bench: Bench) -> PreflightReport:
    """Check every point against every limit; SafetyLimitError on the first violation.

    Call before enabling any output. Returns the report (per-port maxima) when all is well.
    """
    report = check_limits(sequence, bench)
    failed = report.violations
    if failed:
        first = min(failed, key=lambda c: (c.violation_index, report.checks.index(c)))
        raise safety_error(sequence, first)
    return report
