"""The run store: runs, instruments, points, readings, events and the bus log.

``RunStore`` is the interface; ``SqliteRunStore`` (:mod:`sweeprig.store.sqlite`) the
implementation; ``open_store(path)`` opens one. ``DEFAULT_STORE_PATH`` is
``results/sweeprig.sqlite`` relative to the current folder.

The names below are loaded on first use: a command that only names the default store path
(:mod:`sweeprig.store.paths`) loads neither the interface nor the SQLite implementation.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from sweeprig.lazy import lazy_names

if TYPE_CHECKING:
    from sweeprig.store.base import (
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
    from sweeprig.store.paths import DEFAULT_STORE_PATH
    from sweeprig.store.sqlite import SqliteRunStore, open_store

_BASE = ("RUN_STATUSES", "BusRecord", "EventRecord", "InstrumentRecord", "PointRecord",
         "ReadingRecord", "RunFile", "RunInfo", "RunStatus", "RunStore", "RunSummary")

__getattr__ = lazy_names(
    __name__,
    {**{name: "sweeprig.store.base" for name in _BASE},
     "DEFAULT_STORE_PATH": "sweeprig.store.paths",
     "SqliteRunStore": "sweeprig.store.sqlite", "open_store": "sweeprig.store.sqlite"},
    globals(),
)

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
