"""sweeprig.analysis: pure maths that reduces captures to datasheet figures.

Capture tables in (one row per reading, see :mod:`sweeprig.analysis.captures`), lists of
:class:`~sweeprig.analysis.figures.Figure` out, each with its unit, bound, conditions, flags
and source points; :mod:`sweeprig.analysis.limits` judges them against spec limits.
No I/O happens here.

The names below are loaded on first use, so that the planner (which asks which figures a
sequence's ``[[spec]]`` entries can name) does not load pandas.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from sweeprig.lazy import lazy_names

if TYPE_CHECKING:
    from sweeprig.analysis.compression import compression_figures, compression_table
    from sweeprig.analysis.figures import FIGURE_CATALOGUE, FLAGS, SUSPECT_FLAGS, Figure
    from sweeprig.analysis.gain import (
        conversion_gain_figures,
        gain_flatness_figures,
        gain_table,
        gain_tempco_figures,
        lo_drive_figures,
    )
    from sweeprig.analysis.intercept import intercept_figures, p1db_matcher
    from sweeprig.analysis.isolation import (
        image_rejection_figures,
        isolation_figures,
        supply_figures,
    )
    from sweeprig.analysis.limits import (
        Assessment,
        Judgement,
        Limit,
        assess,
        judge,
        limits_from_mapping,
    )
    from sweeprig.analysis.spurs import spur_figures, spur_matrix, spur_table

_WHERE = {
    "compression_figures": "sweeprig.analysis.compression",
    "compression_table": "sweeprig.analysis.compression",
    "FIGURE_CATALOGUE": "sweeprig.analysis.figures",
    "FLAGS": "sweeprig.analysis.figures",
    "SUSPECT_FLAGS": "sweeprig.analysis.figures",
    "Figure": "sweeprig.analysis.figures",
    "conversion_gain_figures": "sweeprig.analysis.gain",
    "gain_flatness_figures": "sweeprig.analysis.gain",
    "gain_table": "sweeprig.analysis.gain",
    "gain_tempco_figures": "sweeprig.analysis.gain",
    "lo_drive_figures": "sweeprig.analysis.gain",
    "intercept_figures": "sweeprig.analysis.intercept",
    "p1db_matcher": "sweeprig.analysis.intercept",
    "image_rejection_figures": "sweeprig.analysis.isolation",
    "isolation_figures": "sweeprig.analysis.isolation",
    "supply_figures": "sweeprig.analysis.isolation",
    "Assessment": "sweeprig.analysis.limits",
    "Judgement": "sweeprig.analysis.limits",
    "Limit": "sweeprig.analysis.limits",
    "assess": "sweeprig.analysis.limits",
    "judge": "sweeprig.analysis.limits",
    "limits_from_mapping": "sweeprig.analysis.limits",
    "spur_figures": "sweeprig.analysis.spurs",
    "spur_matrix": "sweeprig.analysis.spurs",
    "spur_table": "sweeprig.analysis.spurs",
}

__all__ = [
    "FIGURE_CATALOGUE",
    "FLAGS",
    "SUSPECT_FLAGS",
    "Assessment",
    "Figure",
    "Judgement",
    "Limit",
    "assess",
    "compression_figures",
    "compression_table",
    "conversion_gain_figures",
    "gain_flatness_figures",
    "gain_table",
    "gain_tempco_figures",
    "image_rejection_figures",
    "intercept_figures",
    "isolation_figures",
    "judge",
    "limits_from_mapping",
    "lo_drive_figures",
    "p1db_matcher",
    "spur_figures",
    "spur_matrix",
    "spur_table",
    "supply_figures",
]


__getattr__ = lazy_names(__name__, _WHERE, globals())
