"""The simulated server under abuse: descriptor exhaustion, too many clients, faults in its
own accept loop, and stop signals to ``sweeprig sim serve``. Everything through real sockets
and pyvisa (pyvisa-py) over loopback."""

from __future__ import annotations

import errno
import logging
import os
import queue
import random
import re
import signal
import socket
import subprocess
import sys
import threading
import time
from collections.abc import Iterator
from typing import Any

import pytest
import pyvisa

from sweeprig.clock import VirtualClock
from sweeprig.errors import InputError
from sweeprig.signals import STOP_SIGNALS
from sweeprig.sim.instruments import SignalSource
from sweeprig.sim.server import ServedBench, _RoleServer, serve
from tests.support import catches_sigterm

IDN_SG = "Tarnwick Labs,TW-SG6"


@pytest.fixture
def rm() -> Iterator[pyvisa.ResourceManager]:
    manager = pyvisa.ResourceManager("@py")
    yield manager
    manager.close()


def _open(rm: pyvisa.ResourceManager, resource: str) -> Any:
    return rm.open_resource(resource, read_termination="\n", write_termination="\n",
                            timeout=5000)


def _recv_all(sock: socket.socket) -> bytes:
    data = b""
    while chunk := sock.recv(4096):
        data += chunk
    return data


def _wait_until(predicate: Any, timeout_s: float = 10.0) -> None:
    deadline = time.monotonic() + timeout_s
    while not predicate():
        assert time.monotonic() < deadline, "condition not reached in time"
        time.sleep(0.01)


# -- the per-instrument connection cap ------------------------------------------------------


def test_one_client_too_many_is_refused_with_a_scpi_error_line(rm, caplog) -> None:
    caplog.set_level(logging.WARNING, logger="sweeprig.sim.server")
    with serve({"rf": SignalSource(VirtualClock())}, max_connections=2) as bench:
        clients = [_open(rm, bench.resources["rf"]) for _ in range(2)]
        assert all(c.query("*IDN?").startswith(IDN_SG) for c in clients)
        _wait_until(lambda: bench.connections()["rf"] == 2)
        for _ in range(3):
            with socket.create_connection(("127.0.0.1", bench.ports["rf"]), timeout=5) as extra:
                extra.sendall(b"*IDN?\n")  # a client that talks first still reads the refusal
                reply = _recv_all(extra)
            assert reply.startswith(b'-310,"System error; connection refused: 2 clients'), reply
            assert reply.endswith(b'"\n') and reply.count(b"\n") == 1
        assert bench.refused()["rf"] == 3
        # the clients already connected are served as before
        assert clients[0].query("*IDN?").startswith(IDN_SG)
        # a place freed is a place taken again
        clients.pop().close()
        _wait_until(lambda: bench.connections()["rf"] == 1)
        again = _open(rm, bench.resources["rf"])
        assert again.query("*IDN?").startswith(IDN_SG)
        for client in [*clients, again]:
            client.close()
    refusals = [r for r in caplog.records if "refusing connections" in r.getMessage()]
    assert len(refusals) == 1, "one warning per episode of refusals, not one per connection"
    assert any("taking connections again" in r.getMessage() for r in caplog.records)


def test_the_default_cap_is_16_and_a_bad_cap_is_an_input_error() -> None:
    clock = VirtualClock()
    with serve({"rf": SignalSource(clock)}) as bench:
        held = [socket.create_connection(("127.0.0.1", bench.ports["rf"]), timeout=5)
                for _ in range(16)]
        try:
            _wait_until(lambda: bench.connections()["rf"] == 16)
            with socket.create_connection(("127.0.0.1", bench.ports["rf"]), timeout=5) as extra:
                assert _recv_all(extra).startswith(b"-310,")
        finally:
            for sock in held:
                sock.close()
    for bad in (0, -1, 5000, 2.5, True):
        with pytest.raises(InputError, match="max_connections"):
            serve({"rf": SignalSource(clock)}, max_connections=bad)


# -- the accept loop never dies -------------------------------------------------------------


class _FailingListener:
    """The real listening socket, whose accept() first fails with the given errors."""

    def __init__(self, real: socket.socket, errors: list[int]) -> None:
        self._real = real
        self._errors = list(errors)

    def accept(self) -> tuple[socket.socket, Any]:
        if self._errors:
            code = self._errors.pop(0)
            time.sleep(0.002)
            raise OSError(code, os.strerror(code))
        return self._real.accept()

    def __getattr__(self, name: str) -> Any:
        return getattr(self._real, name)


def _server(bench: ServedBench, role: str) -> _RoleServer:
    return bench._servers[role]


def test_accept_errors_for_lack_of_resources_are_waited_out(rm, caplog) -> None:
    caplog.set_level(logging.WARNING, logger="sweeprig.sim.server")
    with serve({"rf": SignalSource(VirtualClock())}) as bench:
        server = _server(bench, "rf")
        errors = [errno.EMFILE, errno.ENFILE, errno.ENOBUFS, errno.ENOMEM, errno.EMFILE]
        server._listener = _FailingListener(server._listener, errors)  # type: ignore[assignment]
        _wait_until(lambda: not server._listener._errors)  # type: ignore[attr-defined]
        client = _open(rm, bench.resources["rf"])
        assert client.query("*IDN?").startswith(IDN_SG)
        client.close()
        assert server._acceptor.is_alive()
    messages = [r.getMessage() for r in caplog.records]
    assert sum("cannot accept a connection" in m for m in messages) == 1, messages
    assert "EMFILE" in next(m for m in messages if "cannot accept" in m)
    assert sum("accepting connections again" in m for m in messages) == 1, messages


def test_an_unexpected_error_in_the_accept_loop_is_logged_and_accepting_goes_on(
        rm, caplog, monkeypatch) -> None:
    caplog.set_level(logging.WARNING, logger="sweeprig.sim.server")
    with serve({"rf": SignalSource(VirtualClock())}) as bench:
        server = _server(bench, "rf")
        real = server._start_client
        failures = [ValueError("a fault in the server itself")]

        def start_client(conn: socket.socket) -> None:
            if failures:
                raise failures.pop()
            real(conn)

        monkeypatch.setattr(server, "_start_client", start_client)
        with socket.create_connection(("127.0.0.1", bench.ports["rf"]), timeout=5) as first:
            assert _recv_all(first) == b""  # that connection is closed, not left hanging
        _wait_until(lambda: any("error in the accept loop" in r.getMessage()
                                for r in caplog.records))
        client = _open(rm, bench.resources["rf"])
        assert client.query("*IDN?").startswith(IDN_SG)
        client.close()
        assert server._acceptor.is_alive()


# -- a whole served bench, out of descriptors ------------------------------------------------

_LIMITED_SERVE = """
import resource, sys
soft, hard = resource.getrlimit(resource.RLIMIT_NOFILE)
resource.setrlimit(resource.RLIMIT_NOFILE, (int(sys.argv[1]), hard))
sys.argv = ["sweeprig", "sim", "serve", "--max-connections", "1000"]
from sweeprig.cli.entry import main
main()
"""


class _Lines:
    """Lines of a pipe, read by a thread (so a full pipe never blocks the server)."""

    def __init__(self, stream: Any) -> None:
        self.lines: queue.Queue[str] = queue.Queue()
        self.seen: list[str] = []
        self._stream = stream
        self._thread = threading.Thread(target=self._pump, args=(stream,), daemon=True)
        self._thread.start()

    def _pump(self, stream: Any) -> None:
        for line in stream:
            self.lines.put(line.rstrip("\n"))

    def wait_for(self, pattern: str, timeout_s: float = 30.0) -> str:
        deadline = time.monotonic() + timeout_s
        while time.monotonic() < deadline:
            try:
                line = self.lines.get(timeout=0.2)
            except queue.Empty:
                continue
            self.seen.append(line)
            if re.search(pattern, line):
                return line
        raise AssertionError(f"no line matching {pattern!r}; seen: {self.seen}")

    def close(self) -> str:
        """After the process ended: everything it wrote; the pipe closed."""
        self._thread.join(timeout=10)
        self._stream.close()
        while not self.lines.empty():
            self.seen.append(self.lines.get())
        return "\n".join(self.seen)


@pytest.mark.skipif(sys.platform == "win32", reason="RLIMIT_NOFILE is POSIX")
def test_a_connection_flood_past_the_descriptor_limit_leaves_the_instruments_answering(rm):
    proc = subprocess.Popen(
        [sys.executable, "-c", _LIMITED_SERVE, "64"], stdout=subprocess.PIPE,
        stderr=subprocess.PIPE, text=True,
        env={**os.environ, "PYTHONUNBUFFERED": "1", "COLUMNS": "200"},
    )
    flood: list[socket.socket] = []
    out, err = _Lines(proc.stdout), _Lines(proc.stderr)
    try:
        sa = out.wait_for(r"^sa\s").split()[1]
        out.wait_for("^ready")
        port = int(sa.split("::")[2])
        for _ in range(150):  # more than the server has descriptors for
            flood.append(socket.create_connection(("127.0.0.1", port), timeout=5))
        err.wait_for(r"cannot accept a connection \(EMFILE")
        # while the server is out of descriptors, its other clients are still served
        for sock in flood[:5]:
            sock.sendall(b"*IDN?\n")
            assert sock.recv(200).startswith(b"Tarnwick Labs,TW-SA13")
        for sock in flood:
            sock.close()
        flood.clear()
        err.wait_for("accepting connections again")
        sa_client = _open(rm, sa)
        assert sa_client.query("*IDN?").startswith("Tarnwick Labs,TW-SA13")
        sa_client.close()
        proc.send_signal(signal.SIGINT)
        proc.wait(timeout=30)
    finally:
        for sock in flood:
            sock.close()
        if proc.poll() is None:
            proc.kill()
        proc.wait()
        out.close()
        stderr = err.close()
    assert proc.returncode == 0, stderr
    assert "Traceback" not in stderr
    assert stderr.count("cannot accept a connection") == 1, stderr


# -- stop signals to `sweeprig sim serve` ----------------------------------------------------


def _serve_trial(seed: int) -> str | None:
    rng = random.Random(seed)
    proc = subprocess.Popen(
        [sys.executable, "-m", "sweeprig", "sim", "serve"], stdout=subprocess.PIPE,
        stderr=subprocess.PIPE, text=True,
        env={**os.environ, "PYTHONUNBUFFERED": "1", "COLUMNS": "200"},
    )
    sent: list[str] = []
    out, errors = _Lines(proc.stdout), _Lines(proc.stderr)
    try:
        if rng.random() < 0.5:  # once it is ready, else at a random moment of its start-up
            out.wait_for("^ready")
            time.sleep(rng.uniform(0, 0.2))
        else:
            deadline = time.monotonic() + 30
            while not catches_sigterm(proc.pid) and proc.poll() is None:
                assert time.monotonic() < deadline
                time.sleep(0.001)
            time.sleep(rng.uniform(0, 1.5))
        for _ in range(rng.randint(1, 5)):
            if proc.poll() is not None:
                break
            kind = rng.choice(STOP_SIGNALS)
            proc.send_signal(kind)
            sent.append(kind.name)
            time.sleep(rng.uniform(0, 0.05))
        proc.wait(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
        proc.wait()
        stdout = out.close()
        err = errors.close()
    stopped = "simulated bench stopped" in stdout or "sweeprig: stopped by" in err
    if "Traceback" in err + stdout or proc.returncode < 0 or (sent and not stopped):
        return f"seed {seed}, sent {sent}: exit {proc.returncode}, stderr {err[-500:]!r}"
    return None




@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="reads /proc for the handlers")
def test_sim_serve_stops_cleanly_on_any_number_of_signals() -> None:
    results: list[str | None] = []
    threads = [threading.Thread(target=lambda s=seed: results.append(_serve_trial(s)))
               for seed in range(6)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    failures = [r for r in results if r]
    assert not failures, "\n".join(failures)
