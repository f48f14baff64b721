"""Raw SCPI sockets for simulated instruments: one TCP port per role, on loopback.

Protocol (as a LAN instrument's raw socket): each received line (``\\n``-terminated, a
trailing ``\\r`` is ignored) is one program message; if it holds queries, one reply line is
sent (several query replies joined by ``;``, terminated by ``\\n``). A reply given as bytes
(an IEEE 488.2 definite-length block) is sent untouched, followed by ``\\n``. Several
clients may talk to one instrument at once (one thread each; the instrument serialises).

Usage::

    with serve({"rf": source, "sa": analyzer}) as bench:
        rm = pyvisa.ResourceManager("@py")
        sa = rm.open_resource(bench.resources["sa"], read_termination="\\n",
                              write_termination="\\n")

Ports are ephemeral (chosen by the OS) unless given. Binding anything but a loopback
address must be asked for with ``allow_remote=True`` and is logged as a warning: the
simulator has no authentication.
"""

from __future__ import annotations

import contextlib
import ipaddress
import logging
import socket
import threading
from collections.abc import Mapping
from types import TracebackType

from sweeprig.errors import InputError
from sweeprig.sim.faults import FaultInjector, FaultPlan, garble
from sweeprig.sim.scpi.instrument import ScpiInstrument

log = logging.getLogger(__name__)

#: Longest accepted program message, bytes; a longer line is discarded with −102.
MAX_LINE_BYTES = 1 << 20
_ACCEPT_POLL_S = 0.1
_QUICKACK: int | None = getattr(socket, "TCP_QUICKACK", None)  # Linux only


def resource_name(host: str, port: int) -> str:
    """VISA resource string of a raw socket: ``TCPIP0::<host>::<port>::SOCKET``."""
    return f"TCPIP0::{host}::{port}::SOCKET"


def is_loopback(host: str) -> bool:
    """True for "localhost" and loopback addresses (127.0.0.0/8, ::1)."""
    if host == "localhost":
        return True
    try:
        return ipaddress.ip_address(host).is_loopback
    except ValueError:
        return False


class _RoleServer:
    """The listening socket of one role and its client threads."""

    def __init__(self, role: str, instrument: ScpiInstrument, host: str, port: int,
                 injector: FaultInjector) -> None:
        self.role = role
        self.instrument = instrument
        self.faults = injector.for_role(role)
        self._closing = threading.Event()
        self._clients: set[socket.socket] = set()
        self._threads: list[threading.Thread] = []
        self._lock = threading.Lock()
        self._listener = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
        self._listener.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        try:
            self._listener.bind((host, port))
        except OSError as exc:
            self._listener.close()
            raise InputError(
                f"cannot listen on {host}:{port} ({exc.strerror or exc})",
                where=f"simulated bench, role '{role}'",
                fix="choose a free port, or port 0 to let the system pick one",
            ) from exc
        self._listener.listen(16)
        self._listener.settimeout(_ACCEPT_POLL_S)
        self.port: int = self._listener.getsockname()[1]
        self._acceptor = threading.Thread(
            target=self._accept_loop, name=f"sim-{role}-accept", daemon=True
        )
        self._acceptor.start()

    def _accept_loop(self) -> None:
        while not self._closing.is_set():
            try:
                conn, _ = self._listener.accept()
            except TimeoutError:
                continue
            except OSError:
                break
            conn.settimeout(None)
            conn.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
            with self._lock:
                if self._closing.is_set():
                    conn.close()
                    break
                self._clients.add(conn)
                thread = threading.Thread(
                    target=self._serve_client, args=(conn,), name=f"sim-{self.role}-client",
                    daemon=True,
                )
                self._threads = [t for t in self._threads if t.is_alive()]
                self._threads.append(thread)
            thread.start()

    def _serve_client(self, conn: socket.socket) -> None:
        buffer = b""
        discarding = False  # inside an overlong message: drop bytes up to its terminator
        try:
            while not self._closing.is_set():
                try:
                    chunk = conn.recv(65536)
                except OSError:
                    break
                if not chunk:
                    break
                if _QUICKACK is not None:  # ack at once: a client's Nagle waits for it
                    with contextlib.suppress(OSError):
                        conn.setsockopt(socket.IPPROTO_TCP, _QUICKACK, 1)
                buffer += chunk
                if discarding:
                    if b"\n" not in buffer:
                        buffer = b""
                        continue
                    buffer = buffer.split(b"\n", 1)[1]
                    discarding = False
                while b"\n" in buffer:
                    line, buffer = buffer.split(b"\n", 1)
                    if not self._serve_line(conn, line):
                        return
                if len(buffer) > MAX_LINE_BYTES:
                    buffer, discarding = b"", True
                    self.instrument.push_error(-102, "program message too long")
        finally:
            with self._lock:
                self._clients.discard(conn)
            with contextlib.suppress(OSError):
                conn.close()

    def _serve_line(self, conn: socket.socket, line: bytes) -> bool:
        """Handle one message; False when the connection must end."""
        message = line.rstrip(b"\r").decode("latin-1")
        if not message.strip():
            return True
        action = self.faults.on_message(message, self.instrument.clock.now(), self.instrument)
        if action.drop:
            with contextlib.suppress(OSError):
                conn.shutdown(socket.SHUT_RDWR)
            return False
        if action.ignore:  # swallowed or frozen: not run, not answered, connection kept
            return True
        reply = self.instrument.handle(message)
        if reply is None:
            return True
        data = reply if isinstance(reply, bytes) else reply.encode("latin-1", "replace")
        action = self.faults.on_reply(message, self.instrument.clock.now())
        if action.swallow_reply:
            return True
        if action.garble_reply:
            data = garble(data, self.faults.command_count)
        try:
            conn.sendall(data + b"\n")
        except OSError:
            return False
        return True

    def close(self) -> None:
        self._closing.set()
        with contextlib.suppress(OSError):
            self._listener.shutdown(socket.SHUT_RDWR)  # wakes accept() at once on Linux
        self._acceptor.join(timeout=2.0)
        with contextlib.suppress(OSError):
            self._listener.close()
        with self._lock:
            clients = list(self._clients)
            threads = list(self._threads)
        for conn in clients:
            with contextlib.suppress(OSError):
                conn.shutdown(socket.SHUT_RDWR)
        for thread in threads:
            thread.join(timeout=2.0)


class ServedBench:
    """Running servers of a simulated bench; close it (or use ``with``) to stop them.

    ``resources``: role → VISA resource string; ``ports``: role → TCP port;
    ``instruments``: role → instrument; ``faults``: the :class:`FaultInjector` (its ``log``
    records every injected fault).
    """

    def __init__(self, servers: dict[str, _RoleServer], host: str,
                 injector: FaultInjector) -> None:
        self._servers = servers
        self.host = host
        self.faults = injector
        self.ports: dict[str, int] = {role: s.port for role, s in servers.items()}
        self.resources: dict[str, str] = {
            role: resource_name(host, port) for role, port in self.ports.items()
        }
        self.instruments: dict[str, ScpiInstrument] = {
            role: s.instrument for role, s in servers.items()
        }
        self._closed = False

    def close(self) -> None:
        """Stop listening, end every client connection and join the threads."""
        if self._closed:
            return
        self._closed = True
        for server in self._servers.values():
            server.close()

    def __enter__(self) -> ServedBench:
        return self

    def __exit__(self, exc_type: type[BaseException] | None, exc: BaseException | None,
                 tb: TracebackType | None) -> None:
        self.close()


def serve(
    instruments: Mapping[str, ScpiInstrument],
    host: str = "127.0.0.1",
    ports: Mapping[str, int] | None = None,
    faults: FaultPlan | None = None,
    *,
    allow_remote: bool = False,
) -> ServedBench:
    """Serve each instrument on its own raw SCPI socket; returns the running bench.

    ``ports``: role → port (missing roles, or 0, get an ephemeral port). ``faults``: the
    planned faults (roles must be among ``instruments``). ``allow_remote``: required to
    bind a non-loopback ``host``.
    """
    if not is_loopback(host):
        if not allow_remote:
            raise InputError(
                f"host {host!r} is not a loopback address",
                where="simulated bench",
                fix="serve on 127.0.0.1, or pass allow_remote=True to expose the simulator "
                "(it has no authentication) to the network",
            )
        log.warning("simulated instruments listen on %s: reachable from the network", host)
    ports = dict(ports or {})
    unknown = sorted(set(ports) - set(instruments))
    if unknown:
        raise InputError(f"ports given for unknown roles {unknown}", where="simulated bench",
                         fix=f"use roles among {sorted(instruments)}")
    injector = FaultInjector(faults)
    if faults is not None:
        stray = sorted({f.role for f in faults.faults} - set(instruments))
        if stray:
            raise InputError(f"faults planned for unknown roles {stray}",
                             where="fault plan", fix=f"use roles among {sorted(instruments)}")
    servers: dict[str, _RoleServer] = {}
    try:
        for role, instrument in instruments.items():
            servers[role] = _RoleServer(role, instrument, host, ports.get(role, 0), injector)
    except BaseException:
        for server in servers.values():
            server.close()
        raise
    return ServedBench(servers, host, injector)
