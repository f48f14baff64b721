"""A tiny threaded SCPI responder on loopback, for the transport tests."""

from __future__ import annotations

import socket
import threading
from collections.abc import Callable, Iterator

import pytest

Responder = Callable[[str], "bytes | str | Ellipsis | None"]


class LoopbackServer:
    """Serves one TCP port on 127.0.0.1; each received line goes to ``respond``.

    ``respond`` returns text (sent with ``\\n``), bytes (sent as is, then ``\\n``), ``None``
    (no reply) or ``...`` (drop the connection).
    """

    def __init__(self, respond: Responder) -> None:
        self.respond = respond
        self.received: list[str] = []
        self._listener = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
        self._listener.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        self._listener.bind(("127.0.0.1", 0))
        self._listener.listen(4)
        self._listener.settimeout(0.1)
        self.port = self._listener.getsockname()[1]
        self.resource = f"TCPIP0::127.0.0.1::{self.port}::SOCKET"
        self._stop = threading.Event()
        self._conns: list[socket.socket] = []
        self._threads: list[threading.Thread] = []
        self._accept = threading.Thread(target=self._accept_loop, daemon=True)
        self._accept.start()

    def _accept_loop(self) -> None:
        while not self._stop.is_set():
            try:
                conn, _ = self._listener.accept()
            except (TimeoutError, OSError):
                continue
            self._conns.append(conn)
            thread = threading.Thread(target=self._serve, args=(conn,), daemon=True)
            self._threads.append(thread)
            thread.start()

    def _serve(self, conn: socket.socket) -> None:
        buffer = b""
        conn.settimeout(0.1)
        with conn:
            while not self._stop.is_set():
                try:
                    chunk = conn.recv(4096)
                except TimeoutError:
                    continue
                except OSError:
                    return
                if not chunk:
                    return
                buffer += chunk
                while b"\n" in buffer:
                    line, buffer = buffer.split(b"\n", 1)
                    text = line.decode("ascii").strip()
                    self.received.append(text)
                    reply = self.respond(text)
                    if reply is Ellipsis:
                        conn.shutdown(socket.SHUT_RDWR)
                        return
                    if reply is None:
                        continue
                    data = reply if isinstance(reply, bytes) else reply.encode("ascii")
                    conn.sendall(data + b"\n")

    def close(self) -> None:
        self._stop.set()
        self._accept.join(2)
        for thread in self._threads:
            thread.join(2)
        self._listener.close()


@pytest.fixture
def loopback() -> Iterator[Callable[[Responder], LoopbackServer]]:
    """Factory: ``loopback(respond)`` starts a server; all are closed after the test."""
    servers: list[LoopbackServer] = []

    def start(respond: Responder) -> LoopbackServer:
        server = LoopbackServer(respond)
        servers.append(server)
        return server

    yield start
    for server in servers:
        server.close()
