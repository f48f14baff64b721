"""The sweep plan: lazy expansion into points, frequency plan, pre-flight check, duration.

Typical use by the run engine::

    from sweeprig.formats import load_bench, load_sequence
    from sweeprig.plan import iter_points, preflight

    sequence = load_sequence("sequences/demo/quick.toml")
    bench = load_bench("sequences/benches/sim.toml")
    preflight(sequence, bench)            # SafetyLimitError before any output is enabled
    for point in iter_points(sequence, bench, start=resume_index):
        ...

The duration estimate's names are loaded on first use: ``sweeprig check`` needs the pre-flight
check, not the estimate and what it loads. (``preflight`` is imported at once: the name is both
a function here and a submodule, and importing the submodule later would rebind it.)
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from sweeprig.lazy import lazy_names
from sweeprig.plan.preflight import PortCheck, PreflightReport, check_limits, preflight

if TYPE_CHECKING:
    from sweeprig.plan.duration import DurationEstimate, estimate_duration, format_duration
    from sweeprig.plan.expand import (
        Point,
        count_points,
        iter_points,
        layout,
        point_at,
        study_counts,
    )
    from sweeprig.plan.readings import AnalyzerSetup, Reading

__getattr__ = lazy_names(__name__, {
    **dict.fromkeys(("DurationEstimate", "estimate_duration", "format_duration"),
                    "sweeprig.plan.duration"),
    **dict.fromkeys(("Point", "count_points", "iter_points", "layout", "point_at",
                     "study_counts"), "sweeprig.plan.expand"),
    **dict.fromkeys(("AnalyzerSetup", "Reading"), "sweeprig.plan.readings"),
}, globals())

__all__ = [
    "AnalyzerSetup",
    "DurationEstimate",
    "Point",
    "PortCheck",
    "PreflightReport",
    "Reading",
    "check_limits",
    "count_points",
    "estimate_duration",
    "format_duration",
    "iter_points",
    "layout",
    "point_at",
    "preflight",
    "study_counts",
]
