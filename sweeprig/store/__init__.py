"""The run store: runs, instruments, points, readings, events and the bus log.

``RunStore`` is the interface; ``SqliteRunStore`` (:mod:`sweeprig.store.sqlite`) the
implementation; ``open_store(path)`` opens one. ``DEFAULT_STORE_PATH`` is
``results/sweeprig.sqlite`` relative to the current folder.
"""

from sweeprig.store.base import (
    DEFAULT_STORE_PATH,
    RUN_STATUSES,
    BusRecord,
    EventRecord,
    InstrumentRecord,
    PointRecord,
    ReadingRecord,
    RunFile,
    RunInfo,
    RunStatus,
    RunStore,
    RunSummary,
)
from sweeprig.store.sqlite import SqliteRunStore, open_store

__all__ = [
    "DEFAULT_STORE_PATH",
    "RUN_STATUSES",
    "BusRecord",
    "EventRecord",
    "InstrumentRecord",
    "PointRecord",
    "ReadingRecord",
    "RunFile",
    "RunInfo",
    "RunStatus",
    "RunStore",
    "RunSummary",
    "SqliteRunStore",
    "open_store",
]
