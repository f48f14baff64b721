"""The range an operation's value may take, with where each bound was written.

One :class:`OpLimits` per operation of one instrument: every maximum and minimum that applies
to it (the driver profile's own range, the bench file's safety limits, the part's ratings),
each a :class:`Bound` that names its origin. The driver refuses a value with
:meth:`OpLimits.refusal` before sending it, and the pre-flight check refuses a planned value
with the same method (vectorised: :func:`beyond`), so ``check`` and the run refuse exactly the
same set of values and name the same origin.

"≤ limit" allows float noise of :data:`LIMIT_TOLERANCE`, relative above 1 (0.1 dBm + 0.2 dB
of loss is 0.30000000000000004 dBm: a setting exactly at its limit is within it).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Literal

import numpy as np

from sweeprig.instruments.ops import UNIT_SYMBOL
from sweeprig.instruments.profile import Profile, builtin_profile_dirs

LIMIT_TOLERANCE = 1e-9
"""Relative float tolerance of every limit check (absolute below 1)."""

Side = Literal["max", "min"]
Source = Literal["profile", "bench", "part"]


@dataclass(frozen=True)
class Bound:
    """One bound on a value: ``value`` (in the operation's unit), ``side`` ("max" or "min").

    ``source``: "profile" (the instrument's own range), "bench" (a safety limit of the bench
    file) or "part" (the part's rating). ``origin``: who sets it and where, for messages,
    e.g. ``the rf source's profile 'scpi-source' (drivers/scpi-source.toml:23: ops.power.max)``.
    """

    value: float
    side: Side
    source: Source
    origin: str

    def describe(self, unit: str = "") -> str:
        """``<origin> allows at most 20 dBm`` (or ``at least``), for messages."""
        amount = f"{self.value:g} {unit}".strip()
        return f"{self.origin} allows {'at most' if self.side == 'max' else 'at least'} {amount}"

    def refuses(self, value: float) -> bool:
        """Whether ``value`` is past this bound (beyond the float tolerance): :func:`beyond`
        for one value, in plain float arithmetic (the same IEEE 754 double operations, so
        the same verdict for every value, NaN and infinities included; pinned by
        tests/instruments/test_limit_fast_path.py), since the drivers ask it for every value
        they send."""
        return scalar_beyond(float(value), self.value, self.side == "max")


def beyond(values: np.ndarray, bound: float, side: Side) -> np.ndarray:
    """Element-wise: is each value past ``bound`` on ``side``? (The one rule of the project.)"""
    values = np.asarray(values, dtype=float)
    slack = LIMIT_TOLERANCE * np.maximum(1.0, np.abs(values))
    if side == "max":
        return values > bound + slack
    return values < bound - slack


def scalar_beyond(value: float, bound: float, is_max: bool) -> bool:
    """:func:`beyond` for one float: the same operations in the same order (the slack
    ``LIMIT_TOLERANCE * max(1, |value|)``, then one comparison), so the same verdict."""
    magnitude = abs(value)
    slack = LIMIT_TOLERANCE * (magnitude if magnitude > 1.0 else 1.0)
    if is_max:
        return value > bound + slack
    return value < bound - slack


@dataclass(frozen=True)
class OpLimits:
    """Every bound on one operation's value. ``unit``: its symbol for messages ("dBm").

    The tightest maximum and minimum are found once, when the limits are made (they never
    change: :meth:`with_bound` makes new limits), since every value sent is checked."""

    op: str
    unit: str = ""
    bounds: tuple[Bound, ...] = ()
    high: Bound | None = field(init=False, repr=False, compare=False)
    """The tightest maximum (the first written wins a tie), None when there is none."""
    low: Bound | None = field(init=False, repr=False, compare=False)
    """The tightest minimum, None when there is none."""

    def __post_init__(self) -> None:
        object.__setattr__(self, "high",
                           _tightest([b for b in self.bounds if b.side == "max"], min))
        object.__setattr__(self, "low",
                           _tightest([b for b in self.bounds if b.side == "min"], max))

    def with_bound(self, bound: Bound) -> OpLimits:
        """These limits plus ``bound`` (limits only ever get tighter: all bounds hold)."""
        return OpLimits(self.op, self.unit, (*self.bounds, bound))

    def refusal(self, value: float) -> Bound | None:
        """The bound ``value`` is past (the tightest maximum first), None when within."""
        number = float(value)
        high, low = self.high, self.low
        if high is not None and scalar_beyond(number, high.value, True):
            return high
        if low is not None and scalar_beyond(number, low.value, False):
            return low
        return None

    def as_pair(self) -> tuple[float | None, float | None]:
        """(min, max) in force, None for no bound."""
        low, high = self.low, self.high
        return (None if low is None else low.value, None if high is None else high.value)


def _tightest(bounds: list[Bound], pick: type[min] | type[max]) -> Bound | None:
    if not bounds:
        return None
    best = pick(b.value for b in bounds)
    return next(b for b in bounds if b.value == best)


def profile_file_label(path: Path | None, name: str) -> str:
    """How a profile file is named in messages: ``drivers/<file>`` for a shipped profile,
    else the path as given (relative to the working directory when below it)."""
    if path is None:
        return f"profile {name!r}"
    try:
        resolved = path.resolve()
        if any(resolved.parent == d.resolve() for d in builtin_profile_dirs()):
            return f"drivers/{path.name}"
        return str(resolved.relative_to(Path.cwd().resolve()))
    except (ValueError, OSError):
        return str(path)


def role_label(role: str) -> str:
    """``"the rf source"``-style name of a bench role, for messages."""
    names = {"rf": "rf source", "rf2": "rf2 source", "lo": "lo source", "sa": "analyzer",
             "pm": "power meter", "dc": "dc supply", "chamber": "chamber", "switch": "switch",
             "simctl": "simulation control"}
    return f"the {names.get(role, role)}"


def profile_limits(profile: Profile, op: str, role: str) -> OpLimits:
    """The profile's own range for ``op`` (the instrument's), each bound naming its line."""
    operation = profile.op(op)
    unit = UNIT_SYMBOL.get(operation.spec.unit, "")
    label = profile_file_label(profile.path, profile.name)
    bounds: list[Bound] = []
    for side, value, line, elsewhere in (
        ("max", operation.max, operation.max_line, operation.max_place),
        ("min", operation.min, operation.min_line, operation.min_place),
    ):
        if value is None:
            continue
        if elsewhere is not None:  # from a profile this one extends
            place = f"{elsewhere}: ops.{op}.{side}"
        else:
            place = f"{label}:{line}: ops.{op}.{side}" if line is not None else f"ops.{op}.{side}"
        bounds.append(Bound(float(value), side, "profile",  # type: ignore[arg-type]
                            f"{role_label(role)}'s profile {profile.name!r} ({place})"))
    return OpLimits(op, unit, tuple(bounds))
