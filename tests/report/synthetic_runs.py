"""Synthetic captures reduced to a run's figures without a bench or a store, for the narrow
plot tests (a fictional part; :func:`sweeprig.analysis.synthetic.synthetic_run` makes the
captures)."""

from __future__ import annotations

import pandas as pd

from sweeprig.analysis.reduce import RunFigures


def reduced_synthetic_run(captures: pd.DataFrame, *, serial: str) -> RunFigures:
    """Synthetic captures reduced the way :func:`~sweeprig.analysis.reduce.reduce_run`
    reduces a stored run, with a gain and an isolation limit; no bench, no store."""
    from datetime import UTC, datetime

    from sweeprig.analysis import reduce as rd
    from sweeprig.analysis.limits import Limit, assess

    points = captures.drop_duplicates("point").reset_index(drop=True)
    notes: list[str] = []
    studies = rd._study_infos(captures, points, None)
    figures = rd._figures(captures, studies, notes)
    limits = (Limit("conversion_gain", min=3.0, max=9.0), Limit("lo_if_isolation", min=30.0))
    assessment = assess(figures, limits)
    now = datetime(2026, 1, 5, 22, 0, tzinfo=UTC)
    return RunFigures(
        run_id=7, title="Corner grid (synthetic, fictional part)", part="KX-2417",
        serial=serial, operator="report tests", state="complete", status="complete",
        reason=None, simulated=True, created=now, finished=now, points_done=len(points),
        points_total=len(points), sequence_path="synthetic", sequence_sha256="0" * 64,
        sequence_sha256_ok=True, bench_path=None, bench_sha256=None, instruments=(),
        duration_sim_s=None, duration_wall_s=None, figures=tuple(figures), limits=limits,
        assessment=assessment, verdict=assessment.verdict, studies=studies,
        conditions=rd._conditions(captures), events=(), notes=tuple(notes), captures=captures)
