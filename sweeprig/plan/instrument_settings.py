"""What the run sends besides the swept levels: settings from the bench file and each
reading's analyzer and power-meter settings, against every limit on them.

:func:`check_bench_settings` refuses a bench-file setting the drivers would refuse (the safe
state's supply voltage and chamber set point, the supply's current limit, the switch
channels). :func:`reading_settings` works out every reading's analyzer and power-meter
settings exactly as the run does (:class:`~sweeprig.plan.expand.PointBuilder`), for the
pre-flight check to hold against the instrument's range. The limits are the drivers' own
(:mod:`sweeprig.plan.instrument_limits`).
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from dataclasses import dataclass

import numpy as np

from sweeprig.errors import InputError, SafetyLimitError
from sweeprig.formats.bench import Bench
from sweeprig.formats.sequence import Sequence
from sweeprig.instruments.limits import Bound, OpLimits
from sweeprig.instruments.profile import Profile
from sweeprig.plan.expand import Layout, PointBuilder, StudyBlock

#: Points per study whose analyzer and power-meter settings are worked out one by one (about
#: 0.1 ms each); a larger study is checked at the corners of its grid (said in the report).
EXACT_READING_POINTS = 50_000

CAUTION = ("Caution: RF power can damage the DUT and the analyzer; check the attenuators and "
           "path losses, and follow your lab's rules.")


@dataclass(frozen=True)
class SettingValues:
    """Every value one operation of one role is sent over the plan, with the point index of
    each, and the limits that hold for it. ``label``: its name in messages."""

    role: str
    op: str
    label: str
    unit: str
    limits: OpLimits
    safety: bool
    values: np.ndarray
    indices: np.ndarray


#: Said with a refused bench-file setting, per operation (RF power has :data:`CAUTION`).
_SETTING_CAUTION = {
    "voltage": "Caution: too much supply voltage can destroy the part.",
    "current_limit": "Caution: a current limit above what the part takes cannot protect it.",
    "setpoint": "Caution: a chamber beyond its range or the part's can damage both.",
}


def _refuse_setting(limits: OpLimits, bound: Bound, value: float, safety: bool, what: str,
                    where: str, op: str) -> None:
    """Raise the error a driver would raise for a bench-file setting past ``bound``."""
    symbol = "degC" if limits.unit == "°C" else limits.unit
    amount = f"{value:g} {symbol}".strip()
    problem = "above the maximum" if bound.side == "max" else "below the minimum"
    message = f"{what} {amount} is {problem}: {bound.describe(symbol)}"
    if safety:
        raise SafetyLimitError(
            f"{message}. {_SETTING_CAUTION.get(op, CAUTION)}", where=where,
            fix="change the setting in the bench file"
            + (" (the instrument cannot go beyond its own range, its driver profile)"
               if bound.source == "profile" else ", or raise the limit only if the part and "
               "the bench can take it"))
    raise InputError(message, where=where,
                     fix="choose a value inside the instrument's range (its driver profile)"
                     if bound.source == "profile" else "choose a value inside the limits")


def check_bench_settings(sequence: Sequence, bench: Bench, roles: Mapping[str, str],
                          limits: Mapping[str, Mapping[str, OpLimits]]) -> None:
    """Refuse, as the drivers would, a setting the run sends from the bench file itself: the
    safe state (supply voltage, chamber idle set point), the supply's current limit, the
    switch channels. ``limits``: role → operation → limits (of the roles the run opens)."""
    def setting(role: str, op: str, value: float, what: str, key: tuple[str, ...],
                safety: bool) -> None:
        found = limits.get(role, {}).get(op)
        bound = None if found is None else found.refusal(value)
        if found is not None and bound is not None:
            _refuse_setting(found, bound, value, safety, what, bench.where(key), op)

    state = bench.safe_state
    if "dc" in roles:
        if isinstance(state.supply, float):
            setting("dc", "voltage", state.supply, "the safe-state supply voltage",
                    ("safe_state", "supply"), safety=True)
        if bench.limits.supply_max_current is not None:
            setting("dc", "current_limit", float(bench.limits.supply_max_current),
                    "the supply's current limit", ("limits", "supply_max_current"), safety=True)
    if "chamber" in roles and isinstance(state.chamber, float):
        setting("chamber", "setpoint", state.chamber, "the safe-state chamber set point",
                ("safe_state", "chamber"), safety=True)
    if "switch" in roles:
        ports = {"rf" if kind == "lo_at_rf" else "if"
                 for kind in sequence.reading_kinds() - {"supply_current", "input_power"}}
        spec = bench.role("switch")
        for port in sorted(ports):
            given = spec is not None and spec.channels is not None and port in spec.channels
            key = ("roles", "switch", "channels", port) if given else ("roles", "switch")
            what = f"the {port.upper()} port's switch channel" + (
                "" if given else " (by default)")
            setting("switch", "channel", float(bench.switch_channel(port)),
                    what, key, safety=False)


#: Analyzer operation → the reading's setting it is sent, its unit and its name in messages.
_ANALYZER_OPS: tuple[tuple[str, str, str, str], ...] = (
    ("centre", "center_hz", "Hz", "centre frequency"), ("span", "span_hz", "Hz", "span"),
    ("rbw", "rbw_hz", "Hz", "RBW"), ("ref_level", "reference_level_dbm", "dBm",
                                     "reference level"),
    ("attenuation", "attenuation_db", "dB", "attenuation"), ("averages", "averages", "",
                                                             "averages"),
)


def reading_settings(sequence: Sequence, bench: Bench, lay: Layout,
                     profiles: Mapping[str, Profile],
                     limits: Mapping[str, Mapping[str, OpLimits]],
                     builder: PointBuilder | None = None,
                     ) -> tuple[list[SettingValues], list[str]]:
    """Every analyzer and power-meter setting of every reading that has a limit, planned
    exactly as the run plans it (readings do not depend on the temperature or supply, so the
    first pass stands for all); and notes on what was checked less than exactly.
    ``builder``: the points' builder of the caller (it may keep points for another reader
    of them), else a new one."""
    wanted: list[tuple[str, str, str, str]] = []  # (role, op, label, unit)
    if "sa" in profiles:
        for op, _attr, unit, name in _ANALYZER_OPS:
            if op in limits["sa"] and limits["sa"][op].bounds:
                wanted.append(("sa", op, f"analyzer {name}", unit))
        if "marker_level" in limits["sa"] and limits["sa"]["marker_level"].bounds:
            wanted.append(("sa", "marker_level", "analyzer marker frequency", "Hz"))
    if "pm" in profiles and "frequency" in limits["pm"] and limits["pm"]["frequency"].bounds:
        wanted.append(("pm", "frequency", "power meter frequency", "Hz"))
    notes: list[str] = []
    if not wanted:
        return [], notes
    values: dict[tuple[str, str], list[float]] = {(r, op): [] for r, op, _, _ in wanted}
    indices: dict[tuple[str, str], list[int]] = {(r, op): [] for r, op, _, _ in wanted}
    if builder is None:
        builder = PointBuilder(sequence, bench)
    for block in lay.blocks:
        base = lay.first_index(0, 0, block)
        local_points: Iterable[int]
        if block.count <= EXACT_READING_POINTS:
            local_points = range(block.count)
        else:
            local_points = corners(block)
            notes.append(
                f"study {block.study.name!r} has {block.count:,} points per pass: its analyzer "
                f"and power-meter settings were checked at the {len(local_points):,} corners "
                "of its grid only")
        for local in local_points:
            point = builder.point(base + local)
            for reading in point.readings:
                got: dict[tuple[str, str], float] = {}
                if reading.instrument == "sa" and reading.analyzer is not None:
                    for op, attr, _unit, _name in _ANALYZER_OPS:
                        got[("sa", op)] = float(getattr(reading.analyzer, attr))
                    if reading.freq_hz is not None:
                        got[("sa", "marker_level")] = reading.freq_hz
                elif reading.instrument == "pm":
                    got[("pm", "frequency")] = (reading.freq_hz if reading.freq_hz is not None
                                                else point.rf_freq_hz)
                for key, value in got.items():
                    if key in values:
                        values[key].append(value)
                        indices[key].append(point.index)
    return [SettingValues(role, op, label, unit, limits[role][op],
                          profiles[role].op(op).spec.safety,
                          np.asarray(values[(role, op)], dtype=float),
                          np.asarray(indices[(role, op)], dtype=np.int64))
            for role, op, label, unit in wanted], notes


def corners(block: StudyBlock) -> list[int]:
    """Local indices of the corners of a study's grid (first and last value of each axis)."""
    corners = {0}
    for axis_no in range(len(block.axes)):
        stride = 1
        for later in block.axes[axis_no + 1:]:
            stride *= later.count
        last = (block.axes[axis_no].count - 1) * stride
        corners |= {c + last for c in corners}
    return sorted(corners)
