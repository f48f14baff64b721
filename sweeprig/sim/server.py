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

Sturdiness: each instrument takes at most ``max_connections`` clients at once (16 by
default); one more is refused with the one-line SCPI error ``-310,"System error; ..."``
and closed. When the process runs out of descriptors or memory (``EMFILE``, ``ENFILE``,
``ENOBUFS``, ``ENOMEM``) the accept loop waits (5 ms, doubling to 0.5 s), logs one warning
per episode and accepts again once descriptors are free; no error ends it.
"""

from __future__ import annotations

import contextlib
import errno
import ipaddress
import logging
import socket
import threading
import time
from collections import deque
from collections.abc import Mapping
from types import TracebackType

from sweeprig.errors import InputError
from sweeprig.sim.faults import FaultInjector, FaultPlan, garble
from sweeprig.sim.names import DEFAULT_MAX_CONNECTIONS, MAX_CONNECTIONS_LIMIT
from sweeprig.sim.scpi.instrument import ScpiInstrument

log = logging.getLogger(__name__)

#: Longest accepted program message, bytes; a longer line is discarded with −102.
MAX_LINE_BYTES = 1 << 20
_ACCEPT_POLL_S = 0.1
#: Pending connections the kernel queues for accept(). A short queue is what limited the
#: server to about 18 new connections a second: a burst overflowed it, and a connection
#: whose SYN is dropped retries only after 1 s.
LISTEN_BACKLOG = socket.SOMAXCONN
#: accept() errors that mean "out of descriptors or memory for now": wait and try again.
_EXHAUSTED = frozenset(
    code for code in (getattr(errno, n, None) for n in ("EMFILE", "ENFILE", "ENOBUFS", "ENOMEM"))
    if code is not None
)
#: accept() errors caused by one client (gone before it was accepted): just go on.
_TRANSIENT = frozenset(
    code for code in (getattr(errno, n, None) for n in ("ECONNABORTED", "EPROTO", "EINTR",
                                                        "EAGAIN", "EWOULDBLOCK"))
    if code is not None
)
_BACKOFF_FIRST_S = 0.005
_BACKOFF_CAP_S = 0.5
#: How long a refused connection stays open (so the client can read why) before it is closed.
_REFUSED_LINGER_S = 0.5
_REFUSED_KEPT = 64
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
                 injector: FaultInjector, max_connections: int = DEFAULT_MAX_CONNECTIONS) -> None:
        self.role = role
        self.instrument = instrument
        self.faults = injector.for_role(role)
        self.max_connections = max_connections
        self.refused = 0  # connections refused because the instrument had max_connections
        self._closing = threading.Event()
        self._clients: set[socket.socket] = set()
        self._threads: list[threading.Thread] = []
        self._lock = threading.Lock()
        self._refused: deque[tuple[float, socket.socket]] = deque()
        self._backoff_s = 0.0  # > 0 while the process is out of descriptors (an episode)
        self._at_cap = False  # inside an episode of refusals
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
        self._listener.listen(LISTEN_BACKLOG)
        self._listener.settimeout(_ACCEPT_POLL_S)
        self.port: int = self._listener.getsockname()[1]
        self._acceptor = threading.Thread(
            target=self._accept_loop, name=f"sim-{role}-accept", daemon=True
        )
        self._acceptor.start()

    def _accept_loop(self) -> None:
        """Accept until closed; no error ends this thread (it is logged, then waited out)."""
        while not self._closing.is_set():
            try:
                self._accept_one()
            except Exception:  # a bug or an unforeseen OS error: log it, never stop accepting
                log.exception("simulated %s: error in the accept loop (still accepting)",
                              self.role)
                self._closing.wait(_BACKOFF_CAP_S)
        self._close_refused(everything=True)

    def _accept_one(self) -> None:
        self._close_refused()
        try:
            conn, _ = self._listener.accept()
        except TimeoutError:
            return
        except OSError as exc:
            if self._closing.is_set() or exc.errno in _TRANSIENT:
                return  # closing, or a client gone before it was accepted
            self._out_of_resources(exc)
            return
        if self._backoff_s:
            log.warning("simulated %s: accepting connections again", self.role)
            self._backoff_s = 0.0
        try:
            self._start_client(conn)
        except BaseException:
            with contextlib.suppress(OSError):
                conn.close()
            raise

    def _out_of_resources(self, exc: BaseException) -> None:
        """Wait before the next accept(): 5 ms, doubling up to 0.5 s; warn once per episode."""
        if not self._backoff_s:
            code = getattr(exc, "errno", None)
            name = errno.errorcode.get(code, "") if isinstance(code, int) else ""
            why = f"{name}: {getattr(exc, 'strerror', None) or exc}" if name else str(exc)
            log.warning(
                "simulated %s: cannot accept a connection (%s); retrying with a back-off "
                "until %s", self.role, why,
                "descriptors are free" if code in _EXHAUSTED else "the error clears")
            self._backoff_s = _BACKOFF_FIRST_S
        else:
            self._backoff_s = min(2 * self._backoff_s, _BACKOFF_CAP_S)
        self._closing.wait(self._backoff_s)

    def _start_client(self, conn: socket.socket) -> None:
        try:
            conn.settimeout(None)
            conn.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
        except OSError:  # the client is already gone (reset right after connecting)
            conn.close()
            return
        with self._lock:
            if self._closing.is_set():
                conn.close()
                return
            if len(self._clients) >= self.max_connections:
                self._refuse(conn)
                return
            if self._at_cap:
                self._at_cap = False
                log.warning("simulated %s: taking connections again", self.role)
            self._clients.add(conn)
            thread = threading.Thread(
                target=self._serve_client, args=(conn,), name=f"sim-{self.role}-client",
                daemon=True,
            )
            if len(self._threads) > 2 * len(self._clients) + 16:  # forget ended threads
                self._threads = [t for t in self._threads if t.is_alive()]
            self._threads.append(thread)
        try:
            thread.start()
        except RuntimeError as exc:  # no thread can be started: out of memory or threads
            with self._lock:
                self._clients.discard(conn)
            conn.close()
            self._out_of_resources(exc)

    def _refuse(self, conn: socket.socket) -> None:
        """Tell one client too many why, then close it shortly after (called holding the lock).

        The connection stays open for a moment so that the client can read the line: closing
        at once, with its first command unread, would reset the connection instead.
        """
        self.refused += 1
        if not self._at_cap:
            self._at_cap = True
            log.warning("simulated %s: refusing connections: %d clients are connected, the "
                        "most this instrument takes", self.role, self.max_connections)
        message = (f'-310,"System error; connection refused: {self.max_connections} '
                   f'clients already connected to this instrument"\n')
        conn.setblocking(False)
        with contextlib.suppress(OSError):
            conn.send(message.encode("ascii"))
            conn.shutdown(socket.SHUT_WR)
        self._refused.append((time.monotonic() + _REFUSED_LINGER_S, conn))
        if len(self._refused) > _REFUSED_KEPT:
            _drain_and_close(self._refused.popleft()[1])

    def _close_refused(self, *, everything: bool = False) -> None:
        now = time.monotonic()
        while self._refused and (everything or self._refused[0][0] <= now):
            _drain_and_close(self._refused.popleft()[1])

    def _serve_client(self, conn: socket.socket) -> None:
        outbox = _Outbox(conn)
        try:
            self._serve_lines(conn, outbox)
        finally:
            outbox.close()

    def _serve_lines(self, conn: socket.socket, outbox: _Outbox) -> None:
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
                    if not self._serve_line(conn, line, outbox):
                        return
                if len(buffer) > MAX_LINE_BYTES:
                    buffer, discarding = b"", True
                    self.instrument.push_error(-102, "program message too long")
        finally:
            with self._lock:
                self._clients.discard(conn)
            with contextlib.suppress(OSError):
                conn.close()

    def _serve_line(self, conn: socket.socket, line: bytes, outbox: _Outbox) -> bool:
        """Handle one message; False when the connection must end."""
        message = line.rstrip(b"\r").decode("latin-1")
        if not message.strip():
            return True
        if not outbox.flush():  # a late reply goes out before anything later is handled
            return False
        if self.faults.count_if_quiet():  # no fault planned: run it, answer it, as it is
            reply = self.instrument.handle(message)
            if reply is None:
                return True
            return outbox.send((reply if isinstance(reply, bytes)
                                else reply.encode("latin-1", "replace")) + b"\n")
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
        if action.late_s is not None:
            outbox.hold(data + b"\n", action.late_s)
            return True
        return outbox.send(data + b"\n")

    def connection_count(self) -> int:
        """Clients connected now."""
        with self._lock:
            return len(self._clients)

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


class _Outbox:
    """The replies of one connection, in order: a reply held back by a ``late`` fault is sent
    when its delay ends or before anything later, whichever comes first."""

    def __init__(self, conn: socket.socket) -> None:
        self._conn = conn
        self._lock = threading.Lock()
        self._held: bytes | None = None
        self._timer: threading.Timer | None = None
        self._closed = False

    def hold(self, data: bytes, delay_s: float) -> None:
        with self._lock:
            self._held = data
            self._timer = threading.Timer(delay_s, self.flush)
            self._timer.daemon = True
            self._timer.start()

    def flush(self) -> bool:
        """Send a held reply now (if any); False when the connection is gone."""
        if self._held is None and not self._closed:
            # nothing held: only the connection's own thread holds a reply (:meth:`hold`),
            # and it is the one asking, so no lock is needed to know
            return True
        with self._lock:
            data, self._held = self._held, None
            if self._timer is not None:
                self._timer.cancel()
                self._timer = None
            if data is None or self._closed:
                return not self._closed
            return self._sendall(data)

    def send(self, data: bytes) -> bool:
        with self._lock:
            return self._sendall(data)

    def _sendall(self, data: bytes) -> bool:
        try:
            self._conn.sendall(data)
        except OSError:
            return False
        return True

    def close(self) -> None:
        with self._lock:
            self._closed = True
            self._held = None
            if self._timer is not None:
                self._timer.cancel()
                self._timer = None


def _drain_and_close(conn: socket.socket) -> None:
    """Read what a refused client sent (so the close is orderly, not a reset), then close."""
    with contextlib.suppress(OSError):
        for _ in range(16):
            if not conn.recv(65536):
                break
    with contextlib.suppress(OSError):
        conn.close()


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

    def connections(self) -> dict[str, int]:
        """Role → clients connected now."""
        return {role: s.connection_count() for role, s in self._servers.items()}

    def refused(self) -> dict[str, int]:
        """Role → connections refused so far because the instrument had its maximum."""
        return {role: s.refused for role, s in self._servers.items()}

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
    max_connections: int = DEFAULT_MAX_CONNECTIONS,
) -> ServedBench:
    """Serve each instrument on its own raw SCPI socket; returns the running bench.

    ``ports``: role → port (missing roles, or 0, get an ephemeral port). ``faults``: the
    planned faults (roles must be among ``instruments``). ``allow_remote``: required to
    bind a non-loopback ``host``. ``max_connections``: clients each instrument serves at
    once (1 to 4096); one more is refused with a ``-310`` line.
    """
    if isinstance(max_connections, bool) or not isinstance(max_connections, int) \
            or not 1 <= max_connections <= MAX_CONNECTIONS_LIMIT:
        raise InputError(
            f"max_connections {max_connections!r} is not a whole number from 1 to "
            f"{MAX_CONNECTIONS_LIMIT}",
            where="simulated bench", fix=f"give a number such as {DEFAULT_MAX_CONNECTIONS}")
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
            servers[role] = _RoleServer(role, instrument, host, ports.get(role, 0), injector,
                                        max_connections)
    except BaseException:
        for server in servers.values():
            server.close()
        raise
    return ServedBench(servers, host, injector)
