"""Quantities as people write them ("2.4 GHz", "-10 dBm", "85 degC") → plain floats.

This is the only place strings become numbers. Internal units (the canonical form used by
every other module, named in field names such as ``freq_hz``):

==============  =========  ===================================================
kind            internal   accepted units
==============  =========  ===================================================
frequency       Hz         Hz, mHz, kHz, MHz, GHz
power           dBm        dBm, dBW, W, mW, uW, µW, nW
level_db        dB         dB (a ratio: loss, gain, attenuation, dBc)
voltage         V          V, mV, uV, µV, kV
current         A          A, mA, uA, µA
time            s          s, ms, us, µs, ns, min, h
temperature     degC       degC, °C, C, K (converted), degF (converted)
resistance      ohm        ohm, Ω, kohm, kΩ
count           1          (no suffix)
==============  =========  ===================================================

How a unit is read (see :func:`parse_quantity`):

- **SI prefixes by case.** A prefix symbol is case-sensitive, as the SI writes it (BIPM, *The
  International System of Units*, 9th edition 2019, section 3 and Table 7): ``m`` is milli and
  ``M`` mega, so ``"100 mHz"`` is 0.1 Hz and ``"100 MHz"`` 10⁸ Hz. The unit symbol after the
  prefix may be written in any case (``"2.4 GHZ"``, ``"-10 DBM"``).
- **A prefix in the wrong case** is accepted only when that letter in that case is no SI prefix
  at all (``"10 Khz"``, ``"2.4 ghz"``: there is no prefix ``K`` or ``g``). Where the case
  decides between two readings, the spelling is refused with the readings named: ``"70 mhz"``
  (milli or mega?) and ``"10 MV"`` (megavolt, which is no voltage of a bench; ``mV`` is milli).
- **Minus sign.** The typographic minus ``−`` (U+2212, as typeset text writes it) is read as
  ``-``. An en dash ``–`` or em dash ``—`` is refused: in ranges it means "to", so a value that
  starts with one is more likely a range cut short than a negative number.

A bare number (``2.4e9`` or ``"2.4e9"``) is taken in the internal unit of its kind.
"""

from __future__ import annotations

import math
import re
from typing import Literal

from sweeprig.errors import UnitError

Kind = Literal[
    "frequency", "power", "level_db", "voltage", "current", "time", "temperature",
    "resistance", "count", "ppm",
]

KINDS: tuple[str, ...] = (
    "frequency", "power", "level_db", "voltage", "current", "time", "temperature",
    "resistance", "count", "ppm",
)

_NUMBER = r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?"
_QUANTITY_RE = re.compile(rf"^\s*(?P<num>{_NUMBER})\s*(?P<unit>[^\s\d+-][^\s]*)?\s*$")

#: SI prefix symbol → (name, factor): the BIPM SI Brochure, 9th edition (2019), Table 7, with
#: the four prefixes the 27th CGPM added in 2022 (ronna, quetta, ronto, quecto); ``u`` is the
#: common stand-in for ``µ`` where the Greek letter cannot be typed (common practice, no
#: source). Checked against the brochure's table in ``tests/test_units.py``.
SI_PREFIXES: dict[str, tuple[str, float]] = {
    "Q": ("quetta", 1e30), "R": ("ronna", 1e27), "Y": ("yotta", 1e24), "Z": ("zetta", 1e21),
    "E": ("exa", 1e18), "P": ("peta", 1e15), "T": ("tera", 1e12), "G": ("giga", 1e9),
    "M": ("mega", 1e6), "k": ("kilo", 1e3), "h": ("hecto", 1e2), "da": ("deca", 1e1),
    "d": ("deci", 1e-1), "c": ("centi", 1e-2), "m": ("milli", 1e-3), "µ": ("micro", 1e-6),
    "u": ("micro", 1e-6), "n": ("nano", 1e-9), "p": ("pico", 1e-12), "f": ("femto", 1e-15),
    "a": ("atto", 1e-18), "z": ("zepto", 1e-21), "y": ("yocto", 1e-24), "r": ("ronto", 1e-27),
    "q": ("quecto", 1e-30),
}

#: Accepted units per kind: (prefix, symbol, factor into the internal unit). The prefix is
#: matched by case, the symbol in any case (see the module docstring).
_LINEAR: dict[str, tuple[tuple[str, str, float], ...]] = {
    "frequency": (("", "Hz", 1.0), ("m", "Hz", 1e-3), ("k", "Hz", 1e3), ("M", "Hz", 1e6),
                  ("G", "Hz", 1e9)),
    "voltage": (("", "V", 1.0), ("m", "V", 1e-3), ("u", "V", 1e-6), ("µ", "V", 1e-6),
                ("k", "V", 1e3)),
    "current": (("", "A", 1.0), ("m", "A", 1e-3), ("u", "A", 1e-6), ("µ", "A", 1e-6)),
    "time": (("", "s", 1.0), ("m", "s", 1e-3), ("u", "s", 1e-6), ("µ", "s", 1e-6),
             ("n", "s", 1e-9), ("", "min", 60.0), ("", "h", 3600.0)),
    "resistance": (("", "ohm", 1.0), ("", "Ω", 1.0), ("k", "ohm", 1e3), ("k", "Ω", 1e3)),
    "level_db": (("", "dB", 1.0),),
    "count": (),
    # a fractional frequency error: parts per million (internal) or per billion
    "ppm": (("", "ppm", 1.0), ("", "ppb", 1e-3)),
}
#: Watts for power (converted to dBm), and the logarithmic units, which take no prefix.
_POWER_WATTS: tuple[tuple[str, str, float], ...] = (
    ("", "W", 1.0), ("m", "W", 1e-3), ("u", "W", 1e-6), ("µ", "W", 1e-6), ("n", "W", 1e-9))
_POWER_LOG: tuple[tuple[str, str, float], ...] = (("", "dBm", 0.0), ("", "dBW", 30.0))
_TEMPERATURE: tuple[tuple[str, str, float], ...] = tuple(
    ("", name, 0.0) for name in ("degC", "°C", "C", "celsius", "K", "degF", "°F", "F"))

#: Unit symbol → its name, for messages.
_SYMBOL_NAMES = {"Hz": "hertz", "V": "volt", "A": "ampere", "s": "second", "W": "watt",
                 "ohm": "ohm", "Ω": "ohm"}

#: Dashes that look like a minus but are not one (refused; see the module docstring).
_DASHES = {"\u2013": "an en dash (–)", "\u2014": "an em dash (—)", "\u2012": "a figure dash (‒)",
           "\u2010": "a hyphen (‐)", "\u2011": "a non-breaking hyphen (‑)"}
#: Letters with two code points, read as one: Greek mu (the BIPM's micro) as the micro sign,
#: the ohm sign as Greek capital omega.
_SAME_LETTER = str.maketrans({"\u03bc": "\u00b5", "\u2126": "\u03a9"})
#: The typographic minus sign, read as ``-``.
MINUS_SIGN = "\u2212"

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
    "ppm": '"2 ppm" or "50 ppb"',
}


def example(kind: str) -> str:
    """A short example of a valid value of ``kind``, for error messages."""
    return _EXAMPLES.get(kind, "a number")


_DISPLAY_SUFFIXES: dict[str, list[str]] = {
    "frequency": ["Hz", "mHz", "kHz", "MHz", "GHz"],
    "power": ["dBm", "dBW", "W", "mW", "uW", "nW"],
    "level_db": ["dB"],
    "voltage": ["V", "mV", "uV", "kV"],
    "current": ["A", "mA", "uA"],
    "time": ["s", "ms", "us", "ns", "min", "h"],
    "temperature": ["degC", "°C", "C", "K", "degF"],
    "resistance": ["ohm", "kohm"],
    "count": [],
    "ppm": ["ppm", "ppb"],
}


def suffixes(kind: str) -> list[str]:
    """The unit suffixes accepted for ``kind`` (for documentation and error messages)."""
    return list(_DISPLAY_SUFFIXES.get(kind, []))


#: Largest magnitude accepted for a quantity of a kind, in its internal unit: anything beyond
#: is a slip of unit or exponent, and would overflow the planner's arithmetic (products of
#: harmonics and intermodulation, levels multiplied by their order). 10 THz is far above any
#: RF bench instrument; ±300 dBm (10^27 W down to 10^-33 W) lies far outside any level a bench
#: sets or reads (common practice, no source). A level in dB is only kept finite in arithmetic
#: here (±10^6 dB); the fields that hold one bound it to what they mean (an expected gain, a
#: path loss) with a message of their own. Other kinds are bounded where they are used (a
#: settle time or soak by the run's duration).
LARGEST_MAGNITUDE: dict[str, float] = {"frequency": 1e13, "power": 300.0, "level_db": 1e6}


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
        for dash, name in _DASHES.items():
            if dash in value:
                raise UnitError(
                    f"{short_repr(value)} has {name} where a minus sign would be",
                    where=where,
                    fix=f"write a negative value with '-' (or the minus sign '−', U+2212), "
                    f"e.g. {example(kind)}; a range is written with start and stop")
        match = _QUANTITY_RE.match(value.replace(MINUS_SIGN, "-").translate(_SAME_LETTER))
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
    largest = LARGEST_MAGNITUDE.get(kind)
    if largest is not None and abs(result) > largest:
        bound = (format_frequency(largest) if kind == "frequency"
                 else f"±{largest:g} {'dBm' if kind == 'power' else 'dB'}")
        raise _error(value, kind, where, f"is beyond {bound}, far outside anything a bench "
                     "instrument sets or reads (is the unit or the exponent right?)")
    return result


def _convert(number: float, unit: str, kind: str, raw: object, where: str | None) -> float:
    unit = unit.strip()
    if unit == "":
        if kind == "count" and number != int(number):
            raise _error(raw, kind, where, "is not a whole number")
        return number
    if kind == "power":
        found = _find_unit(unit, _POWER_LOG + _POWER_WATTS, kind, raw, where)
        if found is not None and found[1].lower() == "w":
            watts = number * found[2]
            if watts <= 0:
                raise _error(raw, kind, where, "is not a positive power")
            return 10.0 * math.log10(watts / 1e-3)
        if found is not None:
            return number + found[2]
    elif kind == "temperature":
        found = _find_unit(unit, _TEMPERATURE, kind, raw, where)
        if found is not None:
            name = found[1].lower()
            if name == "k":
                if number < 0:
                    raise _error(raw, kind, where, "is below absolute zero")
                return number - 273.15
            if name in ("degf", "°f", "f"):
                return (number - 32.0) * 5.0 / 9.0
            return number
    else:
        found = _find_unit(unit, _LINEAR.get(kind, ()), kind, raw, where)
        if found is not None:
            return number * found[2]
    dimension = kind.replace("_", " ")
    problem = f"has unit {short_repr(unit)}, which is not a {dimension} unit"
    raise _error(raw, kind, where, problem)


def _find_unit(unit: str, accepted: tuple[tuple[str, str, float], ...], kind: str,
               raw: object, where: str | None) -> tuple[str, str, float] | None:
    """The accepted (prefix, symbol, factor) that ``unit`` spells, None when none does.

    Prefixes are matched by case, symbols in any case; a spelling whose case decides between
    two readings is refused (see the module docstring)."""
    readings = [entry for entry in accepted
                if unit.lower() == (entry[0] + entry[1]).lower()
                and unit[len(entry[0]):].lower() == entry[1].lower()]
    for entry in readings:
        if unit == entry[0] + entry[1]:  # written exactly: the prefix's case is meant
            return entry
    if len(readings) > 1:
        spelled = " or ".join(f"{p + s} ({SI_PREFIXES[p][0] if p else 'no prefix'})"
                              for p, s, _f in readings)
        raise UnitError(
            f"{short_repr(raw)} has unit {short_repr(unit)}, whose case does not say which "
            "prefix it means",
            where=where, fix=f"write {spelled}: SI prefixes are case-sensitive (m milli, "
            "M mega)")
    if len(readings) == 1:
        prefix, symbol, _factor = readings[0]
        written = unit[:len(prefix)]
        if written != prefix and written in SI_PREFIXES:  # the case names another prefix
            meant = SI_PREFIXES[written][0] + _SYMBOL_NAMES.get(symbol, symbol)
            wanted = SI_PREFIXES[prefix][0] + _SYMBOL_NAMES.get(symbol, symbol)
            raise UnitError(
                f"{short_repr(raw)} has unit {short_repr(unit)}, which reads as {meant}s "
                f"({written} is the prefix {SI_PREFIXES[written][0]}): not a "
                f"{kind.replace('_', ' ')} unit this tool takes",
                where=where, fix=f"write {prefix}{symbol} for {wanted}s: SI prefixes are "
                "case-sensitive (m milli, M mega)")
        return readings[0]
    return None


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
