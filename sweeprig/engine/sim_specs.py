"""The simulated bench's stated figures: its analyzer and sources, as a bench file states them.

A real bench file states what its analyzer and sources can do (``[analyzer]``,
``[sources.*]``, ``roles.sa.noise_figure``) so the planner predicts right. On the simulated
bench those figures are the sim-bench description's (:class:`AnalyzerParams`, the sources'
harmonics): this module maps them onto the bench, so the built-in simulated bench's file is
right for whichever description is served.

A bench file states each source's harmonics *after any filter* (one level per harmonic). A
source with a low-pass filter in the description (``[sources.lowpass]``) is stated at the
harmonic levels that leave the filter for fundamentals from the corner / 1.25 up to the
corner (:data:`LOWPASS_BAND_RATIO`): the Butterworth rejection of the k-th harmonic over that
of the fundamental, ``10·log10((1 + (k·f/f_c)^(2N)) / (1 + (f/f_c)^(2N)))`` (Pozar, filter
design chapter), rises with f, so the band's lowest fundamental is the worst case.
"""

from __future__ import annotations

import math
import os
from collections.abc import Iterable
from pathlib import Path
from typing import Any

from sweeprig.formats.bench import (
    SOURCE_ROLES,
    AnalyzerFigures,
    Bench,
    PhaseNoisePoint,
    SourceFigures,
    SourcesFigures,
)
from sweeprig.formats.timebase import Timebase
from sweeprig.plan.margins import SHI_ABOVE_SOI_DB

#: A harmonic low-pass is chosen with its corner a little above the highest fundamental it
#: cleans: its stated harmonics hold for fundamentals from corner / 1.25 to the corner (common
#: practice, no source). Further below the corner it no longer reaches the 2nd harmonic; a
#: bench used there states its own levels.
LOWPASS_BAND_RATIO = 1.25
#: Lowest harmonic level a bench file accepts, dBc (sweeprig.formats.bench).
LOWEST_STATED_DBC = -200.0


def _phase_noise(params: Any) -> tuple[PhaseNoisePoint, ...] | None:
    """The analyzer's phase noise as (offset Hz, dBc/Hz) pairs, when the simulator has one."""
    for name in ("phase_noise", "phase_noise_dbc_hz", "phase_noise_profile"):
        value = getattr(params, name, None)
        if value is None:
            continue
        if isinstance(value, dict):
            value = value.items()
        try:
            pairs = sorted((float(o), float(v)) for o, v in map(_offset_level, value))
        except (TypeError, ValueError):
            return None
        points = tuple(PhaseNoisePoint(offset=o, level=v) for o, v in pairs
                       if o > 0 and math.isfinite(v))
        return points or None
    return None


def _offset_level(point: Any) -> tuple[Any, Any]:
    """(offset, level) of a phase-noise point: a pair, or a description's point table."""
    if hasattr(point, "offset") and hasattr(point, "level"):
        return point.offset, point.level
    offset, level = point
    return offset, level


def sim_figures(description: Any) -> tuple[AnalyzerFigures, SourcesFigures, float]:
    """The figures a bench file states for a sim-bench description: the analyzer's
    (two-tone SOI = second-harmonic intercept − 6.02 dB), the sources' harmonics, and the
    analyzer's noise figure."""
    params = description.analyzer  # the description's own table: no simulator imported
    analyzer = AnalyzerFigures(
        toi=params.toi, soi=params.shi - SHI_ABOVE_SOI_DB, p1db=params.p1db,
        overload=params.overload, phase_noise=_phase_noise(params))
    harmonics = _harmonics(description.sources)
    sources = SourcesFigures(**{r: SourceFigures(harmonics=harmonics.get(r)) for r in
                                SOURCE_ROLES})
    return analyzer, sources, float(params.noise_figure)


def butterworth_rejection_db(freq_hz: float, corner_hz: float, order: int) -> float:
    """Rejection of a Butterworth low-pass at ``freq_hz``, dB (positive):
    10·log10(1 + (f/f_c)^(2N)) (Pozar, filter design chapter; as the simulated bench applies
    it)."""
    ratio = max(freq_hz, 0.0) / corner_hz
    return 10.0 * math.log10(1.0 + ratio ** (2 * order))


def filtered_harmonics_dbc(levels_dbc: Iterable[float], corner_hz: float,
                           order: int) -> tuple[float, ...]:
    """Harmonic levels (dBc, 2nd up) after a Butterworth low-pass, for fundamentals from
    corner / :data:`LOWPASS_BAND_RATIO` up to the corner: the worst case, at the lowest."""
    f = corner_hz / LOWPASS_BAND_RATIO
    carrier = butterworth_rejection_db(f, corner_hz, order)
    return tuple(
        max(float(h) - (butterworth_rejection_db(k * f, corner_hz, order) - carrier),
            LOWEST_STATED_DBC)
        for k, h in enumerate(levels_dbc, start=2))


def _harmonics(sources: Any) -> dict[str, tuple[float, ...]]:
    """Harmonics per source role after its low-pass filter (when the description has one):
    per-role tables when the description has them, else the levels shared by all three."""
    shared = tuple(float(h) for h in getattr(sources, "harmonics", ()) or ())
    lowpass = getattr(sources, "lowpass", None)
    out: dict[str, tuple[float, ...]] = {}
    for role in SOURCE_ROLES:
        own = getattr(sources, role, None)
        levels: Iterable[float] | None = getattr(own, "harmonics", None) if own is not None \
            else None
        raw = tuple(float(h) for h in levels) if levels is not None else shared
        filt = getattr(lowpass, role, None) if lowpass is not None else None
        out[role] = raw if filt is None else filtered_harmonics_dbc(
            raw, float(filt.corner), int(filt.order))
    return out


def _filter_note(description: Any, role: str) -> str | None:
    """A comment line naming the filter a role's stated harmonics are after, if any."""
    lowpass = getattr(getattr(description, "sources", None), "lowpass", None)
    filt = getattr(lowpass, role, None) if lowpass is not None else None
    if filt is None:
        return None
    corner = float(filt.corner)
    return (f"# after its low-pass (corner {corner / 1e9:g} GHz, order {filt.order}), for "
            f"fundamentals from {corner / LOWPASS_BAND_RATIO / 1e9:.4g} to {corner / 1e9:g} GHz")


def with_sim_figures(bench: Bench, description: Any = None) -> Bench:
    """``bench`` with the analyzer's and sources' figures of the sim-bench ``description``
    (a model, a path, a shipped name, or None for the default), and the analyzer profile of
    its family.

    For the default description the figures come from :data:`DEFAULT_STATED_PATH`, made from
    it and pinned to it by a test, while the SHA-256 of what it was made from still matches:
    ``check`` of the built-in bench then builds no description model (start-up time). Any
    other description, or a default file changed since, is read and its figures computed."""
    stated = default_stated_figures() if description is None else None
    if stated is None:
        from sweeprig.sim.description import resolve_description  # light: no simulator

        stated = stated_figures(resolve_description(description))
    return _with_stated(bench, stated)


def stated_figures(description: Any) -> dict[str, Any]:
    """What :func:`with_sim_figures` puts on a bench for ``description``, as plain numbers
    (the form :data:`DEFAULT_STATED_PATH` keeps): the analyzer's figures, the sources'
    harmonics per role, the analyzer's noise figure, the roles served from the second family
    and whether its sources need its ``[timebase]``."""
    analyzer, sources, nf = sim_figures(description)
    return {
        "analyzer": {
            "toi": analyzer.toi, "soi": analyzer.soi, "p1db": analyzer.p1db,
            "overload": analyzer.overload,
            "phase_noise": None if analyzer.phase_noise is None else
            [[p.offset, p.level] for p in analyzer.phase_noise]},
        "harmonics": {role: None if getattr(sources, role).harmonics is None else
                      list(getattr(sources, role).harmonics) for role in SOURCE_ROLES},
        "noise_figure": nf,
        "second_family_roles": sorted(family_profiles(description)),
        "second_family_timebase": description.sources.family == "farrowmere",
    }


def _with_stated(bench: Bench, stated: dict[str, Any]) -> Bench:
    """``bench`` with the figures :func:`stated_figures` lists."""
    a = stated["analyzer"]
    phase_noise = None if a["phase_noise"] is None else tuple(
        PhaseNoisePoint(offset=o, level=v) for o, v in a["phase_noise"])
    analyzer = AnalyzerFigures(toi=a["toi"], soi=a["soi"], p1db=a["p1db"],
                               overload=a["overload"], phase_noise=phase_noise)
    harmonics = stated["harmonics"]
    sources = SourcesFigures(**{r: SourceFigures(
        harmonics=None if harmonics[r] is None else tuple(harmonics[r])) for r in SOURCE_ROLES})
    roles = bench.roles
    for role in stated["second_family_roles"]:
        generic, own = SECOND_FAMILY_PROFILES[role]
        spec = getattr(roles, role)
        if spec is not None and spec.profile == generic:  # the second family's dialect
            roles = roles.model_copy(update={role: spec.model_copy(update={"profile": own})})
    if roles.sa is not None:
        roles = roles.model_copy(update={"sa": roles.sa.model_copy(
            update={"noise_figure": stated["noise_figure"]})})
    update: dict[str, Any] = {"analyzer": analyzer, "sources": sources, "roles": roles}
    if bench.timebase is None and stated["second_family_timebase"]:
        update["timebase"] = family_timebase()
    return bench.model_copy(update=update)


#: The default sim-bench description's stated figures (:func:`stated_figures`), with the
#: SHA-256 of what they were made from (:func:`_made_from`). Remade by
#: ``python -m sweeprig.engine.sim_specs`` (a test fails while it is stale).
DEFAULT_STATED_PATH = Path(__file__).resolve().parent / "default_sim_figures.json"
#: The format line of :data:`DEFAULT_STATED_PATH`.
DEFAULT_STATED_FORMAT = "sweeprig stated sim figures 1"


def _made_from() -> str:
    """SHA-256 over what the default description's figures come from: its file, and the
    description module (its defaults, e.g. the analyzer's phase noise, are code)."""
    from sweeprig.files import sha256_text
    from sweeprig.sim.names import BENCHES_DIR, DEFAULT_BENCH_NAME

    sources = (BENCHES_DIR / f"{DEFAULT_BENCH_NAME}.toml", BENCHES_DIR.parent / "description.py")
    return sha256_text("\0".join(path.read_text(encoding="utf-8") for path in sources))


def default_stated_figures() -> dict[str, Any] | None:
    """:data:`DEFAULT_STATED_PATH`'s figures, or None when the file is missing, unreadable,
    of another format or made from another version of the default description."""
    import json

    try:
        kept = json.loads(DEFAULT_STATED_PATH.read_text(encoding="utf-8"))
        made_from = _made_from()
    except (OSError, ValueError):
        return None
    if not isinstance(kept, dict) or kept.get("format") != DEFAULT_STATED_FORMAT \
            or kept.get("made_from_sha256") != made_from:
        return None
    figures = kept.get("figures")
    return figures if isinstance(figures, dict) else None


def write_default_stated_figures() -> Path:
    """(Re)make :data:`DEFAULT_STATED_PATH` from the default description."""
    import json

    from sweeprig.files import replace_text
    from sweeprig.sim.description import resolve_description

    kept = {"format": DEFAULT_STATED_FORMAT, "made_from_sha256": _made_from(),
            "figures": stated_figures(resolve_description(None))}
    replace_text(DEFAULT_STATED_PATH, json.dumps(kept, indent=1) + "\n")
    return DEFAULT_STATED_PATH


#: The second simulated family's profiles (docs/instruments.md), by role: (the built-in bench
#: file's generic profile, the family's own).
SECOND_FAMILY_PROFILES: dict[str, tuple[str, str]] = {
    "sa": ("scpi-analyzer", "fr-sa20"),
    "rf": ("scpi-source", "fr-sg8"), "rf2": ("scpi-source", "fr-sg8"),
    "lo": ("scpi-source", "fr-sg8"),
    "pm": ("scpi-powermeter", "fr-pm4"),
}

#: The ``[timebase]`` a bench of second-family sources needs (their references are not locked
#: unless the bench file says so): every source and the analyzer on the house 10 MHz.
SECOND_FAMILY_TIMEBASE_TOML = """\
[timebase]
rf = { lock = "house" }
rf2 = { lock = "house" }
lo = { lock = "house" }
sa = { lock = "house" }

[timebase.external]
house = "0.001 ppm"
"""


def family_profiles(desc: Any) -> dict[str, tuple[str, str]]:
    """Role → (generic profile, the family's profile) for the roles a sim-bench description
    serves from the second family."""
    families = {"sa": desc.analyzer.family, "rf": desc.sources.family,
                "rf2": desc.sources.family, "lo": desc.sources.family,
                "pm": desc.power_meter.family}
    return {role: SECOND_FAMILY_PROFILES[role] for role, family in families.items()
            if family == "farrowmere"}


def family_timebase() -> Timebase:
    """:data:`SECOND_FAMILY_TIMEBASE_TOML` as the bench model's ``timebase``."""
    import tomllib

    return Timebase.model_validate(tomllib.loads(SECOND_FAMILY_TIMEBASE_TOML)["timebase"])


def family_bench_text(text: str, desc: Any) -> str:
    """A bench file's ``text`` with the second family's profiles in place of the generic ones
    for the roles ``desc`` serves from it, and its ``[timebase]`` when the sources are of it
    and the file has none."""
    import re

    for role, (generic, own) in family_profiles(desc).items():
        text = re.sub(rf'^({role}\s*=\s*\{{.*profile\s*=\s*)"{generic}"',
                      rf'\g<1>"{own}"', text, flags=re.M)
    if desc.sources.family == "farrowmere" and not re.search(r"^\[timebase\]", text,
                                                             flags=re.M):
        text = text.rstrip("\n") + "\n\n" + SECOND_FAMILY_TIMEBASE_TOML
    return text


def figures_toml(description: Any = None) -> str:
    """The ``[analyzer]`` and ``[sources.*]`` tables of a bench file for ``description``."""
    from sweeprig.sim.description import resolve_description  # light: no simulator

    desc = resolve_description(description)
    analyzer, sources, _ = sim_figures(desc)
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
        levels = ", ".join(f'"{h:.4g} dBc"' for h in figures.harmonics)
        lines += ["", f"[sources.{role}]", f"harmonics = [{levels}]"]
        if (note := _filter_note(desc, role)) is not None:
            lines.append(note)
    return "\n".join(lines) + "\n"


def is_shipped_sim_bench(path: str | os.PathLike[str], shipped: str | os.PathLike[str]) -> bool:
    """True when ``path`` is the shipped simulated bench's file."""
    try:
        return os.path.samefile(path, shipped)
    except OSError:
        return False


if __name__ == "__main__":
    print(f"wrote {write_default_stated_figures()}")
