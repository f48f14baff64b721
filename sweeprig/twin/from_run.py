"""Fit a twin to a stored run: the store, the template and the checks around the pure fit.

:func:`fit_stored_run` reads one run (its figures from :func:`~sweeprig.analysis.reduce.
reduce_run`, its mixing from the stored sequence), refuses what the fit cannot use (no such
run, a template of the other conversion than the run's, a run without the figures a fit
needs) with a located message,
fits (:func:`~sweeprig.twin.fit.fit_twin`) and returns the fit with its part-file text.
Nothing is written here; the caller writes the text (:func:`~sweeprig.twin.partfile.
write_part_file`) only when all went well.
"""

from __future__ import annotations

import math
import tomllib
from collections.abc import Iterable
from dataclasses import dataclass
from pathlib import Path
from types import MappingProxyType
from typing import TYPE_CHECKING

from sweeprig.errors import InputError
from sweeprig.twin.fit import BENCH_RIPPLE_U_DB, TwinFit, fit_twin
from sweeprig.twin.observations import (
    DISQUALIFYING_FLAGS,
    Observation,
    ObservationSet,
    observations_from_figures,
)
from sweeprig.twin.partfile import part_file_text

if TYPE_CHECKING:
    from sweeprig.analysis.reduce import RunFigures

#: The template when none is named: the shipped downconverter whose unfitted values
#: (port matches, offsets, noise shape) are typical of an active Gilbert cell.
DEFAULT_TEMPLATE = "kx-2417"
#: The template of an upconverter run when none is named: the shipped upconverter (the IF
#: port feeds the transconductor, the RF port is the output).
DEFAULT_UP_TEMPLATE = "kx-5860u"


def default_template(conversion: str) -> str:
    """The shipped template for a run of ``conversion`` (``"down"`` or ``"up"``)."""
    return DEFAULT_UP_TEMPLATE if conversion == "up" else DEFAULT_TEMPLATE


@dataclass(frozen=True)
class StoredRunTwin:
    """A fit of one stored run: the fit, the observations it used, the part-file text."""

    fit: TwinFit
    observations: ObservationSet
    text: str
    run_id: int
    part_id: str


def fit_stored_run(store_path: Path, run_id: int, *, template: str | None = None,
                   name: str | None = None,
                   sim_description: str | Path | None = None) -> StoredRunTwin:
    """Fit a twin of run ``run_id`` in the SQLite store at ``store_path`` (see the module
    docstring). ``template``: a shipped part name or a part file of the run's conversion
    (default: :func:`default_template`, the shipped part of that kind); ``name``: the twin's part
    name (default: ``"<part id> twin"``). The template is placed on the simulated bench
    the twin will be served on (``sim_description``: a sim-bench description file or shipped
    name; default: the built-in one), whose seeded leakage phases decide how each leakage
    path adds to what the core makes.
    """
    from sweeprig.analysis.reduce import reduce_run
    from sweeprig.sim.bench import resolve_description
    from sweeprig.sim.mixer import load_part
    from sweeprig.store.sqlite import SqliteRunStore

    where = f"{store_path}: run {run_id}"
    if not store_path.is_file():
        raise InputError(f"no run store at {store_path}", where=str(store_path),
                         fix="give the --store file the run was stored in")
    with SqliteRunStore(store_path, create=False) as db:
        info = db.run(run_id)
        run = reduce_run(db, run_id)
        calibrated = sources_calibrated(db.events(run_id))
    conversion = _stored_conversion(info.sequence_text)
    template = template or default_template(conversion)
    base = load_part(template)
    if base.conversion != conversion:
        raise InputError(
            f"run {run_id} is of {_kind(conversion)}, but the template {template!r} is "
            f"{_kind(base.conversion)}: the twin keeps the template's conversion and port "
            "roles, so it would model the wrong part",
            where="--template",
            fix=f"name a {conversion}converter template (e.g. {default_template(conversion)}), "
                "or leave --template out to take it",
        )
    observations = observations_from_figures(run.figures, where=where,
                                             extra=swept_gains(run),
                                             lo_freq_by_point=_lo_freq_by_point(run))
    bench = resolve_description(None if sim_description is None else str(sim_description))
    placed = base.with_changes(leakage_phases=bench.leakage_phases())
    fit = fit_twin(placed, observations,
                   ripple_u_db=0.0 if calibrated else BENCH_RIPPLE_U_DB)
    part_id = run.part or f"run {run_id}"
    text = part_file_text(fit, name=name or f"{part_id} twin",
                          source=f"run {run_id} ({part_id}, serial {run.serial or '-'})",
                          template=template)
    return StoredRunTwin(fit, observations, text, run_id, part_id)


def sources_calibrated(events: Iterable[object]) -> bool:
    """True when the run was measured with a calibration of its RF and LO sources (stored
    with the run, :func:`~sweeprig.analysis.bench_specs.calibration_state`): their level
    error at the run's frequencies and levels was measured and taken out, so the fit adds
    no ripple term for it (:data:`~sweeprig.twin.fit.BENCH_RIPPLE_U_DB`)."""
    from sweeprig.analysis.bench_specs import calibration_state

    state, _note = calibration_state(events)  # type: ignore[arg-type]
    return {"rf", "lo"} <= set(state.connections)


def swept_gains(run: RunFigures) -> tuple[Observation, ...]:
    """The gain at every clean point of the run's LO-drive sweeps (``lo_drive_gain``) and RF
    power sweeps (``compression_gain``): the analysis keeps one figure of each sweep
    (``lo_power_for_gain``, the P1dB interpolated between steps); the fit wants the curve,
    which carries no interpolation error."""
    from sweeprig.analysis.figures import BOUND_NONE, flags_from_mask
    from sweeprig.analysis.gain import gain_table
    from sweeprig.analysis.roles import ROLE_COMPRESSION, ROLE_LO_DRIVE

    out: list[Observation] = []
    sweeps = ((ROLE_LO_DRIVE, "lo_drive_gain"), (ROLE_COMPRESSION, "compression_gain"))
    for role, name in sweeps:
        names = run.studies_with(role)
        if not names or run.captures.empty:
            continue
        table = gain_table(run.captures, study=names)
        for row in table.itertuples(index=False):
            flags = set(flags_from_mask(int(row.gain_flags)))
            if int(row.gain_bound) != BOUND_NONE or flags & DISQUALIFYING_FLAGS:
                continue
            conditions = {k: float(getattr(row, k)) for k in _GAIN_CONDITIONS
                          if math.isfinite(float(getattr(row, k)))}
            out.append(Observation(name, float(row.gain_db), MappingProxyType(conditions),
                                   str(row.study)))
    return tuple(out)


_GAIN_CONDITIONS = ("temperature_c", "supply_v", "lo_freq_hz", "lo_power_dbm", "rf_freq_hz",
                    "rf_power_dbm")


def _lo_freq_by_point(run: RunFigures) -> dict[int, float]:
    """The LO frequency (Hz) of every point of the run's captures."""
    table = run.captures
    if table.empty or "point" not in table or "lo_freq_hz" not in table:
        return {}
    first = table.groupby("point")["lo_freq_hz"].first()
    return {int(k): float(v) for k, v in first.items() if math.isfinite(float(v))}


def _kind(conversion: str) -> str:
    return "an upconverter" if conversion == "up" else "a downconverter"


def _stored_conversion(sequence_text: str) -> str:
    """``[mixing] conversion`` of the stored sequence text (``"down"`` when unreadable)."""
    try:
        data = tomllib.loads(sequence_text)
    except tomllib.TOMLDecodeError:
        return "down"
    mixing = data.get("mixing")
    value = mixing.get("conversion", "down") if isinstance(mixing, dict) else "down"
    return value if value in ("down", "up") else "down"
