"""FakeTransport: a function as an instrument, with a transaction log."""

from __future__ import annotations

import numpy as np
import pytest

from sweeprig.errors import TransportError
from sweeprig.transport import FakeTransport, Transport, blocks


def test_records_and_replies():
    seen = []
    t = FakeTransport(lambda cmd: "1" if cmd.endswith("?") else None, on_transaction=seen.append)
    assert isinstance(t, Transport)
    t.write("OUTP ON")
    assert t.query("OUTP?") == "1"
    assert t.sent == ["OUTP ON", "OUTP?"]
    assert [x.received for x in seen] == [None, "1"]


def test_no_reply_is_a_timeout():
    t = FakeTransport(lambda cmd: None)
    with pytest.raises(TransportError):
        t.query("X?")
    assert t.log[-1].received.startswith("<error")


def test_binary_and_close():
    values = np.array([1.0, 2.0])
    t = FakeTransport(lambda cmd: blocks.encode_real32_block(values) + b"\n")
    np.testing.assert_array_equal(t.query_binary_floats("TRAC?"), values)
    t.close()
    with pytest.raises(TransportError):
        t.write("*CLS")
    t.reconnect()
    t.write("*CLS")
    assert t.reconnects == 1
