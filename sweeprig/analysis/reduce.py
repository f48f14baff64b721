"""One run reduced to its datasheet figures and verdict: :func:`reduce_run`.

Reads the run from the store (finished or not), builds the capture table
(:mod:`sweeprig.analysis.load`), decides what each study measured, runs the matching pure
analysis functions, and judges the figures against the sequence's ``[[spec]]`` limits,
parsed from the sequence text stored with the run.

What each study feeds, from the shape of its sweep (the sequence's axes when the stored
sequence can be read, else the points themselves):

* RF power and LO power fixed, one tone: ``conversion_gain`` at every point; with several RF
  frequencies also ``gain_flatness``; over several temperatures also ``gain_tempco``;
* RF power swept, one tone: the compression figures (``small_signal_gain``, P0.1dB, P1dB,
  P3dB, Psat);
* two tones: the intercept figures, their fit range limited by the P1dB measured at the same
  temperature, supply and LO (when the run has it);
* LO power swept (RF power fixed): ``lo_power_for_gain``;
* whatever the shape: isolation, image rejection, supply current and the m×n spurs, from the
  readings that are there.

A datasheet's conversion gain is stated at a fixed small drive, so swept-drive studies do not
add ``conversion_gain`` figures (their gain is in ``small_signal_gain`` and the plots).

Spec names map to figure names by dropping the unit suffix (``iip3_dbm`` → ``iip3``); a
spec's ``temperature``, ``supply`` and ``study`` become the limit's conditions. The verdict
is the assessment's (fail > inconclusive > pass); a run that is not complete can fail but
not pass: a passing partial run is inconclusive.
"""

from __future__ import annotations

import functools
import json
import math
import tomllib
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from datetime import datetime
from pathlib import Path
from types import MappingProxyType
from typing import TYPE_CHECKING

import numpy as np

from sweeprig.analysis.captures import OUTPUT_FREQ, MadeConditions, risk_mask
from sweeprig.analysis.figure_block import Figures
from sweeprig.analysis.figures import (
    REFERENCE_UNLOCKED,
    SOURCE_UNLEVELED,
    SUPPLY_CURRENT_OFF,
    SUPPLY_LIMITED,
    TEMPERATURE_OFF,
    UNPOWERED,
    Figure,
    Maker,
    collector_paused,
    flag_marked_points,
    make_figures,
)
from sweeprig.analysis.limits import INCONCLUSIVE, PASS, Assessment, Limit, Verdict, assess
from sweeprig.analysis.roles import (
    ROLE_COMPRESSION,
    ROLE_FLATNESS,
    ROLE_GAIN,
    ROLE_IMAGE,
    ROLE_ISOLATION,
    ROLE_LO_DRIVE,
    ROLE_SIDEBAND,
    ROLE_SPURS,
    ROLE_SUPPLY,
    ROLE_TEMPCO,
    ROLE_TWO_TONE,
    limits_from_sequence,
    shape_from_sequence,
    study_roles,
)
from sweeprig.analysis.validity import SUPPLY_CURRENT_TOLERANCE, UNPOWERED_GAIN_MARGIN_DB
from sweeprig.errors import SweeprigError
from sweeprig.files import read_file_text, sha256_text
from sweeprig.formats.sequence import (
    Conditions,
    Sequence,
    Study,
    load_sequence,
    sequence_from_dict,
)
from sweeprig.memory import release_freed_memory
from sweeprig.plan.frequencies import wanted_orders
from sweeprig.store.base import (
    MERGED_SEQUENCE,
    EventRecord,
    InstrumentRecord,
    RunFile,
    RunInfo,
    RunStore,
)

if TYPE_CHECKING:
    import pandas as pd

    from sweeprig.analysis.figure_table import RunConditions
    from sweeprig.store.sql import RunTablesRead

#: Run states shown in reports: ``complete``, ``aborted``, ``unsafe`` (the bench's safe state
#: could not be verified by read-back when the run ended), or ``partial`` (not finished: still
#: running, interrupted, or stored complete with points missing).
STATE_COMPLETE = "complete"
STATE_ABORTED = "aborted"
STATE_UNSAFE = "unsafe"
STATE_PARTIAL = "partial"

@dataclass(frozen=True)
class StudyInfo:
    """One study as the reduction saw it: points stored (and planned, when known), the
    capture readings it holds, its roles, and the temperatures and supplies it covered."""

    name: str
    points: int
    points_planned: int | None
    readings: tuple[str, ...]
    roles: tuple[str, ...]
    temperatures_c: tuple[float, ...]
    supplies_v: tuple[float, ...]


@dataclass(frozen=True)
class RunFigures:
    """A run reduced to figures and a verdict (see the module docstring).

    Times: ``created``/``finished`` UTC; ``duration_sim_s`` bench-clock seconds from the first
    point's start to the last point's end; ``duration_wall_s`` wall seconds from the run's
    creation to its end (or its last point, while unfinished). ``sequence_sha256_ok`` says
    whether the stored sequence text still hashes to the stored SHA-256. ``notes`` are
    plain-language remarks on what could not be done. ``captures`` is the capture table the
    figures came from (one row per reading). ``figures`` is held as a
    :class:`~sweeprig.analysis.figure_block.Figures` however it is given (a large run's:
    blocks of columns).
    """

    run_id: int
    title: str
    part: str
    serial: str
    operator: str
    state: str
    status: str
    reason: str | None
    simulated: bool
    created: datetime
    finished: datetime | None
    points_done: int
    points_total: int | None
    sequence_path: str
    sequence_sha256: str
    sequence_sha256_ok: bool
    bench_path: str | None
    bench_sha256: str | None
    instruments: tuple[InstrumentRecord, ...]
    duration_sim_s: float | None
    duration_wall_s: float | None
    figures: Figures
    limits: tuple[Limit, ...]
    assessment: Assessment
    verdict: Verdict
    studies: tuple[StudyInfo, ...]
    conditions: Mapping[str, tuple[float, ...]]
    events: tuple[EventRecord, ...]
    notes: tuple[str, ...]
    captures: pd.DataFrame = field(compare=False, repr=False)
    #: "down" or "up": the words the figures and their conditions are read in (an
    #: upconverter's ``rf_*`` conditions are its IF input; see
    #: :mod:`sweeprig.analysis.direction`). "down" when the sequence could not be read.
    conversion: str = "down"
    #: What the reduction's :func:`~sweeprig.analysis.captures.conditions_records` calls
    #: made (it holds their mappings): :attr:`figure_conditions` reads the figures'
    #: conditions back from it, then lets it go. Empty: read from the mappings.
    made_conditions: list[MadeConditions] = field(default_factory=list, compare=False,
                                                  repr=False)

    def __post_init__(self) -> None:
        if not isinstance(self.figures, Figures):  # (a list or tuple of figures given)
            object.__setattr__(self, "figures", Figures([tuple(self.figures)]))

    @functools.cached_property
    def figure_conditions(self) -> RunConditions:
        """The conditions of ``figures`` as columns, read once per distinct mapping and
        kept (:class:`~sweeprig.analysis.figure_table.RunConditions`): what the report's
        writers take per figure."""
        from sweeprig.analysis.figure_table import RunConditions

        made = list(self.made_conditions)
        self.made_conditions.clear()  # (read once: its mappings need not be held longer)
        return RunConditions.of(self.figures, made)

    def figures_named(self, name: str) -> list[Figure]:
        """Every figure called ``name``, in reduction order (a block of another name is
        not made)."""
        return self.figures.named([name])[1]

    def figure_table(self, *names: str) -> pd.DataFrame:
        """The figures called any of ``names`` (none given: all) as columns, one row per
        figure, indexed by its position in ``figures``: ``name``, ``value``, ``unit``,
        ``bound``, ``uncertainty_db``, ``flags`` (a flag mask), ``points``, then one column
        per condition (:func:`sweeprig.analysis.figure_table.figure_table`)."""
        from sweeprig.analysis.figure_table import figure_table

        return figure_table(self.figures, names or None)

    def studies_with(self, role: str) -> list[str]:
        """Names of the studies that have ``role``."""
        return [s.name for s in self.studies if role in s.roles]


def reduce_run(store: RunStore, run_id: int) -> RunFigures:
    """Reduce run ``run_id`` of ``store`` to figures, limits and a verdict.

    Raises :class:`~sweeprig.errors.StoreError` when there is no such run; anything that only
    limits the result (an unreadable stored sequence, a study without the readings a figure
    needs) becomes a note instead. The same as :func:`reduce_loaded` of :func:`load_run`
    (which a caller takes apart to use the capture table before the figures exist).
    """
    return reduce_loaded(load_run(store, run_id))


@dataclass
class LoadedRun:
    """A stored run read for its reduction (:func:`load_run`): what :func:`reduce_loaded`
    needs of the store, the stored sequence as read (None, and a note in
    ``sequence_notes``, when it cannot be), and the capture table, which is whole from here
    on (the figures only read it). :func:`reduce_loaded` takes the points and readings
    tables out of it (None afterwards): a large run's are hundreds of MB, not held while
    its report is written."""

    info: RunInfo
    points: pd.DataFrame | None
    readings: pd.DataFrame | None
    events: tuple[EventRecord, ...]
    sequence: Sequence | None
    sequence_notes: tuple[str, ...]
    captures: pd.DataFrame

    @property
    def orders(self) -> tuple[int, int] | None:
        """(m, n) of the wanted product, from the stored sequence (None: it could not be
        read; the capture table then found it from the wanted readings)."""
        return _wanted_orders(self.sequence)


def _wanted_orders(sequence: Sequence | None) -> tuple[int, int] | None:
    if sequence is None:
        return None
    return wanted_orders(sequence.mixing.conversion, sequence.mixing.lo_side)


def load_run(store: RunStore, run_id: int, *, tables: RunTablesRead | None = None
             ) -> LoadedRun:
    """Read run ``run_id`` of ``store`` and build its capture table; StoreError when there
    is no such run. ``tables``: the run's points and readings begun already
    (``store.begin_run_tables``; the caller stops it)."""
    from sweeprig.analysis.load import captures_from_frames

    with collector_paused():  # (see reduce_loaded)
        info = store.run(run_id)
        # what does not need the points and readings first, while a child may still be
        # reading them
        events = tuple(store.events(run_id))
        notes: list[str] = []
        sequence = _stored_sequence(info.sequence_text, info.sequence_path,
                                    info.sequence_sha256, store.run_files(run_id), notes)
        points, readings = (store.run_tables(run_id) if tables is None
                            else tables.result())
        captures = captures_from_frames(points, readings,
                                        wanted_orders=_wanted_orders(sequence))
    return LoadedRun(info, points, readings, events, sequence, tuple(notes), captures)


def reduce_loaded(loaded: LoadedRun) -> RunFigures:
    """:func:`reduce_run` of a run read already (:func:`load_run`); takes its points and
    readings tables out of ``loaded`` (see :class:`LoadedRun`)."""
    # A large run makes millions of small acyclic objects (figures, conditions, budget
    # lines): the cyclic collector would rescan them all again and again.
    from sweeprig.analysis.captures import conditions_noted, point_tables_shared

    # (the whole run's ``if`` table: the unpowered check and the image rejection's reference)
    with collector_paused(), point_tables_shared((("if",), None)), \
            conditions_noted() as made:
        run = _reduce_loaded(loaded)
    run.made_conditions.extend(made)
    return run


def _reduce_loaded(loaded: LoadedRun) -> RunFigures:
    from sweeprig.analysis.bench_specs import calibration_state, specs_from_bench_text
    from sweeprig.analysis.budget_groups import attach_uncertainty_to_parts, blockable
    from sweeprig.analysis.direction import (
        add_output_frequency_to_parts,
        name_parts_in_trade_words,
    )
    from sweeprig.analysis.figure_block import (
        Part,
        block_maker,
        flag_marked_parts,
        parts_of,
    )

    info, events, captures = loaded.info, loaded.events, loaded.captures
    points, readings = loaded.points, loaded.readings
    loaded.points = loaded.readings = None  # (not held past their use here)
    if points is None or readings is None:
        raise ValueError("this loaded run has been reduced already: load it again")
    sequence = loaded.sequence
    notes = list(loaded.sequence_notes)
    orders = loaded.orders
    conversion = sequence.mixing.conversion if sequence is not None else "down"
    bench_specs = specs_from_bench_text(info.bench_text, info.bench_path or "bench file")
    from sweeprig.analysis.noise_load import noise_figure_figures  # own budgets

    # made now, added last (as before): the readings table is not held past this line
    noise_figures = noise_figure_figures(points, readings, bench_specs.specs, sequence)
    del readings
    release_freed_memory()  # (the readings table's pages, before the figures are made)
    studies = _study_infos(captures, points, sequence)
    # a large run's figures of one name from one point each are held as columns from here
    # on (sweeprig.analysis.figure_block), each analysis' as it comes; each pass below
    # gives new parts, the old ones let go
    parts: list[Part] = []
    keep = parts.extend
    make = block_maker(blockable)
    _figures(captures, studies, notes,
             spur_counting(sequence) if sequence is not None else {},
             add=lambda new: keep(parts_of(new, blockable=blockable)), make=make)
    if conversion == "up" and not captures.empty:
        from sweeprig.analysis.direction import upconverter_figures

        if names := [s.name for s in studies
                     if ROLE_ISOLATION in s.roles or ROLE_SIDEBAND in s.roles]:
            parts += parts_of(upconverter_figures(captures, study=names, make=make),
                              blockable=blockable)
    # a point's state (its supply, its power) holds for every figure of the point, its noise
    # figures' too (they are made apart and added last)
    marks = _supply_limited_marks(captures, points, notes)
    marks += _role_marks(points, notes)
    marks += _temperature_off_marks(points, temperature_tolerance_c(sequence), notes)
    if sequence is not None:
        marks += _unpowered_marks(captures, sequence.part.expected_gain, notes)
        expected_current = getattr(sequence.part, "expected_supply_current", None)
        if expected_current is not None:
            marks += _supply_current_marks(captures, float(expected_current), notes)
    parts = flag_marked_parts(parts, marks)
    noise_figures = flag_marked_points(noise_figures, marks)
    duration_sim_s = _sim_duration(points)
    duration_wall_s = _wall_duration(info.created, info.finished, points)
    del points  # (its last use: not held while the figures are rebuilt)
    release_freed_memory()
    notes += bench_specs.notes
    notes += _unchecked_notes(events)
    calibration, calibration_note = calibration_state(events)
    notes += [calibration_note] if calibration_note else []
    # the output frequency first, so that the old conditions mappings are freed before the
    # budgets are made (a budget does not depend on the output frequency: the tests compare
    # this order with the copying passes in the other)
    parts = add_output_frequency_to_parts(parts, orders)
    release_freed_memory()  # (the old conditions mappings)
    parts = attach_uncertainty_to_parts(parts, captures, bench_specs.specs, calibration)
    release_freed_memory()
    parts = name_parts_in_trade_words(parts, conversion)
    figures = Figures([*parts, noise_figures])
    del parts
    limits = limits_from_sequence(sequence) if sequence is not None else ()
    # (a block judged from its columns; a judgement knows its figure by its position)
    assessment = assess(figures, limits, guard_band=bench_specs.guard_band)
    state = _state(info.status, info.points_done, info.points_total)
    verdict: Verdict = assessment.verdict
    if not limits:
        notes.append("the sequence has no [[spec]] limits: nothing to pass or fail")
    if state == STATE_UNSAFE:
        notes.append("the bench was NOT proven safe when this run ended (see the reason): "
                     "check every instrument by hand before touching the bench")
    measured_all = info.points_total is None or info.points_done >= info.points_total
    if limits and verdict == PASS and not (state == STATE_COMPLETE
                                           or (state == STATE_UNSAFE and measured_all)):
        verdict = INCONCLUSIVE
        notes.append(f"the run is {state}: every limit met so far, but not every planned "
                     "point was measured")
    for limit in assessment.untested:
        notes.append(f"no figure for the limit {limit.text()}")
    return RunFigures(
        run_id=info.id,
        title=info.title,
        part=info.part,
        serial=info.serial,
        operator=info.operator,
        state=state,
        status=info.status,
        reason=info.reason,
        simulated=info.simulated,
        created=info.created,
        finished=info.finished,
        points_done=info.points_done,
        points_total=info.points_total,
        sequence_path=info.sequence_path,
        sequence_sha256=info.sequence_sha256,
        sequence_sha256_ok=sha256_text(info.sequence_text) == info.sequence_sha256,
        bench_path=info.bench_path,
        bench_sha256=info.bench_sha256,
        instruments=info.instruments,
        duration_sim_s=duration_sim_s,
        duration_wall_s=duration_wall_s,
        figures=figures,
        limits=tuple(limits),
        assessment=assessment,
        verdict=verdict,
        studies=studies,
        conditions=_conditions(captures),
        events=events,
        notes=tuple(notes),
        captures=captures,
        conversion=conversion,
    )


# ---------------------------------------------------------------------------------------------
# the stored sequence


def _stored_sequence(text: str, path: str, sha256: str, files: tuple[RunFile, ...],
                     notes: list[str]) -> Sequence | None:
    """The sequence as stored with the run: the merged sequence recorded with it (never the
    files on disk); for a run recorded without one, the stored text, and with includes the
    file itself when it is unchanged. None (and a note) when it cannot be read."""
    merged = next((f for f in files if f.role == MERGED_SEQUENCE), None)
    if merged is not None:
        try:
            return sequence_from_dict(json.loads(merged.text))
        except (SweeprigError, ValueError) as exc:
            what = exc.what if isinstance(exc, SweeprigError) else str(exc)
            notes.append(f"the merged sequence stored with the run could not be read ({what}): "
                         "no limits applied, studies classified from the points")
            return None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        notes.append(f"the stored sequence text is not valid TOML ({exc}): no limits applied")
        return None
    try:
        if data.get("include"):
            file = Path(path)
            if file.is_file() and sha256_text(read_file_text(file)) == sha256:
                return load_sequence(file)
            notes.append("the sequence includes other files, and its file has changed or "
                         "moved since the run: limits are read from the stored text alone")
            data = {k: v for k, v in data.items() if k != "include"}
        return sequence_from_dict(data)
    except (SweeprigError, OSError, UnicodeDecodeError) as exc:
        what = exc.what if isinstance(exc, SweeprigError) else str(exc)
        notes.append(f"the stored sequence could not be read ({what}): no limits applied, "
                     "studies classified from the points")
        return None


# ---------------------------------------------------------------------------------------------
# studies and figures


def _study_infos(
    captures: pd.DataFrame, points: pd.DataFrame, sequence: Sequence | None
) -> tuple[StudyInfo, ...]:
    """One :class:`StudyInfo` per study, in the order of the sequence (else of the points)."""
    names = _distinct_texts(points["study"])
    if sequence is not None:
        planned = [s.name for s in sequence.study]
        names = [n for n in planned if n in names] + [n for n in names if n not in planned]
    factor = 1
    if sequence is not None:
        factor = sequence.temperature_count() * sequence.supply_count()
    out: list[StudyInfo] = []
    for name in names:
        # (the one column read: a large run's whole table is not copied per study)
        readings = captures.loc[captures["study"] == name, "reading"]
        point_rows = points[points["study"] == name]
        kinds = tuple(_distinct_texts(readings))
        study = _sequence_study(sequence, name)
        shape = shape_from_sequence(study) if study is not None else _shape_from_points(
            point_rows)
        roles = study_roles(kinds, *shape, temperatures=point_rows["temperature_c"].nunique())
        out.append(StudyInfo(
            name=name,
            points=len(point_rows),
            points_planned=study.count() * factor if study is not None else None,
            readings=kinds,
            roles=roles,
            temperatures_c=_distinct(point_rows["temperature_c"]),
            supplies_v=_distinct(point_rows["supply_v"]),
        ))
    return tuple(out)


def _distinct_texts(values: pd.Series) -> list[str]:
    """The distinct values of a column as text (``astype(str)``), in order of first
    appearance; each distinct value converted once (a large run's reading column has
    millions of entries and a few values: 0.16 s -> 3 ms at 100k points)."""
    import pandas as pd

    return list(dict.fromkeys(pd.Series(values.unique()).astype(str).tolist()))


def _sequence_study(sequence: Sequence | None, name: str) -> Study | None:
    if sequence is None:
        return None
    try:
        return sequence.study_named(name)
    except KeyError:
        return None


def _varies_in(captures: pd.DataFrame, study: str, column: str) -> bool:
    """Whether ``column`` takes more than one value among the captures of ``study``."""
    values = captures.loc[captures["study"] == study, column]
    return bool(values.nunique(dropna=True) > 1)


def _shape_from_points(points: pd.DataFrame) -> tuple[bool, bool, bool, bool]:
    """The same, from the stored points (for a run whose sequence cannot be read)."""
    if points.empty:
        return False, False, False, False
    frame = points.fillna({"temperature_c": -1e9, "supply_v": -1e9})
    two = bool(points["rf2_freq_hz"].notna().any())

    def swept(column: str, fixed: list[str]) -> bool:
        counts = frame.groupby(fixed, dropna=False)[column].nunique()
        return bool((counts > 1).any())

    base = ["temperature_c", "supply_v"]
    return (
        two,
        swept("rf_power_dbm", [*base, "lo_power_dbm", "rf_freq_hz"]),
        swept("lo_power_dbm", [*base, "rf_power_dbm", "rf_freq_hz"]),
        swept("rf_freq_hz", [*base, "lo_power_dbm", "rf_power_dbm"])
        or swept("lo_freq_hz", [*base, "lo_power_dbm", "rf_power_dbm", "rf_freq_hz"]),
    )


def spur_counting(
    sequence: Sequence,
) -> dict[str, tuple[tuple[float, float] | None, tuple[tuple[int, int], ...]]]:
    """Per study with an ``mxn`` reading that states them: (output band in Hz or None, the
    expected products as (m, n)): which products its worst-spur figure counts."""
    from sweeprig.formats.sequence import expected_products

    out = {}
    for study in sequence.study:
        for spec in study.readings():
            if spec.kind == "mxn" and (spec.output_band is not None or spec.expected):
                band = None if spec.output_band is None else (
                    float(spec.output_band[0]), float(spec.output_band[1]))
                out[study.name] = (band, expected_products(spec))
    return out


def _figures(
    captures: pd.DataFrame, studies: tuple[StudyInfo, ...], notes: list[str],
    counting: Mapping[str, tuple[tuple[float, float] | None, tuple[tuple[int, int], ...]]]
    | None = None, *, add: Callable[[list[Figure]], None] | None = None,
    make: Maker = make_figures,
) -> list[Figure]:
    """Every figure of the run, study roles deciding which analysis runs where
    (``counting``: :func:`spur_counting` of the sequence). ``add``: given each analysis'
    figures as they are made, instead of their being kept in the list returned (then
    empty); ``make``: what the analyses that make figures point by point make them with
    (:data:`~sweeprig.analysis.figures.Maker`)."""
    from sweeprig import analysis as an


    def having(role: str) -> list[str]:
        return [s.name for s in studies if role in s.roles]

    figures: list[Figure] = []
    add = add or figures.extend
    if captures.empty:
        notes.append("no readings are stored yet: no figures")
        return figures
    if names := having(ROLE_GAIN):
        add(an.conversion_gain_figures(captures, study=names, make=make))
    if names := having(ROLE_FLATNESS):
        # over the input frequency where it moves; else over the output, which the LO moves
        by_input = [n for n in names if _varies_in(captures, n, "rf_freq_hz")]
        by_output = [n for n in names if n not in by_input]
        if by_input:
            add(an.gain_flatness_figures(captures, study=by_input))
        if by_output and OUTPUT_FREQ in captures.columns:
            add(an.gain_flatness_figures(captures, study=by_output, over=OUTPUT_FREQ,
                                         along=("lo_freq_hz",)))
    if names := having(ROLE_TEMPCO):
        add(an.gain_tempco_figures(captures, study=names))
    compression: list[Figure] = []
    if names := having(ROLE_COMPRESSION):
        compression = an.compression_figures(captures, study=names)
        add(compression)
    if names := having(ROLE_TWO_TONE):
        source = an.p1db_matcher(compression) if compression else None
        if source is None:
            notes.append("no P1dB in this run: the intercept fits chose their range from the "
                         "fundamental's slope")
        add(an.intercept_figures(captures, study=names, input_p1db_dbm=source, make=make))
    if names := having(ROLE_LO_DRIVE):
        add(an.lo_drive_figures(captures, study=names))
    if names := having(ROLE_ISOLATION):
        add(an.isolation_figures(captures, study=names, make=make))
    if names := having(ROLE_IMAGE):
        add(an.image_rejection_figures(captures, study=names, make=make))
    if names := having(ROLE_SUPPLY):
        add(an.supply_figures(captures, study=names, make=make))
    if names := having(ROLE_SPURS):
        counting = counting or {}
        plain = [n for n in names if n not in counting]
        if plain:
            add(an.spur_figures(captures, study=plain, make=make))
        for name in names:
            if name in counting:
                band, expected = counting[name]
                add(an.spur_figures(captures, study=name, if_band_hz=band,
                                    expected=expected, make=make))
    return figures


#: A flag and the run-store points whose figures get it (:func:`flag_marked_points`).
Marks = list[tuple[str, np.ndarray]]


def _unpowered_marks(captures: pd.DataFrame, expected_gain_db: float,
                     notes: list[str]) -> Marks:
    """``unpowered`` for every figure that came from a point whose conversion gain was
    more than :data:`UNPOWERED_GAIN_MARGIN_DB` below the part's expected gain, and say so."""
    from sweeprig.analysis.gain import unpowered_points

    points = unpowered_points(captures, expected_gain_db)
    if points.size == 0:
        return []
    total = int(captures["point"].nunique())
    notes.append(
        f"{points.size} of {total} point(s) had a conversion gain more than "
        f"{UNPOWERED_GAIN_MARGIN_DB:g} dB below the expected {expected_gain_db:g} dB: the part "
        "looks unpowered, wrongly powered or not driven there (check the supply voltage and "
        "output, its current limit, the LO drive and the RF path: a tone that never reached "
        "the part looks the same); every figure from those points is "
        "flagged 'unpowered'")
    return [(UNPOWERED, points)]


def _supply_limited_marks(captures: pd.DataFrame, points: pd.DataFrame,
                          notes: list[str]) -> Marks:
    """``supply_limited`` for every figure that came from a point at which the DC supply
    was found in current limit or below its setting (the runner's
    :func:`~sweeprig.instruments.supply.supply_limited`: the point's ``supply_current``
    reading, or the supply's status read after the point, in the point's ``extra_json``
    ``supply_flags``), and say so."""
    marked: list[np.ndarray] = []
    if not captures.empty and "risks" in captures:
        supply = captures[captures["reading"] == "supply_current"]
        marked.append(supply["point"].to_numpy()[
            risk_mask(supply["risks"].to_numpy(), SUPPLY_LIMITED)])
    marked.append(_points_marked(points, "supply_flags",
                                 lambda listed: SUPPLY_LIMITED in listed))
    found = np.unique(np.concatenate(marked)).astype(np.int64)
    if found.size == 0:
        return []
    notes.append(
        f"at {found.size} of {len(points)} point(s) the DC supply was in current limit or "
        "more than 2 % below its setting: the part ran below its stated supply there (check "
        "the bench's supply_max_current against the part's draw, which rises with "
        "temperature, and the supply's leads); every figure from those points is flagged "
        "'supply_limited'")
    return [(SUPPLY_LIMITED, found)]


def _points_marked(points: pd.DataFrame, key: str,
                   marks: Callable[[list[str]], bool]) -> np.ndarray:
    """The point indexes whose record's ``extra_json`` holds a list under ``key`` that
    ``marks`` (the runner's marks of a point, from the status reads after it)."""
    if points.empty or "extra_json" not in points:
        return np.zeros(0, dtype=np.int64)
    needle = f'"{key}"'
    extras = points["extra_json"].to_numpy(dtype=object)
    hit = [i for i, text in enumerate(extras.tolist())
           if isinstance(text, str) and needle in text
           and marks(json.loads(text).get(key) or [])]
    return points["point_index"].to_numpy()[hit].astype(np.int64)


#: The runner's marks of a point by role (a key of its record's ``extra_json``, listing the
#: roles whose status read after the point, or whose reading, found it): the figure flag, and
#: the note's words after "at N of M point(s) <roles>".
ROLE_MARKS: dict[str, tuple[str, str]] = {
    "unleveled_sources": (
        SOURCE_UNLEVELED, "reported its output not leveled: it delivered less than its "
        "setting, so the part got less drive than the plan says (check the path losses and "
        "the source's maximum leveled output at those frequencies)"),
    "reference_unlocked": (
        REFERENCE_UNLOCKED, "reported its 10 MHz reference unlocked: it ran on its own "
        "crystal, its frequencies off by that crystal's error (a narrow-RBW reading can miss "
        "the product; check the house reference and its cables)"),
}


def _role_marks(points: pd.DataFrame, notes: list[str]) -> Marks:
    """A flag for every figure of a point the runner marked with one of
    :data:`ROLE_MARKS` (a source unleveled, a reference unlocked), and say which roles."""
    out: Marks = []
    for key, (flag, words) in ROLE_MARKS.items():
        roles: set[str] = set()

        def marks(listed: list[str], roles: set[str] = roles) -> bool:
            roles.update(str(r) for r in listed)
            return bool(listed)

        found = _points_marked(points, key, marks)
        if found.size == 0:
            continue
        notes.append(f"at {found.size} of {len(points)} point(s) "
                     f"{' and '.join(repr(r) for r in sorted(roles))} {words}; every figure "
                     f"from those points is flagged '{flag}'")
        out.append((flag, found))
    return out


def temperature_tolerance_c(sequence: Sequence | None) -> float:
    """The tolerance the DUT probe is held to around its set point, °C: the sequence's
    ``[conditions] temperature_tolerance`` (its default without a readable sequence)."""
    if sequence is not None:
        return float(sequence.conditions.temperature_tolerance)
    return float(Conditions.model_fields["temperature_tolerance"].default)


def temperature_off_points(points: pd.DataFrame, tolerance_c: float) -> np.ndarray:
    """Indices of the points whose DUT probe read more than ``tolerance_c`` (°C) from their
    set point (points without a set point or a probe reading are never off)."""
    if "probe_temperature_c" not in points or "temperature_c" not in points:
        return np.zeros(0, dtype=np.int64)
    probe = points["probe_temperature_c"].to_numpy(dtype=float, na_value=np.nan)
    setpoint = points["temperature_c"].to_numpy(dtype=float, na_value=np.nan)
    with np.errstate(invalid="ignore"):
        off = np.abs(probe - setpoint) > tolerance_c
    return points["point_index"].to_numpy(dtype=np.int64)[off]


def _temperature_off_marks(points: pd.DataFrame, tolerance_c: float,
                           notes: list[str]) -> Marks:
    """``temperature_off`` for every figure from a point whose DUT probe read outside the
    tolerance of its set point (the engine soaks until it is inside, so a point outside it
    means the chamber lost hold of the part during the points), and say where."""
    found = temperature_off_points(points, tolerance_c)
    if found.size == 0:
        return []
    rows = points[points["point_index"].isin(found)]
    gap = (rows["probe_temperature_c"] - rows["temperature_c"]).abs()
    worst = rows.loc[gap.idxmax()]
    notes.append(f"at {found.size} of {len(points)} point(s) the DUT probe read outside "
                 f"±{tolerance_c:g} °C of its set point (the worst: "
                 f"{worst['probe_temperature_c']:.1f} °C at the {worst['temperature_c']:g} °C "
                 "set point, point "
                 f"{int(worst['point_index'])}): the chamber was not holding the part; every "
                 f"figure from those points is flagged '{TEMPERATURE_OFF}'")
    return [(TEMPERATURE_OFF, found)]


#: A status companion (the instrument operation read after every point) → the figure flag it
#: raises: a companion left out for the run (refused at connect) cannot raise it.
COMPANION_FLAGS: dict[str, str] = {
    "unleveled": SOURCE_UNLEVELED,
    "reference_unlocked": REFERENCE_UNLOCKED,
    "current_limited": SUPPLY_LIMITED,
}
#: A status companion that raises no figure flag → what the run could not do without it.
COMPANION_WATCHES: dict[str, str] = {
    "output_tripped": "a trip of its output protection would not have stopped the run",
}


def _unchecked_notes(events: tuple[EventRecord, ...]) -> list[str]:
    """A note per instrument whose status companions were left out for the run (the
    connect's ``status`` warnings): which flags its figures could not get."""
    notes = []
    for event in events:
        details = event.details if isinstance(event.details, Mapping) else {}
        names = details.get("left_out", ())
        left = [COMPANION_FLAGS[n] for n in names if n in COMPANION_FLAGS]
        watches = [COMPANION_WATCHES[n] for n in names if n in COMPANION_WATCHES]
        if event.kind == "status" and (left or watches):
            said = ([f"its figures were not checked for {' or '.join(left)}"] if left
                    else []) + watches
            notes.append(f"role {details.get('role')!r} could not be asked "
                         f"{details.get('query')} after each point (refused at connect): "
                         + "; ".join(said))
    return notes


def _supply_current_marks(captures: pd.DataFrame, expected_current_a: float,
                          notes: list[str]) -> Marks:
    """``supply_current_off`` for every figure that came from a point whose supply current
    was more than :data:`SUPPLY_CURRENT_TOLERANCE` away from the part's expected current."""
    from sweeprig.analysis.isolation import supply_current_off_points

    points = supply_current_off_points(captures, expected_current_a)
    if points.size == 0:
        return []
    measured = int(((captures["reading"] == "supply_current")).sum())
    notes.append(
        f"{points.size} of {measured} supply current reading(s) were more than "
        f"{SUPPLY_CURRENT_TOLERANCE:.0%} away from the expected "
        f"{expected_current_a * 1e3:g} mA: the part looks wrongly powered or damaged there "
        "(check the supply voltage, its current limit and the part's connections, with the "
        "supply off before touching the part); every figure from those points is flagged "
        "'supply_current_off'")
    return [(SUPPLY_CURRENT_OFF, points)]


# ---------------------------------------------------------------------------------------------
# run facts


def _state(status: str, done: int, total: int | None) -> str:
    if status == "aborted":
        return STATE_ABORTED
    if status == "unsafe":
        return STATE_UNSAFE
    if status == "complete" and (total is None or done >= total):
        return STATE_COMPLETE
    return STATE_PARTIAL


def _sim_duration(points: pd.DataFrame) -> float | None:
    if points.empty or "sim_start_s" not in points:
        return None
    start = points["sim_start_s"].min()
    end = points["sim_end_s"].max()
    if not (math.isfinite(start) and math.isfinite(end)):
        return None
    return float(end - start)


def _wall_duration(created: datetime, finished: datetime | None,
                   points: pd.DataFrame) -> float | None:
    import pandas as pd

    end = finished
    if end is None and not points.empty and "wall_end" in points:
        last = points["wall_end"].max()
        end = None if pd.isna(last) else last.to_pydatetime()
    if end is None:
        return None
    return max((end - created).total_seconds(), 0.0)


def _distinct(series: pd.Series) -> tuple[float, ...]:
    """The distinct finite values, ascending (hashed first: a column of a large run's
    readings holds a few values millions of times, which a sort of all of them pays for)."""
    import pandas as pd

    values = series.to_numpy(dtype=float, na_value=np.nan)
    return tuple(float(v) for v in np.unique(pd.unique(values[np.isfinite(values)])))


def _conditions(captures: pd.DataFrame) -> Mapping[str, tuple[float, ...]]:
    """Distinct values of every condition column over the run (empty columns left out)."""
    from sweeprig.analysis.captures import CONDITION_COLUMNS

    out: dict[str, tuple[float, ...]] = {}
    for column in CONDITION_COLUMNS:
        values = _distinct(captures[column]) if column in captures else ()
        if values:
            out[column] = values
    return MappingProxyType(out)
