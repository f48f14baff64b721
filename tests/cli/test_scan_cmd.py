"""`sweeprig scan` against a raw SCPI socket on loopback (discovery replaced by a stub)."""

from __future__ import annotations

import socket
import threading

import pytest
import typer
from typer.testing import CliRunner

from sweeprig.cli import scan_cmd


class IdnServer:
    """Answers *IDN? on a loopback socket, one client at a time."""

    def __init__(self, idn: str) -> None:
        self.idn = idn
        self.received: list[str] = []
        self._sock = socket.socket()
        self._sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        self._sock.bind(("127.0.0.1", 0))
        self._sock.listen(2)
        self._sock.settimeout(0.1)
        self.resource = f"TCPIP0::127.0.0.1::{self._sock.getsockname()[1]}::SOCKET"
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._loop, daemon=True)
        self._thread.start()

    def _loop(self) -> None:
        while not self._stop.is_set():
            try:
                conn, _ = self._sock.accept()
            except OSError:
                continue
            with conn:
                conn.settimeout(2.0)
                buffer = b""
                while not self._stop.is_set():
                    try:
                        chunk = conn.recv(1024)
                    except OSError:
                        break
                    if not chunk:
                        break
                    buffer += chunk
                    while b"\n" in buffer:
                        line, buffer = buffer.split(b"\n", 1)
                        self.received.append(line.decode())
                        if line.strip() == b"*IDN?":
                            conn.sendall(self.idn.encode() + b"\n")

    def close(self) -> None:
        self._stop.set()
        self._thread.join(2)
        self._sock.close()


@pytest.fixture
def app(monkeypatch) -> typer.Typer:
    # never run real discovery in tests: it would probe buses and the network
    monkeypatch.setattr(scan_cmd.visa, "list_resources", lambda *a, **k: [])
    app = typer.Typer(add_completion=False)

    @app.callback()
    def _root() -> None:
        """test root"""

    scan_cmd.register(app)
    return app


def test_scan_identifies_and_suggests(app):
    server = IdnServer("Tarnwick Labs,TW-SA13,SA13-0001,1.0")
    try:
        result = CliRunner().invoke(app, ["scan", "-r", server.resource, "--timeout", "2"],
                                    env={"COLUMNS": "200"})
    finally:
        server.close()
    assert result.exit_code == 0, result.output
    assert "TW-SA13" in result.output and "scpi-analyzer" in result.output
    assert server.received == ["*IDN?"]  # nothing but *IDN? is sent


def test_scan_of_a_refused_connection_is_reported_and_exits_non_zero(app):
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    result = CliRunner().invoke(
        app, ["scan", "--no-discover", "-r", f"TCPIP0::127.0.0.1::{port}::SOCKET",
              "--timeout", "0.5"], env={"COLUMNS": "200"},
    )
    assert result.exit_code == 4, result.output  # InstrumentError: a failed scan
    assert "Traceback" not in result.output
    assert str(port) in result.output
    assert "1 of 1 resource(s) could not be identified" in result.output


def test_scan_with_one_answering_and_one_refused_exits_non_zero(app):
    server = IdnServer("Tarnwick Labs,TW-SA13,SA13-0001,1.0")
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    try:
        result = CliRunner().invoke(
            app, ["scan", "--no-discover", "-r", server.resource, "-r",
                  f"TCPIP0::127.0.0.1::{port}::SOCKET", "--timeout", "0.5"],
            env={"COLUMNS": "200"})
    finally:
        server.close()
    assert result.exit_code == 4, result.output
    assert "TW-SA13" in result.output and "1 of 2 resource(s)" in result.output


def test_a_failed_discovery_with_nothing_to_scan_exits_non_zero(app, monkeypatch):
    from sweeprig.errors import InstrumentError

    def broken(*_a, **_k):
        raise InstrumentError("the VISA library cannot be loaded", fix="install one")

    monkeypatch.setattr(scan_cmd.visa, "list_resources", broken)
    result = CliRunner().invoke(app, ["scan"])
    assert result.exit_code == 4, result.output
    assert "the VISA library cannot be loaded" in result.output


def test_scan_nothing(app):
    result = CliRunner().invoke(app, ["scan"])
    assert result.exit_code == 0 and "--resource" in result.output


def test_scan_no_identify_lists_only(app):
    result = CliRunner().invoke(app, ["scan", "--no-identify", "-r", "GPIB0::9::INSTR"],
                                env={"COLUMNS": "200"})
    assert result.exit_code == 0 and "GPIB0::9::INSTR" in result.output


def test_scan_help_mentions_sockets(app):
    result = CliRunner().invoke(app, ["scan", "--help"], env={"COLUMNS": "200"})
    assert result.exit_code == 0
    assert "--resource" in result.output and "SOCKET" in result.output
    assert "Example" in result.output
