"""The raw SCPI socket server: framing, binary pass-through, ports, shutdown, host guard."""

from __future__ import annotations

import socket
import struct
from collections.abc import Iterator

import pytest
import pyvisa

from sweeprig.clock import VirtualClock
from sweeprig.errors import InputError
from sweeprig.sim.instruments import RfSwitch, SignalSource
from sweeprig.sim.scpi import Command, Identity, ScpiInstrument
from sweeprig.sim.server import ServedBench, resource_name, serve

# A payload whose bytes include "\n" (0x0A) and ";" so that framing by terminator would break.
PAYLOAD = struct.pack(">3f", 1.0, 2.0, 3.0) + b"\n;\r" + bytes(range(256))


class BlockBox(ScpiInstrument):
    """Test-only instrument returning an IEEE 488.2 definite-length block."""

    def __init__(self, clock: VirtualClock) -> None:
        super().__init__(clock, Identity("Tarnwick Labs", "TW-BLK", "B-1", "0.1"))
        self.add_command("DATA", query=self._data)

    def _data(self, cmd: Command) -> bytes:
        cmd.no_params()
        length = str(len(PAYLOAD))
        return f"#{len(length)}{length}".encode("ascii") + PAYLOAD


@pytest.fixture
def bench() -> Iterator[ServedBench]:
    clock = VirtualClock()
    with serve({"rf": SignalSource(clock), "blk": BlockBox(clock),
                "switch": RfSwitch(clock)}) as served:
        yield served


def _raw(bench: ServedBench, role: str) -> socket.socket:
    sock = socket.create_connection(("127.0.0.1", bench.ports[role]), timeout=2.0)
    return sock


def _read_line(sock: socket.socket, lines: int = 1) -> bytes:
    data = b""
    while data.count(b"\n") < lines:
        chunk = sock.recv(4096)
        if not chunk:
            break
        data += chunk
    return data


def test_resources_and_ports(bench: ServedBench) -> None:
    assert set(bench.resources) == {"rf", "blk", "switch"}
    assert len(set(bench.ports.values())) == 3
    for role, port in bench.ports.items():
        assert port > 0
        assert bench.resources[role] == f"TCPIP0::127.0.0.1::{port}::SOCKET"
    assert resource_name("127.0.0.1", 5025) == "TCPIP0::127.0.0.1::5025::SOCKET"


def test_framing_crlf_blank_lines_and_joined_replies(bench: ServedBench) -> None:
    with _raw(bench, "rf") as sock:
        sock.sendall(b"\n\r\nFREQ 2e9;:OUTP ON\r\n*IDN?;:FREQ?;:OUTP?\r\n")
        assert _read_line(sock) == b"Tarnwick Labs,TW-SG6,SG6-10001,1.0;2000000000;1\n"
        # two messages in one segment, one reply each, in order
        sock.sendall(b"FREQ?\nOUTP?\n")
        assert _read_line(sock, lines=2) == b"2000000000\n1\n"


def test_binary_block_passes_through_untouched(bench: ServedBench) -> None:
    with _raw(bench, "blk") as sock:
        sock.sendall(b"DATA?\n")
        expected = b"#3" + str(len(PAYLOAD)).encode() + PAYLOAD + b"\n"
        data = b""
        while len(data) < len(expected):
            chunk = sock.recv(4096)
            assert chunk
            data += chunk
        assert data == expected


def test_binary_block_through_pyvisa(bench: ServedBench) -> None:
    rm = pyvisa.ResourceManager("@py")
    try:
        inst = rm.open_resource(bench.resources["blk"], read_termination="\n",
                                write_termination="\n", timeout=2000)
        raw = inst.query_binary_values("DATA?", datatype="B", container=bytes)
        assert raw == PAYLOAD
        assert inst.query("*OPC?") == "1"
    finally:
        rm.close()


def test_overlong_message_is_discarded_with_an_error(bench: ServedBench) -> None:
    with _raw(bench, "rf") as sock:
        sock.sendall(b"FREQ " + b"9" * (1 << 21))
        sock.sendall(b"\n*IDN?\n")
        assert _read_line(sock).startswith(b"Tarnwick Labs")
        sock.sendall(b"SYST:ERR?;ERR?\n")
        assert _read_line(sock) == b'-102,"Syntax error;program message too long";0,"No error"\n'


def test_non_ascii_bytes_do_not_break_the_session(bench: ServedBench) -> None:
    with _raw(bench, "rf") as sock:
        sock.sendall(b"FR\xffEQ 1\n\x00\x01\nSYST:ERR:COUN?\n")
        assert _read_line(sock) == b"2\n"


def test_several_clients_share_state(bench: ServedBench) -> None:
    with _raw(bench, "switch") as first, _raw(bench, "switch") as second:
        first.sendall(b"ROUT:CLOS (@3)\n")
        first.sendall(b"*OPC?\n")
        assert _read_line(first) == b"1\n"
        second.sendall(b"ROUT:CLOS? (@1,2,3)\n")
        assert _read_line(second) == b"0,0,1\n"


def test_close_ends_connections_and_frees_ports() -> None:
    clock = VirtualClock()
    bench = serve({"rf": SignalSource(clock)})
    port = bench.ports["rf"]
    client = socket.create_connection(("127.0.0.1", port), timeout=2.0)
    client.sendall(b"*IDN?\n")
    assert _read_line(client).startswith(b"Tarnwick")
    bench.close()
    assert client.recv(16) == b""  # the server closed our connection
    client.close()
    with pytest.raises(OSError):
        socket.create_connection(("127.0.0.1", port), timeout=1.0).close()
    bench.close()  # idempotent
    # the port can be bound again at once (SO_REUSEADDR)
    with serve({"rf": SignalSource(clock)}, ports={"rf": port}) as again:
        assert again.ports["rf"] == port


def test_fixed_port_in_use_is_an_input_error() -> None:
    clock = VirtualClock()
    with serve({"a": SignalSource(clock)}) as first:
        with pytest.raises(InputError) as exc:
            serve({"b": SignalSource(clock)}, ports={"b": first.ports["a"]})
        assert "role 'b'" in str(exc.value)
        assert "port 0" in str(exc.value)


def test_unknown_role_in_ports_is_an_input_error() -> None:
    with pytest.raises(InputError):
        serve({"rf": SignalSource(VirtualClock())}, ports={"sa": 5025})


@pytest.mark.parametrize("host", ["0.0.0.0", "192.0.2.10", "lab-host.example"])
def test_non_loopback_host_needs_allow_remote(host: str) -> None:
    with pytest.raises(InputError) as exc:
        serve({"rf": SignalSource(VirtualClock())}, host=host)
    assert "allow_remote" in str(exc.value)
