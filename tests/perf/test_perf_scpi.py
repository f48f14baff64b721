"""Benchmark: simulator overhead per query over pyvisa, against a bare socket echo server.

Both servers are driven by the same pyvisa (pyvisa-py) client over loopback in the same run,
so client, kernel and socket costs cancel; the difference is what the SCPI core adds
(parsing, tree lookup, locking, formatting, the server loop). Floor: ≤ 0.3 ms per query.
"""

from __future__ import annotations

import contextlib
import socket
import statistics
import threading
import time
from collections.abc import Callable, Iterator

import pytest
import pyvisa

from sweeprig.clock import VirtualClock
from sweeprig.sim.scpi import Command, Identity, ScpiInstrument, Setting, format_number
from sweeprig.sim.server import resource_name, serve

QUERY = "CALC:MARK1:Y?"
ROUNDS = 5
QUERIES_PER_ROUND = 1000
FLOOR_MS = 0.3


class MarkerBox(ScpiInstrument):
    """A marker-like instrument: settings, indexed markers and a computed marker level."""

    def __init__(self, clock: VirtualClock) -> None:
        super().__init__(clock, Identity("Tarnwick Labs", "TW-BENCH", "P-1", "0.1"))
        self.add_setting(Setting("center_hz", "[SENSe]:FREQuency:CENTer", "float", 1e9,
                                 unit="frequency", minimum=9e3, maximum=13.6e9))
        self.add_setting(Setting("marker_x_hz", "CALCulate:MARKer[1-4]:X", "float", 1e9,
                                 unit="frequency", minimum=0.0, maximum=13.6e9))
        self.add_command("CALCulate:MARKer[1-4]:Y", query=self._marker_y)

    def _marker_y(self, cmd: Command) -> str:
        return format_number(-42.0 - 1e-9 * self.value("marker_x_hz", cmd.index))


@contextlib.contextmanager
def _echo_server(reply: bytes) -> Iterator[int]:
    """A bare line server on loopback that answers every line with ``reply``."""
    listener = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
    listener.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
    listener.bind(("127.0.0.1", 0))
    listener.listen(1)
    quickack = getattr(socket, "TCP_QUICKACK", None)

    def run() -> None:
        conn, _ = listener.accept()
        conn.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
        with conn:
            buffer = b""
            while chunk := conn.recv(65536):
                if quickack is not None:
                    conn.setsockopt(socket.IPPROTO_TCP, quickack, 1)
                buffer += chunk
                while b"\n" in buffer:
                    _, buffer = buffer.split(b"\n", 1)
                    conn.sendall(reply + b"\n")

    thread = threading.Thread(target=run, daemon=True)
    thread.start()
    try:
        yield listener.getsockname()[1]
    finally:
        listener.close()
        thread.join(timeout=2.0)


def _per_query_ms(query: Callable[[str], str]) -> float:
    """Median over rounds of the mean time per query, ms."""
    for _ in range(100):
        query(QUERY)
    rounds = []
    for _ in range(ROUNDS):
        start = time.perf_counter()
        for _ in range(QUERIES_PER_ROUND):
            query(QUERY)
        rounds.append((time.perf_counter() - start) / QUERIES_PER_ROUND * 1e3)
    return statistics.median(rounds)


@pytest.mark.perf
def test_simulator_overhead_per_query() -> None:
    box = MarkerBox(VirtualClock())
    reply = box.handle(QUERY)
    assert isinstance(reply, str)
    rm = pyvisa.ResourceManager("@py")
    try:
        with _echo_server(reply.encode()) as port, serve({"sa": box}) as bench:
            echo = rm.open_resource(resource_name("127.0.0.1", port), read_termination="\n",
                                    write_termination="\n", timeout=2000)
            sim = rm.open_resource(bench.resources["sa"], read_termination="\n",
                                   write_termination="\n", timeout=2000)
            echo_ms = _per_query_ms(echo.query)
            sim_ms = _per_query_ms(sim.query)
            echo.close()
            sim.close()
    finally:
        rm.close()
    start = time.perf_counter()
    for _ in range(10000):
        box.handle(QUERY)
    handle_ms = (time.perf_counter() - start) / 10000 * 1e3
    overhead_ms = sim_ms - echo_ms
    print(f"\nbare echo round trip via pyvisa : {echo_ms:.4f} ms/query")
    print(f"simulator round trip via pyvisa : {sim_ms:.4f} ms/query")
    print(f"simulator overhead              : {overhead_ms:.4f} ms/query (floor {FLOOR_MS} ms)")
    print(f"in-process handle({QUERY!r})    : {handle_ms:.4f} ms/query")
    assert overhead_ms <= FLOOR_MS
