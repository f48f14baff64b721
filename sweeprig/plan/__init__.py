"""The sweep plan: lazy expansion into points, frequency plan, pre-flight check, duration.

Typical use by the run engine::

    from sweeprig.formats import load_bench, load_sequence
    from sweeprig.plan import iter_points, preflight

    sequence = load_sequence("sequences/demo/quick.toml")
    bench = load_bench("sequences/benches/sim.toml")
    preflight(sequence, bench)            # SafetyLimitError before any output is enabled
    for point in iter_points(sequence, bench, start=resume_index):
        ...
"""

from sweeprig.plan.duration import DurationEstimate, estimate_duration, format_duration
from sweeprig.plan.expand import Point, count_points, iter_points, layout, point_at, study_counts
from sweeprig.plan.preflight import PortCheck, PreflightReport, check_limits, preflight
from sweeprig.plan.readings import AnalyzerSetup, Reading

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
