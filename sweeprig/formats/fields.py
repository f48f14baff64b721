"""Field types shared by the sequence and bench models.

Quantities are written as people write them ("2.4 GHz", "-10 dBm") and become floats in the
internal unit of their kind (Hz, dBm, dB, V, A, s, degC) through
:func:`sweeprig.units.parse_quantity` only. A bare number is taken in that internal unit.

Sweep axes take one of three shapes: a single value, a list of values, or a range table
(``{start, stop, step}``, ``{start, stop, points}``, ``{start, stop, points, scale = "log"}``).
"""

from __future__ import annotations

import math
import re
from collections.abc import Callable
from fractions import Fraction
from pathlib import Path
from typing import Annotated, Any, ClassVar, Literal

from pydantic import (
    BaseModel,
    BeforeValidator,
    ConfigDict,
    Discriminator,
    Field,
    PrivateAttr,
    Tag,
    WithJsonSchema,
    create_model,
    model_validator,
)
from pydantic_core import PydanticCustomError

from sweeprig.errors import UnitError
from sweeprig.formats.toml_locate import KeyPath, format_key_path
from sweeprig.units import example, format_frequency, parse_quantity, suffixes

#: Internal unit of each quantity kind (what a bare number means).
INTERNAL_UNIT: dict[str, str] = {
    "frequency": "Hz",
    "power": "dBm",
    "level_db": "dB",
    "voltage": "V",
    "current": "A",
    "time": "s",
    "temperature": "degC",
    "ppm": "ppm",
}

#: Relative tolerance for "stop falls on the step grid".
GRID_TOL = 1e-9

#: Prefix marking union-branch tags in pydantic error locations (stripped from key paths).
TAG_PREFIX = "~"


class Frozen(BaseModel):
    """Base of every file model: unknown keys are errors, instances are immutable."""

    model_config = ConfigDict(extra="forbid", frozen=True, populate_by_name=True)


class LocatedFile(Frozen):
    """A whole file's model that can say where each of its keys was written.

    The loader sets ``_where`` (key path → ``file:line: key.path``), ``_source`` (the file
    as shown in messages), the included fragments and the merged table; a model built in code
    has none of them and names the key path alone.
    """

    _where: Callable[[KeyPath], str] | None = PrivateAttr(None)
    _source: str | None = PrivateAttr(None)
    _included: tuple[tuple[Path, str], ...] = PrivateAttr(())
    _merged: dict[str, Any] | None = PrivateAttr(None)

    def where(self, key_path: KeyPath) -> str:
        """``file:line: key.path`` of a key (the key path alone when not loaded from a file)."""
        if self._where is not None:
            return self._where(tuple(key_path))
        return format_key_path(tuple(key_path))

    @property
    def source(self) -> str | None:
        """The file this model was loaded from, as shown in messages."""
        return self._source

    @property
    def included_files(self) -> tuple[tuple[Path, str], ...]:
        """Every fragment the file included (recursively, in reading order): path and the
        exact text read. Empty when it included none or was not loaded from a file."""
        return self._included

    @property
    def merged_table(self) -> dict[str, Any] | None:
        """The table the model was validated from, with every include merged in (without the
        ``include`` key); None when not loaded from a file."""
        return self._merged


def quantity_parser(kind: str) -> Callable[[Any], float]:
    """A pydantic before-validator parsing ``kind`` quantities (errors stay pydantic errors)."""
    def parse(value: Any) -> float:
        if isinstance(value, str) and kind == "level_db" and value.strip().lower().endswith("dbc"):
            value = value.strip()[:-1]  # "-60 dBc" is a level in dB relative to the carrier
        try:
            return parse_quantity(value, kind)
        except UnitError as exc:
            raise PydanticCustomError(
                "quantity", "{what}", {"what": exc.what, "fix": exc.fix or ""}
            ) from None

    return parse


_NUMBER_PATTERN = r"[+-]?([0-9]+[.]?[0-9]*|[.][0-9]+)([eE][+-]?[0-9]+)?"


def unit_pattern(kind: str) -> str:
    """A JSON-Schema regex for "number + optional unit" of ``kind`` (units case-insensitive)."""
    units = list(suffixes(kind)) + (["dBc"] if kind == "level_db" else [])

    def nocase(unit: str) -> str:
        return "".join(f"[{c.lower()}{c.upper()}]" if c.isalpha() and c.lower() != c.upper()
                       else re.escape(c) for c in unit)

    alternatives = "|".join(nocase(u) for u in sorted(units, key=len, reverse=True))
    return rf"^\s*{_NUMBER_PATTERN}\s*({alternatives})?\s*$"


def quantity(kind: str, description: str = "") -> Any:
    """An annotated float type parsed from a number or a string with a unit of ``kind``."""
    units = ", ".join(suffixes(kind))
    text = f"{description} " if description else ""
    text += f"({kind.replace('_', ' ')}, e.g. {example(kind)}; a bare number is in "
    text += f"{INTERNAL_UNIT[kind]}; units: {units})"
    schema = {
        "anyOf": [{"type": "number"}, {"type": "string", "pattern": unit_pattern(kind)}],
        "description": text.strip(),
    }
    return Annotated[float, BeforeValidator(quantity_parser(kind)), WithJsonSchema(schema)]


Frequency = quantity("frequency")
Power = quantity("power")
LevelDb = quantity("level_db")
Voltage = quantity("voltage")
Current = quantity("current")
Time = quantity("time")
Temperature = quantity("temperature")
Ppm = quantity("ppm")

_KIND_OF_TYPE_NAME = {
    "frequency": Frequency,
    "power": Power,
    "level_db": LevelDb,
    "voltage": Voltage,
    "current": Current,
    "time": Time,
    "temperature": Temperature,
}

#: A whole number as TOML writes it (no strings, no floats).
StrictInt = Annotated[int, Field(strict=True)]

#: true or false as TOML writes them (no strings such as "yes", no numbers).
StrictBool = Annotated[bool, Field(strict=True)]


class RangeSpec(Frozen):
    """A range of values: ``start`` to ``stop`` by ``step``, or in ``points`` values.

    ``stop`` is included when it falls on the step grid. ``scale = "log"`` spaces ``points``
    values geometrically (frequency axes only). Subclasses fix the quantity kind.
    """

    kind: ClassVar[str] = "frequency"
    start: float
    stop: float
    step: float | None = None
    points: StrictInt | None = None
    scale: Literal["linear", "log"] = "linear"

    @model_validator(mode="after")
    def _check(self) -> RangeSpec:
        fmt = _fmt_kind(self.kind)
        if self.step is None and self.points is None:
            raise _err("a range needs either 'step' or 'points'",
                       "add step = ... or points = ... to the range")
        if self.step is not None and self.points is not None:
            raise _err("a range takes 'step' or 'points', not both", "remove one of them")
        if self.start > self.stop:
            raise _err(f"reversed range: start {fmt(self.start)} is above stop {fmt(self.stop)}",
                       "swap start and stop (sweeps always run from start up to stop)")
        if self.start == self.stop:
            raise _err(f"empty range: start and stop are both {fmt(self.start)}",
                       "write a single value instead of a range")
        if self.step is not None:
            if self.scale == "log":
                raise _err("scale = 'log' needs 'points', not 'step'",
                           "replace step with points = N")
            if self.step <= 0:
                raise _err(f"step {fmt(self.step)} is not positive",
                           "use a positive step; sweeps run from start up to stop")
            if self.step > self.stop - self.start:
                raise _err(f"step {fmt(self.step)} is wider than the range, which would hold "
                           "only its start", "use a smaller step or a single value")
        if self.points is not None and self.points < 2:
            raise _err(f"a range needs at least 2 points, not {self.points}",
                       "use points >= 2, or write a single value")
        if self.scale == "log":
            if self.kind != "frequency":
                raise _err(f"scale = 'log' is only for frequency axes, not {self.kind} ones",
                           "remove scale or use scale = 'linear'")
            if self.start <= 0:
                raise _err("a log range needs a start above zero", "use a positive start")
        return self


    def count(self) -> int:
        """Number of values, computed arithmetically (stop included when on the grid)."""
        if self.step is not None:
            steps = (self.stop - self.start) / self.step + GRID_TOL
            if not math.isfinite(steps):  # beyond the float range: count exactly instead
                return math.floor(Fraction(self.stop - self.start) / Fraction(self.step)) + 1
            return math.floor(steps) + 1
        assert self.points is not None
        return self.points


def axis_len(value: AxisValue) -> int:
    """Number of values in a validated axis value (a float, a tuple or a range)."""
    if isinstance(value, RangeSpec):
        return value.count()
    if isinstance(value, tuple | list):
        return len(value)
    return 1


def _fmt_kind(kind: str) -> Callable[[float], str]:
    unit = INTERNAL_UNIT.get(kind, "")

    def fmt(value: float) -> str:
        if kind == "frequency":
            return format_frequency(value)
        return f"{value:g} {unit}".strip()

    return fmt


def _err(what: str, fix: str) -> PydanticCustomError:
    return PydanticCustomError("semantic", "{what}", {"what": what, "fix": fix})


_RANGE_MODELS: dict[str, type[RangeSpec]] = {}


def range_model(kind: str) -> type[RangeSpec]:
    """The range model whose start/stop/step are quantities of ``kind``."""
    if kind not in _RANGE_MODELS:
        q = _KIND_OF_TYPE_NAME[kind]
        # A power step is a ratio ("1 dB"), not a power: start and stop are dBm, the step dB.
        step_q = _KIND_OF_TYPE_NAME["level_db"] if kind == "power" else q
        name = "".join(part.capitalize() for part in kind.split("_")) + "Range"
        model = create_model(
            name,
            __base__=RangeSpec,
            start=(q, Field(description="first value")),
            stop=(q, Field(description="last value (included when on the step grid)")),
            step=(step_q | None, Field(default=None, description="distance between values"
                                       + (" (dB)" if kind == "power" else ""))),
        )
        model.kind = kind  # type: ignore[misc]
        _RANGE_MODELS[kind] = model
    return _RANGE_MODELS[kind]


def _axis_shape(value: Any) -> str:
    if isinstance(value, dict | RangeSpec):
        return f"{TAG_PREFIX}range"
    if isinstance(value, list | tuple):
        return f"{TAG_PREFIX}list"
    return f"{TAG_PREFIX}value"


#: What an axis field holds after validation: one value, a tuple of values, or a range.
AxisValue = float | tuple[float, ...] | RangeSpec


def axis(kind: str) -> Any:
    """Annotated type of a sweep axis of ``kind``: a value, a non-empty list, or a range."""
    q = _KIND_OF_TYPE_NAME[kind]
    rng = range_model(kind)
    return Annotated[
        Annotated[q, Tag(f"{TAG_PREFIX}value")]
        | Annotated[tuple[q, ...], Field(min_length=1), Tag(f"{TAG_PREFIX}list")]
        | Annotated[rng, Tag(f"{TAG_PREFIX}range")],
        Discriminator(_axis_shape),
    ]
