"""Quantities as people write them ("2.4 GHz", "-10 dBm", "85 degC") → plain floats.

This is the only place strings become numbers. Internal units (the canonical form used by
every other module, named in field names such as ``freq_hz``):

==============  =========  ===================================================
kind            internal   accepted suffixes (case-insensitive unless noted)
==============  =========  ===================================================
frequency       Hz         Hz, kHz, MHz, GHz
power           dBm        dBm, dBW, W, mW, uW, µW, nW
level_db        dB         dB (a ratio: loss, gain, attenuation, dBc)
voltage         V          V, mV, uV, kV
current         A          A, mA, uA
time            s          s, ms, us, µs, ns, min, h
temperature     degC       degC, °C, C, K (converted), degF (converted)
resistance      ohm        ohm, Ω, kohm, kΩ
count           1          (no suffix)
==============  =========  ===================================================

A bare number (``2.4e9`` or ``"2.4e9"``) is taken in the internal unit of its kind.
"""

from __future__ import annotations

import math
import re
from typing import Literal

from sweeprig.errors import UnitError

Kind = Literal[
    "frequency", "power", "level_db", "voltage", "current", "time", "temperature",
    "resistance", "count",
]

KINDS: tuple[str, ...] = (
    "frequency", "power", "level_db", "voltage", "current", "time", "temperature",
    "resistance", "count",
)

_NUMBER = r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?"
_QUANTITY_RE = re.compile(rf"^\s*(?P<num>{_NUMBER})\s*(?P<unit>[^\s\d+-][^\s]*)?\s*$")

# suffix (lower-case) → multiplier into the internal unit
_LINEAR: dict[str, dict[str, float]] = {
    "frequency": {"hz": 1.0, "khz": 1e3, "mhz": 1e6, "ghz": 1e9},
    "voltage": {"v": 1.0, "mv": 1e-3, "uv": 1e-6, "µv": 1e-6, "kv": 1e3},
    "current": {"a": 1.0, "ma": 1e-3, "ua": 1e-6, "µa": 1e-6},
    "time": {"s": 1.0, "ms": 1e-3, "us": 1e-6, "µs": 1e-6, "ns": 1e-9, "min": 60.0, "h": 3600.0},
    "resistance": {"ohm": 1.0, "ω": 1.0, "kohm": 1e3, "kω": 1e3},
    "level_db": {"db": 1.0},
    "count": {},
}
_POWER_WATTS = {"w": 1.0, "mw": 1e-3, "uw": 1e-6, "µw": 1e-6, "nw": 1e-9}

_EXAMPLES = {
    "frequency": '"2.4 GHz" or "70 MHz"',
    "power": '"-10 dBm"',
    "level_db": '"3.5 dB"',
    "voltage": '"3.3 V"',
    "current": '"120 mA"',
    "time": '"50 ms" or "10 min"',
    "temperature": '"85 degC"',
    "resistance": '"50 ohm"',
    "count": "a whole number such as 16",
}


def example(kind: str) -> str:
    """A short example of a valid value of ``kind``, for error messages."""
    return _EXAMPLES.get(kind, "a number")


_DISPLAY_SUFFIXES: dict[str, list[str]] = {
    "frequency": ["Hz", "kHz", "MHz", "GHz"],
    "power": ["dBm", "dBW", "W", "mW", "uW", "nW"],
    "level_db": ["dB"],
    "voltage": ["V", "mV", "uV", "kV"],
    "current": ["A", "mA", "uA"],
    "time": ["s", "ms", "us", "ns", "min", "h"],
    "temperature": ["degC", "°C", "C", "K", "degF"],
    "resistance": ["ohm", "kohm"],
    "count": [],
}


def suffixes(kind: str) -> list[str]:
    """The unit suffixes accepted for ``kind`` (for documentation and error messages)."""
    return list(_DISPLAY_SUFFIXES.get(kind, []))


def parse_quantity(value: object, kind: str, *, where: str | None = None) -> float:
    """Parse ``value`` (a number or a string with a unit) as a ``kind`` quantity.

    Returns the value in the internal unit of ``kind`` (see the module docstring).
    Raises :class:`UnitError` naming ``where`` for anything else, including NaN and
    infinities, booleans, a unit of the wrong dimension, or a non-positive power in watts.
    """
    if kind not in KINDS:
        raise ValueError(f"unknown quantity kind {kind!r}")
    if isinstance(value, bool) or value is None:
        raise _error(value, kind, where, "is not a quantity")
    if isinstance(value, int | float):
        try:
            number, unit = float(value), ""
        except OverflowError:  # a huge integer literal
            raise _error(value, kind, where, "is out of range") from None
    elif isinstance(value, str):
        match = _QUANTITY_RE.match(value)
        if match is None:
            raise _error(value, kind, where, "is not a number followed by a unit")
        number, unit = float(match["num"]), (match["unit"] or "")
    else:
        raise _error(value, kind, where, f"is a {type(value).__name__}, not a quantity")
    if not math.isfinite(number):
        raise _error(value, kind, where, "is not a finite number")
    result = _convert(number, unit, kind, value, where)
    if not math.isfinite(result):
        raise _error(value, kind, where, "is out of range")
    return result


def _convert(number: float, unit: str, kind: str, raw: object, where: str | None) -> float:
    key = unit.strip().lower()
    if key == "":
        if kind == "count" and number != int(number):
            raise _error(raw, kind, where, "is not a whole number")
        return number
    if kind == "power":
        if key == "dbm":
            return number
        if key == "dbw":
            return number + 30.0
        if key in _POWER_WATTS:
            watts = number * _POWER_WATTS[key]
            if watts <= 0:
                raise _error(raw, kind, where, "is not a positive power")
            return 10.0 * math.log10(watts / 1e-3)
    elif kind == "temperature":
        if key in ("degc", "°c", "c", "celsius"):
            return number
        if key == "k":
            if number < 0:
                raise _error(raw, kind, where, "is below absolute zero")
            return number - 273.15
        if key in ("degf", "°f", "f"):
            return (number - 32.0) * 5.0 / 9.0
    elif key in _LINEAR.get(kind, {}):
        return number * _LINEAR[kind][key]
    dimension = kind.replace("_", " ")
    problem = f"has unit {short_repr(unit)}, which is not a {dimension} unit"
    raise _error(raw, kind, where, problem)


#: Longest text a message repeats from a file; longer text is cut (see :func:`shorten`).
SHOWN_CHARS = 80


def shorten(text: str, limit: int = SHOWN_CHARS) -> str:
    """``text`` cut to ``limit`` characters with an ellipsis and its length, when longer."""
    if len(text) <= limit:
        return text
    return f"{text[:limit]}… ({len(text):,} characters)"


def short_repr(value: object, limit: int = SHOWN_CHARS) -> str:
    """``repr(value)``, a long string cut to ``limit`` characters (see :func:`shorten`)."""
    if isinstance(value, str) and len(value) > limit:
        return f"{value[:limit]!r}… ({len(value):,} characters)"
    return shorten(repr(value), limit)


def _error(raw: object, kind: str, where: str | None, problem: str) -> UnitError:
    accepted = ", ".join(suffixes(kind)) or "no unit"
    return UnitError(
        f"{short_repr(raw)} {problem}",
        where=where,
        fix=f"write a {kind.replace('_', ' ')} such as {example(kind)} (units: {accepted})",
    )


def format_frequency(freq_hz: float) -> str:
    """Human-readable frequency, e.g. 2.4e9 → '2.4 GHz'."""
    for scale, name in ((1e9, "GHz"), (1e6, "MHz"), (1e3, "kHz")):
        if abs(freq_hz) >= scale:
            return f"{freq_hz / scale:.6g} {name}"
    return f"{freq_hz:.6g} Hz"


def dbm_to_watts(power_dbm: float) -> float:
    """dBm → W."""
    return 1e-3 * 10.0 ** (power_dbm / 10.0)


def watts_to_dbm(power_w: float) -> float:
    """W → dBm (power must be positive)."""
    return 10.0 * math.log10(power_w / 1e-3)


def celsius_to_kelvin(temp_c: float) -> float:
    """degC → K."""
    return temp_c + 273.15
