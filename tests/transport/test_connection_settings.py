"""The transport applies what a profile's [connection] says: byte order and data type of
binary blocks (decoded by pyvisa's own ``query_binary_values``), terminations, and serial
line settings."""

from __future__ import annotations

import numpy as np
import pytest
import pyvisa.constants

from sweeprig.errors import TransportError
from sweeprig.transport import FakeTransport, blocks
from sweeprig.transport.settings import ConnectionSettings, SerialSettings
from sweeprig.transport.visa import VisaTransport, _apply_serial

TRACE = np.array([-10.0, -80.5, 1.25, 0.0, -123.375], dtype=np.float64)


def _block(dtype: str) -> bytes:
    return blocks.encode_block(TRACE.astype(dtype).tobytes())


def _instrument(cmd: str) -> bytes | str | None:
    replies = {"BIG32?": _block(">f4"), "LITTLE32?": _block("<f4"),
               "BIG64?": _block(">f8"), "LITTLE64?": _block("<f8"), "*IDN?": "X,Y,1,2"}
    return replies.get(cmd)


@pytest.mark.parametrize(
    ("cmd", "settings"),
    [
        ("BIG32?", ConnectionSettings()),
        ("LITTLE32?", ConnectionSettings(byte_order="little")),
        ("BIG64?", ConnectionSettings(datatype="real64")),
        ("LITTLE64?", ConnectionSettings(byte_order="little", datatype="real64")),
    ],
)
def test_block_in_the_stated_byte_order_and_type(loopback, cmd, settings) -> None:
    # IEEE 488.2-1992, 8.7.9 (definite-length arbitrary block, from memory): #<n><length><bytes>;
    # SCPI-99 vol. 2, FORMat:BORDer NORMal = big-endian, SWAPped = little (from memory).
    server = loopback(_instrument)
    with VisaTransport(server.resource, timeout_s=2.0, settings=settings) as t:
        values = t.query_binary_floats(cmd)
    np.testing.assert_array_equal(values, TRACE)
    fake = FakeTransport(_instrument, settings=settings)
    np.testing.assert_array_equal(fake.query_binary_floats(cmd), TRACE)


def test_wrong_byte_order_is_not_read_as_levels(loopback) -> None:
    server = loopback(_instrument)
    with VisaTransport(server.resource, timeout_s=2.0) as t:
        values = t.query_binary_floats("LITTLE32?")
    # pyvisa's decoder (the reference) reads the swapped bytes as other numbers; the trace is
    # then visibly wrong rather than silently right
    assert not np.allclose(values, TRACE)


def test_pyvisa_reader_agrees_with_the_block_parser() -> None:
    # pyvisa.util.from_ieee_block is the reference decoder; our parser must agree with it
    from pyvisa.util import from_ieee_block

    data = _block(">f4")
    reference = np.asarray(from_ieee_block(data, datatype="f", is_big_endian=True))
    np.testing.assert_array_equal(blocks.parse_real32_block(data), reference)


def test_write_termination_cr_lf_and_read_termination(loopback) -> None:
    server = loopback(lambda cmd: "X,Y,1,2" if cmd == "*IDN?" else None)
    settings = ConnectionSettings(write_termination="\r\n", read_termination="\n")
    with VisaTransport(server.resource, timeout_s=2.0, settings=settings) as t:
        assert t.query("*IDN?") == "X,Y,1,2"
        assert t._inst.write_termination == "\r\n"


def test_read_termination_by_resource_type() -> None:
    default = ConnectionSettings()
    assert default.read_termination_for("TCPIP0::1.2.3.4::5025::SOCKET") == "\n"
    assert default.read_termination_for("ASRL3::INSTR") == "\n"
    assert default.read_termination_for("GPIB0::18::INSTR") is None  # the bus's EOI ends it
    assert ConnectionSettings(read_termination="\r").read_termination_for("GPIB0::1::INSTR") == "\r"


class _SerialResource:
    """Narrow stand-in for a pyvisa serial resource: records the attributes set."""


def test_serial_settings_map_onto_pyvisa_attributes() -> None:
    # pyvisa's SerialInstrument attributes baud_rate, data_bits, parity, stop_bits,
    # flow_control (VI_ATTR_ASRL_BAUD, _DATA_BITS, _PARITY, _STOP_BITS, _FLOW_CNTRL) and its
    # constants Parity, StopBits, ControlFlow
    inst = _SerialResource()
    _apply_serial(inst, SerialSettings(baud_rate=19200, data_bits=7, parity="even",
                                       stop_bits=2.0, flow_control="xon_xoff"))
    assert inst.baud_rate == 19200 and inst.data_bits == 7  # type: ignore[attr-defined]
    assert inst.parity == pyvisa.constants.Parity.even  # type: ignore[attr-defined]
    assert inst.stop_bits == pyvisa.constants.StopBits.two  # type: ignore[attr-defined]
    assert inst.flow_control == pyvisa.constants.ControlFlow.xon_xoff  # type: ignore[attr-defined]


def test_truncated_block_is_a_transport_error(loopback) -> None:
    server = loopback(lambda cmd: b"#210" + b"\x00" * 4 if cmd == "SHORT?" else None)
    with VisaTransport(server.resource, timeout_s=0.3) as t, pytest.raises(TransportError):
        t.query_binary_floats("SHORT?")
