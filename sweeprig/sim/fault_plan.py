"""The plan of faults of a simulated bench: the ``[[faults]]`` tables of a sim-bench
description, validated (no simulator: :mod:`sweeprig.sim.faults` injects them).

See :mod:`sweeprig.sim.faults` for what each kind does and how the triggers work.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field, ValidationError, model_validator

from sweeprig.errors import InputError

FaultKind = Literal["timeout", "drop", "error", "garble", "reset", "swallow", "freeze", "late",
                    "unlock", "trip"]
#: The roles with a 10 MHz reference input, which an ``unlock`` fault can take away.
REFERENCED_ROLES = ("rf", "rf2", "lo", "sa")
#: The roles with an output protection (the chamber: its over-temperature limiter), which a
#: ``trip`` fault trips.
PROTECTED_ROLES = ("rf", "rf2", "lo", "dc", "chamber")

_TRIGGERS = ("at_time_s", "at_command", "rate", "match")


class FaultSpec(BaseModel):
    """One planned fault (see the module docstring)."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    role: str = Field(min_length=1)
    kind: FaultKind
    at_time_s: float | None = Field(default=None, ge=0.0)
    at_command: int | None = Field(default=None, ge=1)
    rate: float | None = Field(default=None, gt=0.0, le=1.0)
    match: str | None = Field(default=None, min_length=1)
    seed: int = 0
    max_count: int | None = Field(default=None, ge=1)
    code: int = -200
    text: str | None = None
    whole_bench: bool = False
    delay_s: float = Field(default=1.0, gt=0.0, le=600.0)
    """How late a ``late`` reply comes, wall seconds (sooner if another message arrives)."""

    @model_validator(mode="after")
    def _one_trigger(self) -> FaultSpec:
        given = [n for n in _TRIGGERS if getattr(self, n) is not None]
        if given == ["rate", "match"]:  # a rate among the matching messages only
            given = ["match"]
        if len(given) != 1:
            raise ValueError(
                "give exactly one trigger: at_time_s, at_command, rate or match"
                + (f" (got {', '.join(given)})" if given else "")
            )
        if self.max_count is not None and self.rate is None and self.match is None:
            raise ValueError("max_count applies to rate and match triggers only")
        if self.whole_bench and self.kind != "freeze":
            raise ValueError("whole_bench applies to freeze faults only")
        if self.kind == "unlock" and self.role not in REFERENCED_ROLES:
            raise ValueError(f"an unlock fault takes a role with a 10 MHz reference input "
                             f"({', '.join(REFERENCED_ROLES)}), not {self.role!r}")
        if self.kind == "trip" and self.role not in PROTECTED_ROLES:
            raise ValueError(f"a trip fault takes a role with an output protection "
                             f"({', '.join(PROTECTED_ROLES)}), not {self.role!r}")
        return self


class FaultPlan(BaseModel):
    """All planned faults of a simulated bench."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    faults: tuple[FaultSpec, ...] = ()

    @classmethod
    def from_mapping(cls, data: Mapping[str, Any], *, where: str = "fault plan") -> FaultPlan:
        """Validate a dict / parsed TOML table; raises :class:`InputError` naming the key."""
        try:
            return cls.model_validate(dict(data))
        except ValidationError as exc:
            first = exc.errors()[0]
            loc = ".".join(str(p) for p in first["loc"])
            raise InputError(
                f"{first['msg']}",
                where=f"{where}: {loc}" if loc else where,
                fix="each [[faults]] table needs role, kind (timeout|drop|error|garble|reset|"
                "swallow|freeze|late|unlock|trip) and one trigger (at_time_s, at_command, rate or "
                "match); no other keys",
            ) from exc

    def for_role(self, role: str) -> tuple[FaultSpec, ...]:
        return tuple(f for f in self.faults if f.role == role)
