"""sweeprig.analysis: pure maths that reduces captures to datasheet figures.

Capture tables in (one row per reading, see :mod:`sweeprig.analysis.captures`), lists of
:class:`~sweeprig.analysis.figures.Figure` out, each with its unit, bound, conditions, flags
and source points; :mod:`sweeprig.analysis.limits` judges them against spec limits.
No I/O happens here.
"""

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
