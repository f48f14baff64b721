"""The throwaway PostgreSQL server of the test session (see :mod:`sweeprig.store.testserver`).

``SWEEPRIG_TEST_DB``: use that server (a URL of a database whose user may create databases)
instead of starting one. A server that cannot start FAILS the tests that need it, unless
``SWEEPRIG_SKIP_POSTGRES=1`` says to skip them (CI never sets it).
"""

from __future__ import annotations

import contextlib
import itertools
import os
import shutil
import tempfile
from collections.abc import Iterator
from pathlib import Path

import pytest

from sweeprig.store.testserver import ServerUnavailable, TestServer, start_server

_numbers = itertools.count(1)


class ExternalServer:
    """A server given by ``SWEEPRIG_TEST_DB``: databases are created beside the one named."""

    def __init__(self, url: str) -> None:
        self.base = url

    def url(self, dbname: str = "postgres") -> str:
        head, _sep, _db = self.base.split("?", 1)[0].rpartition("/")
        return f"{head}/{dbname}"

    def create_database(self, name: str) -> str:
        import psycopg

        with psycopg.connect(self.base, autocommit=True) as conn:
            conn.execute(f'CREATE DATABASE "{name}"')
        return self.url(name)


@pytest.fixture(scope="session")
def pg_server() -> Iterator[TestServer | ExternalServer]:
    """The session's PostgreSQL server."""
    external = os.environ.get("SWEEPRIG_TEST_DB")
    if external:
        yield ExternalServer(external)
        return
    folder = Path(tempfile.mkdtemp(prefix="sweeprig-pg-"))
    folder.chmod(0o711)  # the server runs as another user when the tests run as root
    try:
        server = start_server(folder / "cluster")
    except ServerUnavailable as exc:
        shutil.rmtree(folder, ignore_errors=True)
        if os.environ.get("SWEEPRIG_SKIP_POSTGRES") == "1":
            pytest.skip(f"PostgreSQL tests skipped (SWEEPRIG_SKIP_POSTGRES=1): {exc}")
        pytest.fail(f"cannot start the test PostgreSQL server: {exc}; install PostgreSQL "
                    "(Debian: apt-get install postgresql) or set SWEEPRIG_TEST_DB, or "
                    "SWEEPRIG_SKIP_POSTGRES=1 to skip these tests", pytrace=False)
    try:
        yield server
    finally:
        with contextlib.suppress(Exception):  # already stopped by a test: the folder goes
            server.stop("immediate")
        shutil.rmtree(folder, ignore_errors=True)


@pytest.fixture
def pg_url(pg_server: TestServer | ExternalServer) -> str:
    """A URL of a new, empty database of the session's server (one per test)."""
    return pg_server.create_database(f"sweeprig_test_{os.getpid()}_{next(_numbers)}")
