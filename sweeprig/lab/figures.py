"""A run's figures as a lot report needs them, kept with the run when it finishes.

Reducing a run (:func:`sweeprig.analysis.reduce.reduce_run`) reads every point and reading
and fits every figure: seconds per unit of the demo sequence, minutes for a lot. So a run's
figures are reduced once, when it finishes (by the bench worker, and by ``sweeprig run``'s
report), and kept in the store's ``run_figures`` table; the lot report reads them back and
reduces only the runs that have none (runs finished before the table existed, or kept by
another version of this format, :data:`REDUCER`), keeping what it reduced for next time.

What is kept per figure: its name, unit, conditions, value (None when the run flagged it as
suspect (:data:`~sweeprig.analysis.figures.SUSPECT_FLAGS`) or it is not a finite number: it
is counted, never averaged) and the spec limits that apply to it. Bounds ("< -80 dBc") are
not lot statistics and are left out.
"""

from __future__ import annotations

import json
import math
from collections.abc import Callable, Sequence
from contextlib import suppress
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from sweeprig import __version__
from sweeprig.errors import StoreError
from sweeprig.store.sql import SqlRunStoreCore

if TYPE_CHECKING:
    from sweeprig.analysis.reduce import RunFigures

FORMAT = 1
"""The version of the kept record's layout (raise it when :class:`LotFigure` changes)."""

REDUCER = f"sweeprig {__version__} lot-figures {FORMAT}"
"""What made a kept record: figures kept by another reducer are reduced again."""

Conditions = tuple[tuple[str, Any], ...]


@dataclass(frozen=True)
class LotFigure:
    """One figure of one run, as the lot report gathers it. ``value`` in ``unit``, None when
    ``suspect``; ``lsl``/``usl`` the tightest spec limits that apply (None: no limit)."""

    name: str
    unit: str
    conditions: Conditions
    value: float | None
    suspect: bool
    lsl: float | None
    usl: float | None


def lot_figures(reduced: RunFigures) -> tuple[LotFigure, ...]:
    """The figures of a reduced run that a lot report gathers (numbers, not bounds)."""
    from sweeprig.analysis.figures import SUSPECT_FLAGS

    out = []
    for fig in reduced.figures:
        if fig.bound is not None:
            continue
        limits = [lim for lim in reduced.limits if lim.applies_to(fig)]
        suspect = bool(set(fig.flags) & set(SUSPECT_FLAGS)) or not fig.is_number
        out.append(LotFigure(
            fig.name, fig.unit, _conditions(fig.conditions),
            None if suspect else float(fig.value), suspect,
            max((lim.min for lim in limits if lim.min is not None), default=None),
            min((lim.max for lim in limits if lim.max is not None), default=None)))
    return from_json(to_json(out))  # as read back: the same types whether kept or fresh


def _conditions(conditions: Any) -> Conditions:
    return tuple(sorted((str(k), _plain(v)) for k, v in dict(conditions).items()))


def _plain(value: Any) -> Any:
    if hasattr(value, "item"):
        value = value.item()  # numpy scalar
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def to_json(figures: Sequence[LotFigure]) -> str:
    """The kept form: a JSON list, one object per figure."""
    return json.dumps([{"name": f.name, "unit": f.unit, "conditions": [list(c) for c in
                                                                       f.conditions],
                        "value": f.value, "suspect": f.suspect, "lsl": f.lsl, "usl": f.usl}
                       for f in figures], separators=(",", ":"))


def from_json(text: str) -> tuple[LotFigure, ...]:
    """The figures of :func:`to_json`'s ``text``."""
    return tuple(LotFigure(d["name"], d["unit"], tuple((str(k), v) for k, v in d["conditions"]),
                           d["value"], bool(d["suspect"]), d["lsl"], d["usl"])
                 for d in json.loads(text))


def keep_figures(store: SqlRunStoreCore, run_id: int, reduced: RunFigures) -> bool:
    """Keep ``reduced`` (run ``run_id``'s figures) with the run; False when the store cannot
    take them now (read-only, or the database away): they are reduced again when needed."""
    try:
        store.save_figures(run_id, REDUCER, to_json(lot_figures(reduced)))
    except StoreError:
        return False
    return True


def figures_of_runs(store: SqlRunStoreCore, run_ids: Sequence[int], *,
                    on_reduce: Callable[[int], None] | None = None,
                    ) -> dict[int, tuple[LotFigure, ...]]:
    """Each run's lot figures: kept ones read back, the others reduced now (``on_reduce(run
    id)`` is told before each) and kept when the store can take them."""
    from sweeprig.analysis.reduce import reduce_run

    kept = store.stored_figures(run_ids)
    out: dict[int, tuple[LotFigure, ...]] = {}
    for run_id in run_ids:
        reducer, text = kept.get(run_id, (None, ""))
        if reducer == REDUCER:
            with suppress(ValueError, KeyError, TypeError):  # unreadable: reduced again
                out[run_id] = from_json(text)
                continue
        if on_reduce is not None:
            on_reduce(run_id)
        reduced = reduce_run(store, run_id)  # type: ignore[arg-type]
        keep_figures(store, run_id, reduced)
        out[run_id] = lot_figures(reduced)
    return out
