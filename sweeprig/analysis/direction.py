"""Figures named in the trade's words for the part's conversion direction, and the
upconverter's own figures.

The capture table names ports by position: ``if`` is the output port (the wanted output),
``rf`` the input port, whatever the direction (see :mod:`sweeprig.formats.vocabulary`). For a
downconverter those are the trade's names. For an upconverter the trade calls the input the
IF and the output the RF (Pozar, *Microwave Engineering*, mixer chapter), so the isolation
figures computed by position are renamed (:data:`UP_NAMES`): the LO leaking at the output
port is the upconverter's LO→RF isolation, at its input port its LO→IF isolation, and the
input's feedthrough to the output its IF→RF isolation.

An upconverter's datasheet also states, relative to the wanted output (dBc, larger is
better):

* ``sideband_suppression`` = P(wanted sideband) − P(unwanted sideband), both at the output
  port, from the ``if`` and ``sideband`` readings of one point; a double-balanced mixer
  makes both sidebands alike (common practice, no source), so without a filter this is near
  0 dB;
* ``lo_suppression`` (carrier suppression) = P(wanted output) − P(LO at the output port),
  from the ``if`` and ``lo_at_if`` readings;

and ``lo_leakage`` = P(LO at the output port), dBm (a "<" bound when the leak is in the
noise). A reading in the noise is an upper bound, so a suppression is then a ">" bound.
"""

from __future__ import annotations

import itertools
import operator
from collections.abc import Mapping, Sequence
from types import MappingProxyType
from typing import TYPE_CHECKING

import numpy as np

from sweeprig.analysis import validity
from sweeprig.analysis.captures import conditions_records, has_bit, point_table
from sweeprig.analysis.figures import (
    BOUND_ABOVE,
    BOUND_BELOW,
    BOUND_NONE,
    IN_NOISE,
    Figure,
    Maker,
    make_figures,
    with_changes,
    with_conditions,
)

if TYPE_CHECKING:
    import pandas as pd

    from sweeprig.analysis.figure_block import Part

#: Positional (downconverter) figure name → the upconverter's name for it.
UP_NAMES: Mapping[str, str] = MappingProxyType({
    "lo_if_isolation": "lo_rf_isolation",
    "lo_rf_isolation": "lo_if_isolation",
    "rf_if_isolation": "if_rf_isolation",
})

#: The column (and figure condition) holding the wanted output frequency of a point, Hz.
OUTPUT_FREQ = "output_freq_hz"


def trade_named(figures: Sequence[Figure], conversion: str) -> list[Figure]:
    """The figures with their names in the trade's words for ``conversion`` ("down": as
    computed; "up": :data:`UP_NAMES` applied)."""
    out = list(figures)
    name_in_trade_words(out, conversion)
    return out


def name_in_trade_words(figures: list[Figure], conversion: str) -> None:
    """:func:`trade_named`, each renamed figure of the list replaced where it stands (a
    caller that owns the list never holds a run's figures twice)."""
    if conversion != "up":
        return
    for i, f in enumerate(figures):
        name = UP_NAMES.get(f.name)
        if name is not None:
            figures[i] = with_changes(f, name=name)


def name_parts_in_trade_words(parts: Sequence[Part], conversion: str) -> list[Part]:
    """:func:`name_in_trade_words` of a run's figures held as parts."""
    from sweeprig.analysis.figure_block import FigureBlock

    if conversion != "up":
        return list(parts)
    out: list[Part] = []
    for part in parts:
        if isinstance(part, FigureBlock):
            name = UP_NAMES.get(part.name)
            out.append(part if name is None else part.with_columns(name=name))
        else:
            figures = list(part)
            name_in_trade_words(figures, conversion)
            out.append(tuple(figures))
    return out


def trade_name(positional: str, conversion: str) -> str:
    """One positional figure name in the trade's words for ``conversion``."""
    return UP_NAMES.get(positional, positional) if conversion == "up" else positional


def with_output_frequency(figures: Sequence[Figure], orders: tuple[int, int] | None
                          ) -> list[Figure]:
    """Each figure whose conditions hold ``lo_freq_hz`` and ``rf_freq_hz`` (the input) gains
    ``output_freq_hz`` = |m·f_LO + n·f_in| for the wanted product's (m, n) ``orders``
    (default (1, −1)): the axis a datasheet plots gain against."""
    return [f if cond is None else with_conditions(f, cond)
            for f, cond in zip(figures, output_frequency_conditions(figures, orders),
                               strict=True)]


def add_output_frequency_in_place(figures: list[Figure], orders: tuple[int, int] | None
                                  ) -> None:
    """:func:`with_output_frequency`, each figure of the list that gains ``output_freq_hz``
    replaced where it stands (a caller that owns the list never holds a run's figures
    twice; the old conditions mappings are freed as their figures are replaced)."""
    for i, conditions in enumerate(output_frequency_conditions(figures, orders)):
        if conditions is not None:
            figures[i] = with_conditions(figures[i], conditions)


def output_frequency_conditions(figures: Sequence[Figure], orders: tuple[int, int] | None
                                ) -> list[Mapping[str, float | int | str] | None]:
    """Per figure, its conditions with ``output_freq_hz`` added as
    :func:`with_output_frequency` adds it, or None where it gains none."""
    from sweeprig.analysis.figure_table import distinct_conditions

    distinct, which = distinct_conditions(figures)
    return _extended(distinct, orders)[which].tolist()


def add_output_frequency_to_parts(parts: Sequence[Part], orders: tuple[int, int] | None
                                  ) -> list[Part]:
    """:func:`add_output_frequency_in_place` of a run's figures held as parts
    (:mod:`sweeprig.analysis.figure_block`): a block's conditions column replaced, each
    distinct mapping of all the parts extended once, as for a list of figures."""
    from sweeprig.analysis.figure_block import FigureBlock, part_conditions
    from sweeprig.analysis.figure_table import distinct_mappings

    every = part_conditions(parts)
    if every.size == 0:
        return list(parts)
    distinct, which = distinct_mappings(every)
    extended = _extended(distinct, orders)[which]
    out: list[Part] = []
    first = 0
    for part in parts:
        mine = extended[first:first + len(part)]
        first += len(part)
        if isinstance(part, FigureBlock):
            gained = np.not_equal(mine, None)
            if gained.any():
                part = part.with_columns(conditions=np.where(gained, mine, part.conditions))
            out.append(part)
        else:
            out.append(tuple(f if c is None else with_conditions(f, c)
                             for f, c in zip(part, mine.tolist(), strict=True)))
    return out


def _extended(distinct: Sequence[Mapping[str, float | int | str]],
              orders: tuple[int, int] | None) -> np.ndarray:
    """Per distinct conditions mapping, it with ``output_freq_hz`` added, or None where it
    gains none (object array)."""
    m, n = orders if orders is not None else (1, -1)
    # Figures of one point share one conditions mapping (the analysis makes it once per
    # point): each distinct one is extended once, and its figures share the extended one.
    # Most hold the output frequency already (made with it from a point table:
    # conditions_records); those are passed over in C.
    extended = np.empty(len(distinct), dtype=object)
    holds = np.fromiter(map(operator.contains, distinct, itertools.repeat(OUTPUT_FREQ)),
                        dtype=bool, count=len(distinct))
    for i in np.flatnonzero(~holds).tolist():
        c = distinct[i]
        lo, rf = c.get("lo_freq_hz"), c.get("rf_freq_hz")
        if not isinstance(lo, float | int) or not isinstance(rf, float | int):
            continue
        # (a mapping proxy's or dict's own copy, made in C: a new dict of the same order)
        grown = c.copy() if isinstance(c, MappingProxyType | dict) else dict(c)
        grown[OUTPUT_FREQ] = float(abs(m * lo + n * rf))
        extended[i] = MappingProxyType(grown)
    return extended


def upconverter_figures(
    captures: pd.DataFrame, *, study: str | Sequence[str] | None = None,
    make: Maker = make_figures,
) -> list[Figure]:
    """``sideband_suppression``, ``lo_suppression`` (dBc) and ``lo_leakage`` (dBm) at every
    point with the readings they need (see the module docstring)."""
    table = point_table(captures, ("if", "sideband", "lo_at_if"), study=study,
                        where="upconverter figures")
    figures: list[Figure] = []
    wanted_ok = table["if_present"].to_numpy() & ~has_bit(table["if_flags"].to_numpy(),
                                                          IN_NOISE)
    for reading, name in (("sideband", "sideband_suppression"), ("lo_at_if", "lo_suppression")):
        rows = np.flatnonzero(table[f"{reading}_present"].to_numpy() & wanted_ok)
        if rows.size == 0:
            continue
        sub = table.iloc[rows]
        level, noise = _leak(sub, reading)
        flags = sub[f"{reading}_flags"].to_numpy() | sub["if_flags"].to_numpy()
        figures += make(
            name, "dBc", sub["if_level_dbm"].to_numpy() - level,
            np.where(noise, BOUND_ABOVE, BOUND_NONE), flags,
            conditions_records(table, rows), [(p,) for p in sub["point"].tolist()])
    rows = np.flatnonzero(table["lo_at_if_present"].to_numpy())
    if rows.size:
        sub = table.iloc[rows]
        level, noise = _leak(sub, "lo_at_if")
        figures += make(
            "lo_leakage", "dBm", level, np.where(noise, BOUND_BELOW, BOUND_NONE),
            sub["lo_at_if_flags"].to_numpy(), conditions_records(table, rows),
            [(p,) for p in sub["point"].tolist()])
    return figures


def _leak(sub: pd.DataFrame, reading: str) -> tuple[np.ndarray, np.ndarray]:
    """A reading's level, its noise-floor upper bound where it is in the noise, dBm."""
    flags = sub[f"{reading}_flags"].to_numpy()
    noise = has_bit(flags, IN_NOISE)
    level = sub[f"{reading}_level_dbm"].to_numpy()
    floor = sub[f"{reading}_noise_floor_dbm"].to_numpy()
    return np.where(noise, validity.upper_bound_dbm(level, floor), level), noise
