"""VisaTransport through pyvisa-py against a real socket server on loopback."""

from __future__ import annotations

import numpy as np
import pytest

from sweeprig.errors import TransportError
from sweeprig.transport import blocks
from sweeprig.transport.base import Transaction, Transport
from sweeprig.transport.visa import VisaTransport

TRACE = np.array([-10.0, -80.5, 1.25, 0.0], dtype=">f4")


def _instrument(cmd: str) -> bytes | str | None:
    if cmd == "*IDN?":
        return "Tarnwick Labs,TW-XX1,0042,1.0"
    if cmd == "FREQ?":
        return "+2.40000000E+09"
    if cmd == "TRAC?":
        return blocks.encode_real32_block(TRACE)
    if cmd == "NEWLINES?":
        # payload bytes include 0x0A: the reader must not stop there
        return blocks.encode_block(b"\x0a\x0a\x0a\x0a" + TRACE.tobytes()[4:] + b"\x0a\x00\x00\x00")
    if cmd == "DROP?":
        return ...
    if cmd.endswith("?"):
        return None  # never answers: a timeout
    return None


def test_write_query_and_hook(loopback):
    server = loopback(_instrument)
    seen: list[Transaction] = []
    with VisaTransport(server.resource, timeout_s=2.0, on_transaction=seen.append) as t:
        assert isinstance(t, Transport)
        t.write("FREQ 2.4 GHz")
        assert t.query("*IDN?") == "Tarnwick Labs,TW-XX1,0042,1.0"
        assert blocks.parse_float(t.query("FREQ?")) == 2.4e9
    assert [x.sent for x in seen] == ["FREQ 2.4 GHz", "*IDN?", "FREQ?"]
    assert seen[0].received is None and seen[1].received.startswith("Tarnwick")
    assert all(x.resource == server.resource and x.duration_s >= 0 for x in seen)
    assert server.received[:3] == ["FREQ 2.4 GHz", "*IDN?", "FREQ?"]


def test_binary_block(loopback):
    server = loopback(_instrument)
    with VisaTransport(server.resource, timeout_s=2.0) as t:
        np.testing.assert_array_equal(t.query_binary_floats("TRAC?"), TRACE.astype(float))
        values = t.query_binary_floats("NEWLINES?")
        assert values.size == 5
        # the stream stays in step after a block with newlines inside
        assert t.query("*IDN?").startswith("Tarnwick")


def test_timeout_is_transport_error_naming_resource_and_command(loopback):
    server = loopback(_instrument)
    with VisaTransport(server.resource, timeout_s=0.2) as t, pytest.raises(TransportError) as err:
        t.query("SILENT?")
    message = str(err.value)
    assert server.resource in message and "SILENT?" in message and "timeout" in message


def test_per_query_timeout(loopback):
    server = loopback(_instrument)
    with VisaTransport(server.resource, timeout_s=5.0) as t, pytest.raises(TransportError):
        t.query("SILENT?", timeout_s=0.1)


def test_a_query_s_own_timeout_does_not_outlive_it(loopback):
    """The resource's timeout is set only when an exchange needs another one than the last
    (pyvisa sets a VISA attribute each time), and every exchange states its own: one without
    its own timeout gets the connection's again."""
    server = loopback(_instrument)
    with VisaTransport(server.resource, timeout_s=0.4) as t:
        inst = t._inst  # the pyvisa resource (narrow test of what it was given)
        assert t.query("*IDN?", timeout_s=2.5).startswith("Tarnwick")
        assert inst.timeout == 2500
        t.write("FREQ 1")
        assert inst.timeout == 400
        posted = t.post("*IDN?")
        assert inst.timeout == 400
        assert t.collect(posted, timeout_s=1.5).startswith("Tarnwick")
        assert inst.timeout == 1500
        assert t.query("FREQ?") == "+2.40000000E+09" and inst.timeout == 400


def test_dropped_connection_then_reconnect(loopback):
    server = loopback(_instrument)
    with VisaTransport(server.resource, timeout_s=0.5) as t:
        with pytest.raises(TransportError) as err:
            t.query("DROP?")
        assert "DROP?" in str(err.value)
        t.reconnect()
        assert t.query("*IDN?").startswith("Tarnwick")


def test_open_refused():
    # a port nobody listens on: bind one, note it, close it
    import socket

    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    resource = f"TCPIP0::127.0.0.1::{port}::SOCKET"
    # pyvisa-py may connect lazily: the error comes at opening or at the first exchange
    with pytest.raises(TransportError) as err:
        transport = VisaTransport(resource, timeout_s=0.5)
        try:
            transport.query("*IDN?")
        finally:
            transport.close()
    assert resource in str(err.value) and "fix:" in str(err.value)


def test_closed_transport_refuses(loopback):
    server = loopback(_instrument)
    t = VisaTransport(server.resource, timeout_s=1.0)
    t.close()
    t.close()  # idempotent
    with pytest.raises(TransportError):
        t.write("*CLS")


@pytest.mark.parametrize("resource", ["", "   "])
def test_bad_resource_string(resource):
    with pytest.raises(TransportError):
        VisaTransport(resource)


def test_garbage_resource_string():
    with pytest.raises(TransportError):
        VisaTransport("NOT-A-RESOURCE", timeout_s=0.5)


def test_resource_keywords_in_any_case_open(loopback):
    # VISA resource names are case-insensitive (VPP-4.3); pyvisa's parser wants upper case.
    server = loopback(_instrument)
    spelled = f"tcpip0::127.0.0.1::{server.port}::socket"
    with VisaTransport(spelled, timeout_s=2.0) as t:
        assert t.query("*IDN?") == "Tarnwick Labs,TW-XX1,0042,1.0"


def test_posted_queries_are_answered_in_order_and_an_unread_reply_never_answers_a_later_one(
        loopback):
    server = loopback(lambda cmd: {"A?": "1", "B?": "2", "C?": "3"}.get(cmd))
    seen: list[Transaction] = []
    with VisaTransport(server.resource, timeout_s=2.0, on_transaction=seen.append) as t:
        first, second = t.post("A?"), t.post("B?")
        assert t.collect(first) == "1" and t.collect(second) == "2"
        with pytest.raises(TransportError, match="already read"):
            t.collect(first)
        t.post("A?")  # never collected (a fault cut the collection short) ...
        assert t.query("C?") == "3"  # ... so its reply is read and dropped first
        late = t.post("B?")
        t.post("C?")
        assert t.collect(t.post("A?")) == "1"  # the older replies are read first
        with pytest.raises(TransportError, match="already read"):
            t.collect(late)
    assert [x.sent for x in seen] == ["A?", "B?", "A?", "C?", "B?", "C?", "A?"]
    assert [x.received for x in seen] == ["1", "2", "<discarded: 1>", "3", "<discarded: 2>",
                                          "<discarded: 3>", "1"]


def test_a_posted_query_that_times_out_is_a_transport_error_and_owes_nothing_after(loopback):
    server = loopback(_instrument)
    with VisaTransport(server.resource, timeout_s=0.2) as t:
        with pytest.raises(TransportError, match="SILENT"):
            t.collect(t.post("SILENT?"))
        assert t.query("*IDN?").startswith("Tarnwick")


def test_a_text_reply_longer_than_one_read_chunk_comes_whole_and_in_step(loopback):
    """The transport reads text replies through the VISA library's own read, chunk after
    chunk while the library says there is more (pyvisa's ``read`` does the same): a reply
    of several chunks comes whole, its termination removed, with no warning (warnings fail
    the suite), and the next reply is the next query's."""
    from sweeprig.transport.visa import READ_CHUNK_BYTES

    long_reply = ",".join(f"{k:+.6E}" for k in range(3 * READ_CHUNK_BYTES // 14))
    assert len(long_reply) > 2 * READ_CHUNK_BYTES

    def respond(cmd: str) -> str | bytes | None:
        return long_reply if cmd == "TRAC:ASC?" else _instrument(cmd)

    server = loopback(respond)
    with VisaTransport(server.resource, timeout_s=2.0) as t:
        assert t.query("TRAC:ASC?") == long_reply
        assert t.collect(t.post("TRAC:ASC?")) == long_reply
        assert t.query("*IDN?") == "Tarnwick Labs,TW-XX1,0042,1.0"
        t.reconnect()  # a new session: read on the same way
        assert t.query("TRAC:ASC?") == long_reply
    assert server.received == ["TRAC:ASC?", "TRAC:ASC?", "*IDN?", "TRAC:ASC?"]
