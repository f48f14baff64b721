"""One way to open a run store from what the user gave: an SQLite file path, or a PostgreSQL
database URL (``--db`` or the ``SWEEPRIG_DB`` environment variable).

A URL is kept as a string everywhere (a ``Path`` would fold its ``//``); :func:`store_label`
is how it may be shown (password removed).
"""

from __future__ import annotations

import os
from pathlib import Path

from sweeprig.store.base import RunStore
from sweeprig.store.postgres import is_database_url, redact_url

DB_ENV = "SWEEPRIG_DB"
"""Environment variable naming the lab database URL when ``--db`` is not given."""

StoreTarget = Path | str
"""An SQLite file (``Path``) or a database URL (``str``)."""


def store_target(target: str | Path) -> StoreTarget:
    """``target`` as a store target: a URL stays a string, anything else is a path."""
    if isinstance(target, str) and is_database_url(target):
        return target
    return Path(target)


def lab_database(db: str | None) -> str | None:
    """The lab database URL: ``db`` (the ``--db`` option) or else ``SWEEPRIG_DB``."""
    url = db or os.environ.get(DB_ENV) or None
    return url


def store_label(target: StoreTarget) -> str:
    """How messages name a store: the file path, or the URL without its password."""
    return redact_url(target) if isinstance(target, str) else str(target)


def open_run_store(target: StoreTarget, *, create: bool = True, durable: bool = True) -> RunStore:
    """Open the run store at ``target``: :class:`~sweeprig.store.sqlite.SqliteRunStore` for a
    file, :class:`~sweeprig.store.postgres.PostgresRunStore` for a ``postgresql://`` URL
    (``durable`` is the server's business there)."""
    if isinstance(target, str) and is_database_url(target):
        from sweeprig.store.postgres import PostgresRunStore

        return PostgresRunStore(target, create=create)
    from sweeprig.store.sqlite import SqliteRunStore

    return SqliteRunStore(target, create=create, durable=durable)
