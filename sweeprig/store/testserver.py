"""A throwaway PostgreSQL server for tests and trials: a cluster in a temporary folder,
listening on loopback only, run by an unprivileged user.

``initdb`` then ``pg_ctl start`` (the distribution's binaries, e.g. Debian's package
``postgresql``: ``/usr/lib/postgresql/<version>/bin``). PostgreSQL refuses to run as root, so
when this process is root the server runs as the ``postgres`` system user (created by the
distribution's package) or else ``nobody``. Trust authentication is safe only because the
server listens on 127.0.0.1 of this machine and on a socket in its own folder, and is thrown
away after the tests (never use these settings for a lab database).

``python -m sweeprig.store.testserver FOLDER`` starts one and prints its URL (for the README's
trial); ``python -m sweeprig.store.testserver FOLDER --stop`` stops it.
"""

from __future__ import annotations

import glob
import os
import pwd
import shutil
import socket
import subprocess
import sys
from dataclasses import dataclass
from pathlib import Path

SUPERUSER = "sweeprig"
"""The cluster's superuser (a role inside the test server; no password)."""


class ServerUnavailable(RuntimeError):
    """The test server cannot be started here (no binaries, or they failed)."""


def find_binary(name: str) -> str | None:
    """``name`` (``initdb``, ``pg_ctl``) on PATH or in the distribution's folders (newest
    version first)."""
    found = shutil.which(name)
    if found:
        return found
    candidates = sorted(glob.glob(f"/usr/lib/postgresql/*/bin/{name}"),
                        key=lambda p: [int(x) for x in p.split("/")[4].split(".")
                                       if x.isdigit()], reverse=True)
    return candidates[0] if candidates else None


def free_port() -> int:
    """A TCP port free on loopback now."""
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return int(probe.getsockname()[1])


def _server_user() -> str | None:
    """The user to run the server as (None: this process's own user)."""
    if os.geteuid() != 0:
        return None
    for name in ("postgres", "nobody"):
        try:
            pwd.getpwnam(name)
            return name
        except KeyError:
            continue
    raise ServerUnavailable("running as root and no unprivileged user (postgres, nobody) "
                            "to run PostgreSQL as")


def _as_user(user: str | None, argv: list[str]) -> list[str]:
    if user is None:
        return argv
    runuser = shutil.which("runuser")
    if runuser:
        return [runuser, "-u", user, "--", *argv]
    return ["su", user, "-s", "/bin/sh", "-c", " ".join(argv)]


@dataclass
class TestServer:
    """A running throwaway server. ``url(dbname)`` is the URL of one of its databases."""

    folder: Path
    port: int
    user: str | None
    pg_ctl: str
    durable: bool = False
    """``fsync`` on (the server's default): for throughput figures a lab would see."""

    __test__ = False  # not a pytest test class

    def url(self, dbname: str = "postgres") -> str:
        return f"postgresql://{SUPERUSER}@127.0.0.1:{self.port}/{dbname}"

    def _ctl(self, *args: str, timeout_s: float = 60) -> None:
        argv = _as_user(self.user, [self.pg_ctl, "-D", str(self.folder / "data"), *args])
        subprocess.run(argv, check=True, capture_output=True, timeout=timeout_s)

    def start(self) -> None:
        options = f"-h 127.0.0.1 -p {self.port} -k {self.folder} -c max_connections=200"
        if not self.durable:  # a throwaway server: nothing to keep across a power cut
            options += " -c fsync=off"
        self._ctl("-o", options, "-l", str(self.folder / "server.log"), "-w", "start")

    def stop(self, mode: str = "fast") -> None:
        self._ctl("-m", mode, "-w", "stop")

    def restart(self) -> None:
        """Stop (immediately: connections cut as by a crash) and start again."""
        self.stop("immediate")
        self.start()

    def create_database(self, name: str) -> str:
        """Create database ``name``; return its URL."""
        import psycopg

        with psycopg.connect(self.url(), autocommit=True) as conn:
            conn.execute(f'CREATE DATABASE "{name}"')  # name from the tests, not user input
        return self.url(name)


def start_server(folder: Path, *, durable: bool = False) -> TestServer:
    """Make a cluster in ``folder`` and start it on a free loopback port."""
    initdb, pg_ctl = find_binary("initdb"), find_binary("pg_ctl")
    if not initdb or not pg_ctl:
        raise ServerUnavailable("PostgreSQL's initdb/pg_ctl are not installed (Debian: "
                                "apt-get install postgresql)")
    user = _server_user()
    folder.mkdir(parents=True, exist_ok=True)
    if user is not None:
        entry = pwd.getpwnam(user)
        os.chown(folder, entry.pw_uid, entry.pw_gid)  # its parents must let that user in
    argv = _as_user(user, [initdb, "-D", str(folder / "data"), "-U", SUPERUSER,
                           "--auth=trust", "-E", "UTF8", "--no-sync"])
    try:
        subprocess.run(argv, check=True, capture_output=True, timeout=120)
    except (subprocess.CalledProcessError, OSError, subprocess.TimeoutExpired) as exc:
        detail = getattr(exc, "stderr", b"") or b""
        raise ServerUnavailable(f"initdb failed: {exc}: {detail.decode(errors='replace')}") \
            from None
    server = TestServer(folder, free_port(), user, pg_ctl, durable)
    try:
        server.start()
    except (subprocess.CalledProcessError, subprocess.TimeoutExpired) as exc:
        log = folder / "server.log"
        tail = log.read_text(errors="replace")[-2000:] if log.exists() else ""
        raise ServerUnavailable(f"pg_ctl start failed: {exc}\n{tail}") from None
    (folder / "port").write_text(str(server.port))
    return server


def main(argv: list[str]) -> int:
    """``FOLDER`` [``--stop``]: start a server there and print its URL, or stop it."""
    if not argv:
        print("usage: python -m sweeprig.store.testserver FOLDER [--stop]", file=sys.stderr)
        return 2
    folder = Path(argv[0]).resolve()
    if "--stop" in argv[1:]:
        port = int((folder / "port").read_text())
        TestServer(folder, port, _server_user(), find_binary("pg_ctl") or "pg_ctl").stop()
        return 0
    try:
        server = start_server(folder)
    except ServerUnavailable as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 1
    print(server.url())
    return 0


if __name__ == "__main__":
    raise SystemExit(main(sys.argv[1:]))
