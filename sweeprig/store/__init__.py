"""The run store: runs, instruments, points, readings, events and the bus log.

``RunStore`` is the interface; ``SqliteRunStore`` (:mod:`sweeprig.store.sqlite`) the
implementation; ``open_store(path)`` opens one. ``DEFAULT_STORE_PATH`` is
``results/sweeprig.sqlite`` relative to the current folder.
"""

from typing import TYPE_CHECKING, Any

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

if TYPE_CHECKING:
    from sweeprig.store.sqlite import SqliteRunStore, open_store


def __getattr__(name: str) -> Any:
    """``SqliteRunStore`` and ``open_store`` on first use: a command that only names the
    default store path does not load the SQLite implementation (start-up, issue 14)."""
    if name in ("SqliteRunStore", "open_store"):
        from sweeprig.store import sqlite

        return getattr(sqlite, name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")

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
