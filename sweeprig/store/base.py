"""The run store's narrow interface and its records.

The engine writes through :class:`RunStore`; the commands and the analysis read through it.
One implementation ships (:class:`sweeprig.store.sqlite.SqliteRunStore`); a server database
can be added behind the same protocol.

Conventions: wall-clock times are timezone-aware UTC ``datetime`` objects; simulated times are
seconds of the bench clock (``sweeprig.clock``); quantities carry their unit in their name.
A point is identified by ``(run_id, point_index)``; its readings are written with it in one
transaction, so a crash loses at most the point in flight.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from datetime import UTC, datetime
from typing import TYPE_CHECKING, Any, Literal, Protocol, runtime_checkable

from sweeprig.store.paths import DEFAULT_STORE_PATH as DEFAULT_STORE_PATH

if TYPE_CHECKING:  # pandas is imported where frames are made, not by the commands that start
    import pandas as pd

    from sweeprig.store.sql import RunTablesRead


RunStatus = Literal["planned", "running", "complete", "aborted", "interrupted", "unsafe"]
RUN_STATUSES: tuple[str, ...] = ("planned", "running", "complete", "aborted", "interrupted",
                                 "unsafe")
FINAL_STATUSES: tuple[str, ...] = ("complete", "aborted", "unsafe")
"""``unsafe``: the run ended (complete or not) but its bench could not be proven safe by
reading the safe state back; the reason says which instrument and what it reported. Like
``aborted``, an ``unsafe`` run can be resumed."""

Severity = Literal["debug", "info", "warning", "error"]
SEVERITIES: tuple[str, ...] = ("debug", "info", "warning", "error")

HEARTBEAT_STALE_S = 120.0
"""A ``running`` run on another host (whose run lock this host may not see) is shown as
``interrupted`` once its heartbeat is older than this."""


def utc_now() -> datetime:
    """The current time, timezone-aware UTC."""
    return datetime.now(UTC)


@dataclass(frozen=True)
class InstrumentRecord:
    """One instrument of a run: bench role, VISA resource, driver profile, ``*IDN?`` reply."""

    role: str
    resource: str
    profile: str
    idn: str = ""


@dataclass(frozen=True)
class PointRecord:
    """One measurement point: the settings at the DUT plane and what was measured around it.

    ``index``: the plan's point index (unique per run). ``study``: which study of the sequence
    it belongs to. Settings not used by the study are ``None``. ``sim_*_s``: bench-clock
    seconds; ``wall_*``: UTC. ``extra``: further JSON-able values (a safety valve; prefer
    real columns).
    """

    index: int
    study: str
    temperature_c: float | None = None
    supply_v: float | None = None
    lo_freq_hz: float | None = None
    lo_power_dbm: float | None = None
    rf_freq_hz: float | None = None
    rf_power_dbm: float | None = None
    rf2_freq_hz: float | None = None
    rf2_power_dbm: float | None = None
    probe_temperature_c: float | None = None
    supply_current_a: float | None = None
    sim_start_s: float | None = None
    sim_end_s: float | None = None
    wall_start: datetime | None = None
    wall_end: datetime | None = None
    extra: Mapping[str, Any] = field(default_factory=dict)


@dataclass(frozen=True)
class ReadingRecord:
    """One reading taken at a point.

    ``name``: what it is, as the plan names it (``"wanted"``, ``"lo_at_rf"``, ``"mxn.2x-1"``,
    ``"im3.lower.att10"``...). ``kind``: the sequence's reading kind (``"wanted"``, ``"mxn"``,
    ``"im3"``, ``"input_power"``...). ``port``: DUT port the analyzer saw
    (``"if"``, ``"rf"``, ``"lo"``). ``freq_hz``/``level_dbm``: the reading (level at the DUT
    port plane: the engine adds the path loss to the analyzer's reading, which it keeps in
    ``extra`` as ``analyzer_level_dbm``). ``noise_floor_dbm``: the analyzer's noise
    floor at that setting. ``m``/``n``: harmonic orders of an m×n product (m·LO ± n·RF).
    Analyzer settings as used. ``overload``: analyzer overload flag. ``attenuation_check``:
    True when this reading is the repeat with 10 dB more input attenuation (``extra``'s
    ``repeat_of`` names the original), None otherwise.
    """

    name: str
    kind: str
    port: str = ""
    freq_hz: float | None = None
    level_dbm: float | None = None
    noise_floor_dbm: float | None = None
    m: int | None = None
    n: int | None = None
    span_hz: float | None = None
    rbw_hz: float | None = None
    attenuation_db: float | None = None
    ref_level_dbm: float | None = None
    averages: int | None = None
    overload: bool = False
    attenuation_check: bool | None = None
    extra: Mapping[str, Any] = field(default_factory=dict)


@dataclass(frozen=True)
class EventRecord:
    """Something that happened during a run: a fault, a retry, a skipped point, a note.

    ``severity``: debug/info/warning/error. ``kind``: short machine-readable word
    (``"retry"``, ``"fault"``, ``"skip"``...). ``details``: JSON-able mapping.
    """

    time: datetime
    severity: str
    kind: str
    message: str
    details: Mapping[str, Any] = field(default_factory=dict)
    point_index: int | None = None


@dataclass(frozen=True)
class RunFile:
    """A file a run's inputs came from, kept with the run (beyond the sequence and bench
    files' own texts).

    ``role``: ``"include"`` for a fragment the sequence included (``path`` as read, ``text``
    exactly as read), or ``"merged_sequence"`` for the sequence with every include merged in
    (``path`` the sequence file, ``text`` its table as JSON): what the analysis judges the run
    against, so a report made later never depends on the files on disk. ``sha256`` of
    ``text`` (UTF-8).
    """

    role: str
    path: str
    sha256: str
    text: str


INCLUDE_FILE = "include"
MERGED_SEQUENCE = "merged_sequence"


@dataclass(frozen=True)
class BusRecord:
    """One SCPI exchange for the bus log. ``received`` is None for a write."""

    time: datetime
    role: str
    sent: str
    received: str | None
    duration_s: float


@dataclass(frozen=True)
class RunSummary:
    """One run as listed: ``status`` is the status to show (``interrupted`` for a ``running``
    run whose process is gone), ``stored_status`` what the database says."""

    id: int
    status: str
    stored_status: str
    reason: str | None
    created: datetime
    finished: datetime | None
    heartbeat: datetime | None
    sequence_path: str
    bench_path: str | None
    simulated: bool
    operator: str
    part: str
    serial: str
    tags: tuple[str, ...]
    title: str
    points_done: int
    points_total: int | None
    last_point_end: datetime | None

    @property
    def duration_s(self) -> float | None:
        """Finished (or last heartbeat, while running) minus created, s."""
        end = self.finished or self.heartbeat
        return None if end is None else (end - self.created).total_seconds()


@dataclass(frozen=True)
class RunInfo(RunSummary):
    """One run in full: the summary plus the input files and the process that ran it.

    ``activity``: what the live run was waiting for at its last heartbeat (None while it
    measures): ``what`` (``chamber``, ``soak``, ``settle``...), ``label`` (one line for
    people), and where known ``setpoint_c``, ``probe_c``, ``left_s`` (bench seconds left),
    ``total_s``.
    """

    sequence_sha256: str
    sequence_text: str
    bench_sha256: str | None
    bench_text: str | None
    pid: int | None
    host: str | None
    instruments: tuple[InstrumentRecord, ...]
    activity: Mapping[str, Any] | None = None


@runtime_checkable
class RunStore(Protocol):
    """What the engine, the commands and the analysis need of a run store.

    Errors are :class:`sweeprig.errors.StoreError`. ``write_point`` is atomic.
    """

    def create_run(
        self,
        *,
        sequence_path: str,
        sequence_text: str,
        bench_path: str | None = None,
        bench_text: str | None = None,
        simulated: bool = False,
        operator: str = "",
        part: str = "",
        serial: str = "",
        tags: Sequence[str] = (),
        title: str = "",
        points_total: int | None = None,
        status: RunStatus = "planned",
        files: Sequence[RunFile] = (),
    ) -> int:
        """Record a new run (and the files its inputs came from, in the same transaction);
        return its id."""
        ...

    def run_files(self, run_id: int) -> tuple[RunFile, ...]:
        """The files recorded with a run, in the order given (empty for a run recorded
        without them, or by an older store)."""
        ...

    def record_instruments(self, run_id: int, instruments: Sequence[InstrumentRecord]) -> None:
        """Record (or replace, per role) the instruments of a run."""
        ...

    def write_point(
        self, run_id: int, point: PointRecord, readings: Sequence[ReadingRecord],
        *, activity: Mapping[str, Any] | None = None,
    ) -> None:
        """Store a point and its readings atomically (all or nothing); ``activity`` (what
        the run does now, e.g. its ETA) goes with the heartbeat in the same transaction."""
        ...

    def force_owed_log(self) -> None:
        """Do now the durability work the last point's commit left owed (a store that
        forces its log to disk now and then, :mod:`sweeprig.store.sqlite`); nothing for a
        store that owes none. The run loop calls it while the bench settles."""
        ...

    def done_point_indices(self, run_id: int) -> set[int]:
        """Indices of the points already stored (to resume a run)."""
        ...

    def set_status(self, run_id: int, status: RunStatus, reason: str | None = None) -> None:
        """Change the run's status; ``complete``/``aborted``/``unsafe`` also set the finish
        time."""
        ...

    def set_points_total(self, run_id: int, points_total: int) -> None:
        """Record the number of points the plan has."""
        ...

    def heartbeat(self, run_id: int, activity: Mapping[str, Any] | None = None) -> None:
        """Record that the run's process is alive (now, this pid and host)."""
        ...

    def log_event(
        self,
        run_id: int,
        severity: Severity,
        kind: str,
        message: str,
        details: Mapping[str, Any] | None = None,
        *,
        point_index: int | None = None,
    ) -> None:
        """Append an event."""
        ...

    def log_bus(self, run_id: int, entries: Sequence[BusRecord]) -> None:
        """Append SCPI exchanges to the bus log (one transaction for the batch)."""
        ...

    def runs(self) -> list[RunSummary]:
        """Every run, newest first."""
        ...

    def run(self, run_id: int) -> RunInfo:
        """One run in full; :class:`StoreError` if there is no such run."""
        ...

    def points_frame(self, run_id: int) -> pd.DataFrame:
        """The run's points, one row each, ordered by index."""
        ...

    def readings_frame(self, run_id: int) -> pd.DataFrame:
        """The run's readings, one row each, ordered by point index then reading order."""
        ...

    def run_tables(self, run_id: int) -> tuple[pd.DataFrame, pd.DataFrame]:
        """``points_frame`` and ``readings_frame`` of the run, read together."""
        ...

    def begin_run_tables(self, run_id: int) -> RunTablesRead:
        """``run_tables`` begun now, its ``result()`` taken later (``stop()``: unused)."""
        ...

    def events(self, run_id: int) -> list[EventRecord]:
        """The run's events, oldest first."""
        ...

    def bus_log(self, run_id: int, *, limit: int | None = None) -> list[BusRecord]:
        """The run's bus log, oldest first (the last ``limit`` entries if given)."""
        ...

    def close(self) -> None:
        """Release the database."""
        ...
