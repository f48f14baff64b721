"""The simulated bench's stated figures: its analyzer and sources, as a bench file states them.

A real bench file states what its analyzer and sources can do (``[analyzer]``,
``[sources.*]``, ``roles.sa.noise_figure``) so the planner predicts right. On the simulated
bench those figures are the sim-bench description's (:class:`AnalyzerParams`, the sources'
harmonics): this module maps them onto the bench, so the built-in simulated bench's file is
right for whichever description is served.
"""

from __future__ import annotations

import math
import os
from collections.abc import Iterable
from typing import Any

from sweeprig.formats.bench import (
    SOURCE_ROLES,
    AnalyzerFigures,
    Bench,
    PhaseNoisePoint,
    SourceFigures,
    SourcesFigures,
)
from sweeprig.plan.margins import SHI_ABOVE_SOI_DB


def _phase_noise(params: Any) -> tuple[PhaseNoisePoint, ...] | None:
    """The analyzer's phase noise as (offset Hz, dBc/Hz) pairs, when the simulator has one."""
    for name in ("phase_noise", "phase_noise_dbc_hz", "phase_noise_profile"):
        value = getattr(params, name, None)
        if value is None:
            continue
        if isinstance(value, dict):
            value = value.items()
        try:
            pairs = sorted((float(o), float(v)) for o, v in value)
        except (TypeError, ValueError):
            return None
        points = tuple(PhaseNoisePoint(offset=o, level=v) for o, v in pairs
                       if o > 0 and math.isfinite(v))
        return points or None
    return None


def sim_figures(description: Any) -> tuple[AnalyzerFigures, SourcesFigures, float]:
    """The figures a bench file states for a sim-bench description: the analyzer's
    (two-tone SOI = second-harmonic intercept − 6.02 dB), the sources' harmonics, and the
    analyzer's noise figure."""
    params = description.analyzer.params()
    analyzer = AnalyzerFigures(
        toi=params.toi_dbm, soi=params.shi_dbm - SHI_ABOVE_SOI_DB, p1db=params.p1db_dbm,
        overload=params.overload_dbm, phase_noise=_phase_noise(params))
    harmonics = _harmonics(description.sources)
    sources = SourcesFigures(**{r: SourceFigures(harmonics=harmonics.get(r)) for r in
                                SOURCE_ROLES})
    return analyzer, sources, float(params.noise_figure_db)


def _harmonics(sources: Any) -> dict[str, tuple[float, ...]]:
    """Harmonics per source role: per-role tables when the description has them, else the
    levels shared by all three."""
    shared = tuple(float(h) for h in getattr(sources, "harmonics", ()) or ())
    out: dict[str, tuple[float, ...]] = {}
    for role in SOURCE_ROLES:
        own = getattr(sources, role, None)
        levels: Iterable[float] | None = getattr(own, "harmonics", None) if own is not None \
            else None
        out[role] = tuple(float(h) for h in levels) if levels is not None else shared
    return out


def with_sim_figures(bench: Bench, description: Any = None) -> Bench:
    """``bench`` with the analyzer's and sources' figures of the sim-bench ``description``
    (a model, a path, a shipped name, or None for the default)."""
    from sweeprig.sim.bench import resolve_description

    desc = resolve_description(description)
    analyzer, sources, nf = sim_figures(desc)
    roles = bench.roles
    if roles.sa is not None:
        roles = roles.model_copy(update={"sa": roles.sa.model_copy(
            update={"noise_figure": nf})})
    return bench.model_copy(update={"analyzer": analyzer, "sources": sources, "roles": roles})


def figures_toml(description: Any = None) -> str:
    """The ``[analyzer]`` and ``[sources.*]`` tables of a bench file for ``description``."""
    from sweeprig.sim.bench import resolve_description

    analyzer, sources, _ = sim_figures(resolve_description(description))
    lines = ["[analyzer]   # the simulated analyzer's own figures (first mixer, 0 dB attenuation)"]
    for key in ("toi", "soi", "p1db", "overload"):
        lines.append(f'{key} = "{getattr(analyzer, key):.4g} dBm"')
    if analyzer.phase_noise:
        points = ", ".join(f'{{ offset = "{p.offset:g} Hz", level = "{p.level:g} dBc/Hz" }}'
                           for p in analyzer.phase_noise)
        lines.append(f"phase_noise = [{points}]")
    for role in SOURCE_ROLES:
        figures = getattr(sources, role)
        if figures is None or figures.harmonics is None:
            continue
        levels = ", ".join(f'"{h:g} dBc"' for h in figures.harmonics)
        lines += ["", f"[sources.{role}]", f"harmonics = [{levels}]"]
    return "\n".join(lines) + "\n"


def is_shipped_sim_bench(path: str | os.PathLike[str], shipped: str | os.PathLike[str]) -> bool:
    """True when ``path`` is the shipped simulated bench's file."""
    try:
        return os.path.samefile(path, shipped)
    except OSError:
        return False
