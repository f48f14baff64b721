"""Where a report's time and memory go: processor seconds and resident memory per stage.

:func:`staged` wraps the named functions of the reduction and the report writers (each
stage is one function, found in its module and in every loaded sweeprig module that
imported it by name) so that each call adds the processor time of its thread to its stage
and notes the resident memory after it; a generator's time is counted while it makes each
item. Stages nest (``attach_uncertainty_to_parts`` holds ``grouped_budgets``), so the
figures do not add up to the whole. A large run's tables are written by a helper process
(``sweeprig.report.table_writing``): its work is not here; ``figure_slices`` is the report
process' part of the figure table, made by the thread that feeds the helper, and
``write_frame_rows`` the budget tables. For the benchmarks' child processes only: the
wrappers stay for the life of the process.
"""

from __future__ import annotations

import importlib
import inspect
import sys
import time
from collections.abc import Callable, Iterator
from typing import Any

from sweeprig.memory import resident_mb

#: (module, function) of each stage, in the order a report meets them.
STAGES: tuple[tuple[str, str], ...] = (
    ("sweeprig.store.sql", "SqlRunStoreCore.points_frame"),
    ("sweeprig.store.sql", "SqlRunStoreCore.readings_frame"),
    ("sweeprig.analysis.load", "captures_from_frames"),
    ("sweeprig.analysis.reduce", "_figures"),
    ("sweeprig.analysis.figure_block", "flag_marked_parts"),
    ("sweeprig.analysis.direction", "add_output_frequency_to_parts"),
    ("sweeprig.analysis.budget_groups", "grouped_budgets"),
    ("sweeprig.analysis.budget_groups", "attach_uncertainty_to_parts"),
    ("sweeprig.analysis.limits", "assess"),
    ("sweeprig.report.budget_tables", "figure_budgets"),
    ("sweeprig.report.tables", "figure_slices"),
    ("sweeprig.report.csv_table", "write_frame_rows"),
    ("sweeprig.report.tables", "summary_rows"),
    ("sweeprig.report.tables", "write_figures_json"),
    ("sweeprig.report.plots", "all_plots"),
    ("sweeprig.report.datasheet", "datasheet_rows"),
    ("sweeprig.report.html", "write_html"),
)


def staged() -> dict[str, dict[str, float]]:
    """Wrap every stage of :data:`STAGES`; returns the live record: per stage ``cpu_s``
    (the processor time of the thread that ran it, summed over its calls), ``calls`` and
    ``rss_mb`` (resident memory after its last call)."""
    record: dict[str, dict[str, float]] = {}
    for module_name, qualified in STAGES:
        owner: Any = importlib.import_module(module_name)
        *path, name = qualified.split(".")
        for part in path:
            owner = getattr(owner, part)
        function = getattr(owner, name)
        wrapped = _wrap(function, record.setdefault(
            name, {"cpu_s": 0.0, "calls": 0.0, "rss_mb": 0.0}))
        setattr(owner, name, wrapped)
        if not path:  # also where it was imported by name
            for module in list(sys.modules.values()):
                if (getattr(module, "__name__", "").startswith("sweeprig")
                        and getattr(module, name, None) is function):
                    setattr(module, name, wrapped)
    return record


def _wrap(function: Callable[..., Any], entry: dict[str, float]) -> Callable[..., Any]:
    # the processor time of the thread that runs the stage: the report's tables are made by
    # a thread of their own beside the summary, JSON and plots (process time would charge
    # each stage the other thread's work too)
    def count(start: float) -> None:
        entry["cpu_s"] += time.thread_time() - start
        entry["rss_mb"] = resident_mb()

    if inspect.isgeneratorfunction(function):
        def generator(*args: Any, **kwargs: Any) -> Iterator[Any]:
            entry["calls"] += 1
            items = function(*args, **kwargs)
            while True:
                start = time.thread_time()
                try:
                    item = next(items)
                except StopIteration:
                    count(start)
                    return
                count(start)
                yield item
        return generator

    def plain(*args: Any, **kwargs: Any) -> Any:
        entry["calls"] += 1
        start = time.thread_time()
        try:
            return function(*args, **kwargs)
        finally:
            count(start)
    return plain


def stages_text(record: dict[str, dict[str, float]]) -> str:
    """One line per stage: processor seconds, calls, resident MB after its last call."""
    return "\n".join(f"  {name:28s} {entry['cpu_s']:6.2f} s CPU  x{entry['calls']:.0f}  "
                     f"rss {entry['rss_mb']:5.0f} MB after"
                     for name, entry in record.items() if entry["calls"])
