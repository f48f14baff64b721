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
* chamber set points within ``limits.chamber_min`` .. ``limits.chamber_max``;
* every setting the drivers will be asked for — source frequencies and levels, supply voltage
  and current limit, chamber set points (the safe state's included), switch channels,
  analyzer centre, span, RBW, reference level, attenuation and averages, power-meter
  frequency — within the range of the role's own driver profile (the instrument's).

Each role's profile must be of the kind the role takes. The limits are the very objects the
drivers refuse with (:mod:`sweeprig.plan.instrument_limits`), so a plan that passes here is
not refused by a driver's limit at run time, and each refusal names its origin: the bench
file's line, the profile's line, or the part's rating.

:func:`preflight` raises :class:`~sweeprig.errors.SafetyLimitError` on the first violation;
:func:`check_limits` returns the full :class:`PreflightReport` (per-port maxima) either way.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np

from sweeprig.errors import InputError, SafetyLimitError, SweeprigError
from sweeprig.formats.bench import Bench
from sweeprig.formats.level_grid import LevelGridLoss
from sweeprig.formats.sequence import RangeSpec, Sequence, required_roles
from sweeprig.instruments.limits import LIMIT_TOLERANCE, beyond
from sweeprig.plan import frequencies as fp
from sweeprig.plan.expand import Layout, PointBuilder, StudyBlock, layout, point_at
from sweeprig.plan.instrument_limits import role_limits, role_profile
from sweeprig.plan.instrument_settings import CAUTION, check_bench_settings, reading_settings
from sweeprig.units import format_frequency

if TYPE_CHECKING:
    from sweeprig.plan.risks import RiskSurvey

#: Points evaluated per numpy batch.
CHUNK = 1 << 18
#: Tolerance of "≤ limit" against float noise (relative above 1): the drivers' own.
TOLERANCE = LIMIT_TOLERANCE

__all__ = ["CAUTION", "PortCheck", "PreflightReport", "check_limits", "check_roles",
           "check_supply",
           "format_amount", "preflight", "safety_error"]


@dataclass
class PortCheck:
    """One limit checked over the whole plan.

    ``label``: what is checked ("lo source setting", "analyzer input (IF port)" ...).
    ``source``: who sets the limit: "bench", "part" or "profile" (the instrument's range).
    ``unit``: "dBm", "V", "degC", "Hz"... ``limit``: the bound; ``limit_key``: who sets it
    and where (bench file line, driver profile line or part rating). ``bound``: "max" or
    "min". ``safety``: a refusal is a safety-limit error (powers, voltages, currents), else an
    input error (an instrument's range). ``worst``: the largest predicted
    value (smallest for a "min" bound), at point ``worst_index``. ``violation_index`` and
    ``violation_value``: the first point (in index order) past the limit, if any.
    """

    label: str
    unit: str
    limit: float
    limit_key: str
    bound: str = "max"
    port: str = ""
    safety: bool = True
    source: str = "bench"
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
        else:
            k = int(np.argmin(values))
            better = self.worst_index is None or values[k] < self.worst
        bad = np.nonzero(beyond(values, self.limit, self.bound))[0]  # type: ignore[arg-type]
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
    notes: list[str] = field(default_factory=list)
    """What was checked less than exactly (a study too large to plan reading by reading)."""
    warnings: list[str] = field(default_factory=list)
    """What may make the results wrong without breaking a limit (a part that may be measured
    unpowered): printed by ``check`` and ``plan`` and recorded with the run."""
    risks: RiskSurvey | None = None
    """The planned readings that cannot be trusted, and why (:mod:`sweeprig.plan.risks`)."""
    points: PointBuilder | None = field(default=None, repr=False, compare=False)
    """The builder that planned the points checked, keeping them when the run is small
    enough (:data:`~sweeprig.plan.expand.KEEP_ALL_MAX_POINTS`): the run takes them from it
    instead of planning every point again (:func:`~sweeprig.plan.expand.iter_points`)."""

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
    for role, why in required_roles(sequence, bench.noise_drive_role).items():
        if bench.role(role) is None:
            raise InputError(
                f"the bench has no {role!r} role, but {why}",
                where=bench.where(("roles",)),
                fix=f"add [roles.{role}] with resource = ... and profile = ... to the bench file",
            )
    from sweeprig.plan.noise_check import check_noise_figure

    check_noise_figure(sequence, bench)


def check_supply(sequence: Sequence, bench: Bench) -> list[str]:
    """Warn where a plan may measure the part unpowered.

    A sequence without ``[conditions] supply`` never sets the supply voltage nor switches its
    output on. One that reads ``supply_current`` all the same is refused when the file is
    read (:func:`sweeprig.formats.sequence.check_sequence`); otherwise, unless ``[part]
    passive = true`` says the part needs no supply, a warning: on a bench with a ``dc`` role
    the key was most likely forgotten; on one without, the part must be powered by other
    means. A supply set point of 0 V is a warning too. Returns the warnings.
    """
    warnings: list[str] = []
    supply = sequence.conditions.supply
    if supply is None:
        if sequence.part.passive:
            return warnings
        if bench.role("dc") is not None:
            warnings.append(
                "the sequence sets no supply voltage, but the bench has a DC supply (role "
                "'dc'): sweeprig will not set it nor switch its output on, so the part may be "
                "measured unpowered. Add supply = \"...\" under [conditions] (the part's "
                "supply voltage), or write passive = true under [part] if it needs no supply; "
                "gains far below expected_gain are flagged 'unpowered'")
        else:
            warnings.append(
                "the sequence sets no supply voltage and the bench has no DC supply (role "
                "'dc'): sweeprig does not power the part. Power it by other means before the "
                "run, or write passive = true under [part] if it needs no supply; gains far "
                "below expected_gain are flagged 'unpowered'")
        return warnings
    lowest = (min(supply.start, supply.stop) if isinstance(supply, RangeSpec)
              else min(supply) if isinstance(supply, tuple) else float(supply))
    if lowest <= 0.0:
        warnings.append(
            "conditions.supply includes 0 V: at those points the part is unpowered (gains far "
            "below expected_gain are flagged 'unpowered')")
    return warnings


def _loss(bench: Bench, sequence: Sequence, block: StudyBlock, connection: str,
          freq_hz: np.ndarray, level_dbm: np.ndarray | None = None,
          index_of: Callable[[int], int] | None = None) -> np.ndarray:
    """The loss of ``connection`` at each point (a source's at its DUT-plane level too);
    a point outside a calibrated grid is refused, naming the points outside."""
    loss = bench.loss(connection)
    try:
        return loss.loss_db(freq_hz, level_dbm)
    except InputError as exc:
        what = exc.what
        if isinstance(loss, LevelGridLoss) and level_dbm is not None and index_of is not None:
            what = _outside_points(sequence, loss, connection, freq_hz, level_dbm, index_of)
        raise InputError(
            f"study {block.study.name!r}: {what}", where=exc.where,
            fix=exc.fix) from None


#: Points outside a calibrated grid that a refusal describes one by one.
SHOWN_OUTSIDE = 3


def _outside_points(sequence: Sequence, loss: LevelGridLoss, connection: str,
                    freq_hz: np.ndarray, level_dbm: np.ndarray,
                    index_of: Callable[[int], int]) -> str:
    """Which points need ``connection`` outside its calibrated grid, in words."""
    f, p = np.broadcast_arrays(np.asarray(freq_hz, dtype=float),
                               np.asarray(level_dbm, dtype=float))
    bad = np.flatnonzero(loss.outside(f, p))
    levels = sorted({round(float(v), 3) for v in p[bad]})
    shown = "; ".join(point_at(sequence, index_of(int(k))).describe()
                      for k in bad[:SHOWN_OUTSIDE])
    more = f" and {bad.size - SHOWN_OUTSIDE} more" if bad.size > SHOWN_OUTSIDE else ""
    return (f"{bad.size} of {f.size} point(s) need the {connection} source outside the "
            f"calibrated grid {loss.file} ({loss.span()}): at "
            + ", ".join(f"{v:g}" for v in levels[:8]) + (" ..." if len(levels) > 8 else "")
            + f" dBm; the points: {shown}{more}. sweeprig does not extrapolate a calibration")


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
    """Evaluate every limit over every point; SafetyLimitError only for a bench-file setting
    that no point carries (the safe state's supply voltage, the current limit).

    Raises InputError when a limit that the sequence needs is missing from the bench file,
    when a role is missing or has a profile of the wrong kind, when a path-loss table does
    not cover a frequency used, or when a bench-file setting (safe state, switch channel) is
    outside its instrument's range.
    """
    check_roles(sequence, bench)
    supply_warnings = check_supply(sequence, bench)
    roles = required_roles(sequence, bench.noise_drive_role)
    profiles = {r: role_profile(bench, r) for r in roles}
    limits = {r: role_limits(bench, r, p) for r, p in profiles.items()}
    lim = bench.limits
    lay = layout(sequence)
    report = PreflightReport(points_checked=lay.total, warnings=supply_warnings)

    def check(label: str, unit: str, value: float | None, key: tuple[str, ...], why: str,
              bound: str = "max", port: str = "") -> PortCheck:
        limit = _need(bench, value, key, why)
        origin = (f"the part's rating ({bench.where(key)})" if key[:2] == ("limits", "part")
                  else f"the bench file ({bench.where(key)})")
        c = PortCheck(label, unit, limit, origin, bound, port)
        report.checks.append(c)
        return c

    def op_checks(role: str, op: str, label: str, port: str = "", unit: str | None = None
                  ) -> list[PortCheck]:
        """One check per side of ``role``'s limits on ``op`` (the drivers' own bounds)."""
        found = limits.get(role, {}).get(op)
        if found is None:
            return []
        safety = profiles[role].op(op).spec.safety
        out = []
        for b in (found.high, found.low):
            if b is not None:
                out.append(PortCheck(label, unit or found.unit, b.value, b.origin, b.side,
                                     port, safety=safety, source=b.source))
        report.checks.extend(out)
        return out

    for r in ("rf", "rf2", "lo"):
        if r in roles:
            _need(bench, getattr(lim.source_max_power, r), ("limits", "source_max_power", r),
                  f"the {r} source")
    src = {r: op_checks(r, "power", f"{r} source setting", port=r, unit="dBm")
           for r in ("rf", "rf2", "lo") if r in roles}
    src_f = {r: op_checks(r, "frequency", f"{r} source frequency", port=r, unit="Hz")
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
        _need(bench, lim.supply_max_voltage, ("limits", "supply_max_voltage"),
              "setting the DUT supply")
        _need(bench, lim.part.supply_max, ("limits", "part", "supply_max"),
              "setting the DUT supply")
        _need(bench, lim.supply_max_current, ("limits", "supply_max_current"),
              "setting the DUT supply")
        volts = lay.supplies.all_values()
        for c in op_checks("dc", "voltage", "supply voltage", port="dc", unit="V"):
            _offer_outer(c, volts, lay, which="supply")
    if sequence.conditions.temperature is not None:
        assert lay.temperatures is not None
        _need(bench, lim.chamber_max, ("limits", "chamber_max"), "the chamber")
        _need(bench, lim.chamber_min, ("limits", "chamber_min"), "the chamber")
        temps = lay.temperatures.all_values()
        for c in op_checks("chamber", "setpoint", "chamber set point", port="chamber",
                           unit="degC"):
            _offer_outer(c, temps, lay, which="temperature")
    check_bench_settings(sequence, bench, roles, limits)

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

            _offer(src["rf"], p_rf + _loss(bench, sequence, block, "rf", f_rf, p_rf, index_of),
                   index_of)
            _offer(src_f["rf"], f_rf, index_of)
            _offer(src_f["lo"], f_lo, index_of)
            if "image" in study_kinds:
                f_img = fp.image_hz(f_rf, f_lo)
                if np.any(f_img <= 0):
                    k = int(np.nonzero(f_img <= 0)[0][0])
                    raise InputError(
                        f"{point_at(sequence, index_of(k)).describe()} has no image frequency "
                        "(2·LO − RF is not above 0)",
                        where=sequence.where(("study", block.study_index, "read")),
                        fix="remove the image reading from this study or change the plan")
                _offer(src["rf"], p_rf + _loss(bench, sequence, block, "rf", f_img, p_rf,
                                               index_of), index_of)
                _offer(src_f["rf"], f_img, index_of)  # the image reading retunes the rf source
            _offer(src["lo"], p_lo + _loss(bench, sequence, block, "lo", f_lo, p_lo, index_of),
                   index_of)
            rf_total = p_rf + (10.0 * math.log10(2.0) if two else 0.0)
            dut_rf._offer(rf_total, index_of)
            dut_lo._offer(np.asarray(p_lo, dtype=float), index_of)
            if two:
                assert f2 is not None
                _offer(src["rf2"], p_rf + _loss(bench, sequence, block, "rf2", f2, p_rf,
                                                index_of), index_of)
                _offer(src_f["rf2"], f2, index_of)
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
    # the settings check and the risk survey read the same points: planned once
    from sweeprig.plan.risks import survey_indices

    builder = PointBuilder(sequence, bench, keep=survey_indices(lay), keep_all_if_small=True)
    report.points = builder
    settings, notes = reading_settings(sequence, bench, lay, profiles, limits, builder)
    report.notes.extend(notes)
    for found in settings:
        for b in (found.limits.high, found.limits.low):
            if b is not None:
                c = PortCheck(found.label, found.unit, b.value, b.origin, b.side, found.role,
                              safety=found.safety, source=b.source)
                report.checks.append(c)
                c._offer(found.values, lambda k, _idx=found.indices: int(_idx[k]))  # type: ignore[misc]
    _survey(sequence, bench, report, builder)
    return report


def _survey(sequence: Sequence, bench: Bench, report: PreflightReport,
            builder: PointBuilder | None = None) -> None:
    """The readings that cannot be trusted as planned: a warning (recorded with the run); the
    figures assumed rather than stated stay with the survey (``report.risks.assumptions``)."""
    from sweeprig.plan.risks import headline, survey_risks

    survey = survey_risks(sequence, bench, builder=builder)
    report.risks = survey
    report.notes.extend(survey.notes)
    if survey.groups:
        report.warnings.append(headline(survey))


def risk_refusal(sequence: Sequence, report: PreflightReport) -> InputError | None:
    """The refusal of readings at risk when the sequence says ``on_risk = "refuse"``."""
    from sweeprig.plan.risks import risk_error

    if sequence.analyzer.on_risk != "refuse" or report.risks is None or \
            not report.risks.groups:
        return None
    return risk_error(sequence, report.risks)


def _offer(checks: list[PortCheck], values: np.ndarray, index_of: Callable[[int], int]) -> None:
    for c in checks:
        c._offer(np.asarray(values, dtype=float), index_of)


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


def format_amount(value: float, unit: str, precise: bool = True) -> str:
    """A value for messages and tables: frequencies scaled (``2.4 GHz``), counts bare, other
    units with two decimals (``precise``) or as short as exact."""
    if unit == "Hz":
        return format_frequency(value)
    if not unit:  # a count (averages, channel)
        return f"{value:g}"
    if precise and not abs(value) < 1e9:  # (a mangled number: its magnitude, not 300 digits)
        return f"{value:.6g} {unit}".strip()
    return f"{value:.2f} {unit}".strip() if precise else f"{value:g} {unit}".strip()


#: The sequence key that sets an outer condition's checks (the chamber set point, the supply
#: voltage), its caution and its fix: named instead of the study the first point is in.
_OUTER_CHECKS: dict[tuple[str, str], tuple[tuple[str, str], str, str]] = {
    ("chamber", "chamber set point"): (
        ("conditions", "temperature"),
        "Caution: a chamber set point beyond the bench's limits can damage the part, its "
        "fixture and cables, or the chamber; follow your lab's rules for the chamber.",
        "change the temperatures in the sequence's [conditions], or correct limits.chamber_min"
        " / limits.chamber_max in the bench file if they are wrong"),
    ("dc", "supply voltage"): (
        ("conditions", "supply"),
        "Caution: a supply voltage beyond the part's rating can destroy it; check the supply's "
        "own limits and follow your lab's rules.",
        "change the supply voltages in the sequence's [conditions], or correct the supply "
        "limits in the bench file if they are wrong"),
}


def safety_error(sequence: Sequence, check: PortCheck) -> SweeprigError:
    """The error for a failed check, naming the point, port, value, limit and who sets the
    limit where: a SafetyLimitError for powers, voltages and currents, an InputError for an
    instrument's range."""
    assert check.violation_index is not None and check.violation_value is not None
    point = point_at(sequence, check.violation_index)
    word = "above" if check.bound == "max" else "below"
    allows = "at most" if check.bound == "max" else "at least"
    limit = format_amount(check.limit, check.unit, precise=False)
    what = (f"{check.label} would be {format_amount(check.violation_value, check.unit)}, "
            f"{word} the limit {limit}: {check.limit_key} allows {allows} {limit}; first at "
            f"{point.describe()}")
    outer = _OUTER_CHECKS.get((check.port, check.label))
    where = sequence.where(outer[0] if outer is not None else ("study", point.study_index))
    if not check.safety:
        return InputError(
            what, where=where,
            fix="change the plan in the sequence so every setting stays inside the "
            "instrument's range, or give the role a profile (instrument) that covers it")
    if check.source == "profile":
        fix = ("change the plan in the sequence: the instrument cannot go beyond its own range "
               "(its driver profile); or use an instrument, and its profile, that covers it")
    elif outer is not None:
        return SafetyLimitError(f"{what}. {outer[1]}", where=where, fix=outer[2])
    else:
        fix = ("lower the power (or change the frequencies or conditions) in the sequence, or "
               "correct the limit or path loss in the bench file if it is wrong")
    return SafetyLimitError(f"{what}. {CAUTION}", where=where, fix=fix)


def preflight(sequence: Sequence, bench: Bench) -> PreflightReport:
    """Check every point against every limit; SafetyLimitError on the first violation.

    Call before enabling any output. Returns the report (per-port maxima) when all is well.
    """
    report = check_limits(sequence, bench)
    failed = report.violations
    if failed:
        first = min(failed, key=lambda c: (c.violation_index, report.checks.index(c)))
        raise safety_error(sequence, first)
    refusal = risk_refusal(sequence, report)
    if refusal is not None:
        raise refusal
    return report
