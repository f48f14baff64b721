"""Do two runs of one sequence give the same figures within their uncertainty?

A figure of one run is the same figure of another when it has the same name and was measured
under the same conditions (study, frequencies, powers, temperature, supply: the figure's
``conditions``); :func:`figure_key` is that identity. Pairing by anything else, such as the
k-th figure of a name, silently compares different points as soon as one run leaves out a
figure the other keeps (a suspect flag on one bench only shifts every later figure of that
name by one point: on a 2.5 dB drive step an IM3 level moves 7.5 dB per point, so the
"difference" is the sequence's own step, not a disagreement).

:func:`agreement` pairs the plain numbers with an expanded uncertainty and no suspect flag of
both runs (a flagged figure claims no value within its uncertainty) and says which differ by
more than the larger of the two expanded uncertainties (k = 2, JCGM 100:2008 6.2; the larger
rather than the root-sum-square of both: the stricter, safe side, common practice, no
source). Pure functions; units are each figure's own.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping
from dataclasses import dataclass

from sweeprig.analysis.figures import SUSPECT_FLAGS, Figure

#: Conditions are compared to this many decimals (1 µHz, 1 µdB, 1 µ°C): values recomputed
#: from the same settings by a different path agree far within it.
CONDITION_DECIMALS = 6


def figure_key(name: str, conditions: Mapping[str, object]) -> tuple[object, ...]:
    """The identity of a figure across runs: its name and its conditions, sorted by key and
    numbers rounded to :data:`CONDITION_DECIMALS` decimals."""
    items = []
    for k in sorted(conditions):
        v = conditions[k]
        items.append((k, round(float(v), CONDITION_DECIMALS)
                      if isinstance(v, int | float) else v))
    return (name, tuple(items))


def claimed_figures(figures: Iterable[Figure]) -> dict[tuple[object, ...], Figure]:
    """The figures that claim a value within an uncertainty (a finite number, a finite
    expanded uncertainty, no suspect flag), by :func:`figure_key`. A key met twice in one run
    (no sequence shipped makes one) is left out: it says no one figure."""
    out: dict[tuple[object, ...], Figure] = {}
    seen: set[tuple[object, ...]] = set()
    for f in figures:
        if not (f.is_number and math.isfinite(f.uncertainty_db)) \
                or set(f.flags) & SUSPECT_FLAGS:
            continue
        key = figure_key(f.name, f.conditions)
        if key in seen:
            out.pop(key, None)
            continue
        seen.add(key)
        out[key] = f
    return out


@dataclass(frozen=True)
class Agreement:
    """Figures claimed by both runs (``pairs``: first run's, second run's) and those of them
    that differ by more than the larger expanded uncertainty (``beyond``)."""

    pairs: tuple[tuple[Figure, Figure], ...]
    beyond: tuple[tuple[Figure, Figure], ...]

    @property
    def worst_ratio(self) -> float:
        """The largest |difference| / larger expanded uncertainty over the pairs (0 when
        none)."""
        return max((_ratio(a, b) for a, b in self.pairs), default=0.0)


def _ratio(a: Figure, b: Figure) -> float:
    return abs(a.value - b.value) / max(a.uncertainty_db, b.uncertainty_db, 1e-9)


def agreement(first: Iterable[Figure], second: Iterable[Figure]) -> Agreement:
    """Pair the claimed figures of two runs by :func:`figure_key` (module docstring)."""
    a, b = claimed_figures(first), claimed_figures(second)
    pairs = tuple((a[k], b[k]) for k in a if k in b)
    return Agreement(pairs, tuple(p for p in pairs if _ratio(*p) > 1.0))
