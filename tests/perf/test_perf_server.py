"""Benchmark: new connections a second that the simulated server accepts and answers.

``sweeprig sim serve`` runs in its own process (so this client does not share its
interpreter lock); the client measures, over loopback:

- one at a time: connect, ``*IDN?``, read the reply, close;
- a burst: open 500 connections at once, then ask each ``*IDN?`` and read every reply;
- bare: connect and close, nothing said (what the listen queue lets through).

Floor: ≥ 500 connections a second in each (a 16-deep listen queue once held the server to
about 18 a second: a burst overflowed it and each dropped connection retried after 1 s).
"""

from __future__ import annotations

import os
import re
import socket
import subprocess
import sys
import time
from collections.abc import Iterator

import pytest

pytestmark = pytest.mark.perf

FLOOR_PER_S = 500.0
SEQUENTIAL = 1000
BURST = 500


@pytest.fixture(scope="module")
def sa_port() -> Iterator[int]:
    proc = subprocess.Popen(
        [sys.executable, "-m", "sweeprig", "sim", "serve", "--max-connections", "1024"],
        stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, text=True,
        env={**os.environ, "PYTHONUNBUFFERED": "1", "COLUMNS": "200"},
    )
    assert proc.stdout is not None
    port = None
    for line in proc.stdout:
        match = re.match(r"sa\s+TCPIP0::127\.0\.0\.1::(\d+)::SOCKET", line)
        if match:
            port = int(match.group(1))
        if line.startswith("ready"):
            break
    assert port is not None
    try:
        yield port
    finally:
        proc.terminate()
        proc.wait(timeout=30)
        proc.stdout.close()


def _idn(sock: socket.socket) -> bytes:
    sock.sendall(b"*IDN?\n")
    reply = b""
    while not reply.endswith(b"\n"):
        chunk = sock.recv(256)
        assert chunk, "connection closed before the reply"
        reply += chunk
    return reply


def test_connections_per_second_one_at_a_time(sa_port: int) -> None:
    t0 = time.perf_counter()
    for _ in range(SEQUENTIAL):
        with socket.create_connection(("127.0.0.1", sa_port), timeout=5) as sock:
            assert _idn(sock).startswith(b"Tarnwick Labs")
    rate = SEQUENTIAL / (time.perf_counter() - t0)
    print(f"\none at a time (connect, *IDN?, close): {rate:.0f} connections/s "
          f"(floor {FLOOR_PER_S:.0f})")
    assert rate >= FLOOR_PER_S


def test_connections_per_second_in_a_burst(sa_port: int) -> None:
    t0 = time.perf_counter()
    socks = [socket.create_connection(("127.0.0.1", sa_port), timeout=10) for _ in range(BURST)]
    try:
        for sock in socks:
            assert _idn(sock).startswith(b"Tarnwick Labs")
        rate = BURST / (time.perf_counter() - t0)
    finally:
        for sock in socks:
            sock.close()
    print(f"\nburst of {BURST} (all open, then *IDN? on each): {rate:.0f} connections/s "
          f"(floor {FLOOR_PER_S:.0f})")
    assert rate >= FLOOR_PER_S


def test_connections_per_second_bare(sa_port: int) -> None:
    t0 = time.perf_counter()
    for _ in range(SEQUENTIAL):
        socket.create_connection(("127.0.0.1", sa_port), timeout=5).close()
    rate = SEQUENTIAL / (time.perf_counter() - t0)
    print(f"\nbare (connect, close): {rate:.0f} connections/s (floor {FLOOR_PER_S:.0f})")
    assert rate >= FLOOR_PER_S
