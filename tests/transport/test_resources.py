"""VISA resource names reduced to what they reach: parsed like pyvisa parses them (the outside
reference), and one lock for every spelling of one instrument (a property test with real
operating-system locks: 0 double holders)."""

from __future__ import annotations

import socket
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from pyvisa import rname

from sweeprig.engine.locks import BenchBusy, BenchLock
from sweeprig.errors import InputError
from sweeprig.transport.resources import (
    THIS_MACHINE,
    ResourceNameError,
    host_identities,
    lock_keys,
    parse_resource,
)

# -- the parser against pyvisa's (pyvisa.rname.parse_resource_name) ---------------------------

PYVISA_CASES = [
    "TCPIP::192.0.2.10::5025::SOCKET",
    "TCPIP3::lab-sg6.example::5025::SOCKET",
    "TCPIP::192.0.2.10::INSTR",
    "TCPIP0::192.0.2.10::hislip0::INSTR",
    "TCPIP::192.0.2.10::gpib0,5::INSTR",
    "GPIB::18::INSTR",
    "GPIB1::18::5::INSTR",
    "ASRL4::INSTR",
    "ASRL/dev/ttyUSB0::INSTR",
    "USB::0x1234::0x5678::SN1::INSTR",
    "USB0::4660::22136::SN1::2::INSTR",
]


@pytest.mark.parametrize("text", PYVISA_CASES)
def test_fields_agree_with_pyvisa(text: str) -> None:
    ours, theirs = parse_resource(text), rname.parse_resource_name(text)
    # pyvisa: board "0" when not written, lan device name "inst0", USB interface "0".
    if ours.kind != "asrl":
        assert ours.board == int(theirs.board)
    if ours.kind == "tcpip-socket":
        assert ours.fields == (theirs.host_address.casefold(), int(theirs.port))
    elif ours.kind == "tcpip-instr":
        assert ours.fields == (theirs.host_address.casefold(),
                               theirs.lan_device_name.casefold())
    elif ours.kind == "gpib":
        secondary = -1 if theirs.secondary_address is None else int(theirs.secondary_address)
        assert ours.fields == (int(theirs.primary_address), secondary)
    elif ours.kind == "asrl":
        assert ours.fields[0] == str(theirs.board)
    else:
        assert ours.kind == "usb"
        assert ours.fields == (int(theirs.manufacturer_id, 0), int(theirs.model_code, 0),
                               theirs.serial_number.casefold(),
                               int(theirs.usb_interface_number))


@pytest.mark.parametrize("text", [
    "TCPIP::192.0.2.10::5025::SOCKET ",  # pyvisa refuses these too
    " GPIB::18::INSTR",
    "TCPIP::192.0.2.10:: 5025::SOCKET",
    "TCPIP::192.0.2.10::5025::SOCKET\n",
    "TCPIP::::5025::SOCKET",
    "TCPIP::192.0.2.10::99999::SOCKET",
    "TCPIP::192.0.2.10::0::SOCKET",
    "TCPIP::192.0.2.10::50x5::SOCKET",
    "TCPIP::192.0.2.10::a::b::INSTR",
    "TCPIP::[fe80::1::5025::SOCKET",
    "TCPIP::[not-v6]::5025::SOCKET",
    "GPIB::eighteen::INSTR",
    "GPIB::1::2::3::INSTR",
    "USB::0xZZ::0x1::S::INSTR",
    "USB::0x10000::0x1::S::INSTR",
    "USB::1::2::INSTR",
    "ASRL::INSTR",
    "ASRL3::SOCKET",
    "",
])
def test_what_is_not_a_resource_name_is_refused(text: str) -> None:
    with pytest.raises(ResourceNameError):
        parse_resource(text)
    with pytest.raises(InputError, match="not a VISA resource name"):
        BenchLock([text], "a test", Path("/nonexistent-never-made")).acquire()


def test_a_bench_file_with_a_bad_resource_name_is_refused_by_check(tmp_path: Path) -> None:
    from sweeprig.engine.session import served_bench_text
    from sweeprig.formats.bench import load_bench

    text = served_bench_text({"rf": "TCPIP0::127.0.0.1::5025::SOCKET "})
    bench = tmp_path / "bench.toml"
    bench.write_text(text, encoding="utf-8")
    with pytest.raises(InputError) as err:
        load_bench(bench)
    assert "roles.rf.resource" in str(err.value) and "no spaces" in str(err.value)


# -- one instrument, one key; two instruments, two ------------------------------------------------


@pytest.mark.parametrize(("a", "b"), [
    ("TCPIP0::127.0.0.1::5025::SOCKET", "tcpip::localhost::05025::socket"),
    ("TCPIP::localhost::5025::SOCKET", "TCPIP1::[::1]::5025::SOCKET"),
    ("TCPIP::127.0.0.1::5025::SOCKET", f"TCPIP::{socket.gethostname()}::5025::SOCKET"),
    ("TCPIP::192.0.2.10::5025::SOCKET", "TCPIP::[::ffff:192.0.2.10]::5025::SOCKET"),
    ("TCPIP::192.0.2.10::INSTR", "tcpip0::192.0.2.10::INST0::instr"),
    ("TCPIP::192.0.2.10", "TCPIP::192.0.2.10::inst0::INSTR"),
    ("GPIB::18::INSTR", "gpib0::018"),
    ("USB::0x1234::0x5678::KX7A01::INSTR", "usb0::4660::22136::kx7a01::0::instr"),
    ("USB::0x1234::0x5678::KX7A01::INSTR", "USB::0x1234::0x5678::KX7A01::RAW"),
    ("ASRL3::INSTR", "asrlcom3::instr"),
    ("VXI0::1::INSTR", "vxi0::1::instr"),
])
def test_spellings_of_one_instrument_share_a_key(a: str, b: str) -> None:
    assert lock_keys(a) & lock_keys(b)


@pytest.mark.parametrize(("a", "b"), [
    ("TCPIP::127.0.0.1::5025::SOCKET", "TCPIP::127.0.0.1::5026::SOCKET"),
    ("TCPIP::192.0.2.10::5025::SOCKET", "TCPIP::192.0.2.11::5025::SOCKET"),
    ("TCPIP::192.0.2.10::inst0::INSTR", "TCPIP::192.0.2.10::inst1::INSTR"),
    ("GPIB0::18::INSTR", "GPIB1::18::INSTR"),
    ("GPIB0::18::INSTR", "GPIB0::18::1::INSTR"),
    ("USB::0x1234::0x5678::KX7A01::INSTR", "USB::0x1234::0x5678::KX7A02::INSTR"),
    ("ASRL3::INSTR", "ASRL4::INSTR"),
])
def test_different_instruments_do_not_share_a_key(a: str, b: str) -> None:
    assert not lock_keys(a) & lock_keys(b)


def test_every_address_of_this_machine_is_one_host() -> None:
    for host in ("localhost", "LOCALHOST", "127.0.0.1", "127.0.0.2", "::1", "0.0.0.0",
                 "::ffff:127.0.0.1", socket.gethostname()):
        assert host_identities(host) == {THIS_MACHINE}, host
    assert host_identities("192.0.2.10") == {"192.0.2.10"}
    # A name that cannot be resolved (RFC 2606 reserves .invalid) is compared as a name.
    assert host_identities("Bench-SG.invalid.") == {"name:bench-sg.invalid"}


# -- the property: random spellings, real OS locks, 0 double holders ------------------------------

def _case(text: str) -> st.SearchStrategy[str]:
    return st.sampled_from([text.upper(), text.lower(), text.capitalize(), text.swapcase()])


def _number(value: int) -> st.SearchStrategy[str]:
    return st.integers(0, 3).map(lambda zeros: "0" * zeros + str(value))


def _board(default_only: bool = False) -> st.SearchStrategy[str]:
    return st.sampled_from(["", "0", "00"] if default_only else ["", "0", "1", "00", "7"])


_THIS_MACHINE_HOSTS = ["localhost", "LOCALHOST", "127.0.0.1", "127.0.0.2", "[::1]", "0.0.0.0",
                       "[::ffff:127.0.0.1]", socket.gethostname(), socket.gethostname().upper()]


def _host(address: str | None) -> st.SearchStrategy[str]:
    if address is None:
        return st.sampled_from(_THIS_MACHINE_HOSTS)
    return st.sampled_from([address, f"[::ffff:{address}]"])


@st.composite
def instruments(draw: st.DrawFn) -> tuple:
    kind = draw(st.sampled_from(["socket", "instr", "gpib", "usb", "asrl"]))
    if kind == "socket":
        return (kind, draw(st.sampled_from([None, "192.0.2.10", "198.51.100.7"])),
                draw(st.integers(1, 65535)))
    if kind == "instr":
        return (kind, draw(st.sampled_from([None, "192.0.2.10"])),
                draw(st.sampled_from(["inst0", "inst1", "hislip0"])))
    if kind == "gpib":
        return kind, draw(st.integers(0, 2)), draw(st.integers(0, 30)), \
            draw(st.one_of(st.none(), st.integers(0, 30)))
    if kind == "usb":
        return (kind, draw(st.integers(0, 0xFFFF)), draw(st.integers(0, 0xFFFF)),
                draw(st.sampled_from(["SN1", "ab12cd", "MY-0042"])), draw(st.integers(0, 3)))
    return kind, draw(st.integers(1, 40))


@st.composite
def spellings(draw: st.DrawFn, inst: tuple) -> str:
    kind = inst[0]
    sep = "::"
    if kind == "socket":
        _, host, port = inst
        return sep.join([draw(_case("TCPIP")) + draw(_board()), draw(_host(host)),
                         draw(_number(port)), draw(_case("SOCKET"))])
    if kind == "instr":
        _, host, device = inst
        parts = [draw(_case("TCPIP")) + draw(_board()), draw(_host(host))]
        if device != "inst0" or draw(st.booleans()):
            parts.append(draw(_case(device)))
        if draw(st.booleans()):
            parts.append(draw(_case("INSTR")))
        return sep.join(parts)
    if kind == "gpib":
        _, board, primary, secondary = inst
        head = draw(_case("GPIB")) + (draw(_board(True)) if board == 0 else
                                      draw(_number(board)))
        parts = [head, draw(_number(primary))]
        if secondary is not None:
            parts.append(draw(_number(secondary)))
        if draw(st.booleans()):
            parts.append(draw(_case("INSTR")))
        return sep.join(parts)
    if kind == "usb":
        _, maker, model, serial, interface = inst

        def usb_id(value: int) -> st.SearchStrategy[str]:
            return st.sampled_from([f"0x{value:04X}", f"0x{value:x}", f"0X{value:04x}",
                                    str(value)])

        parts = [draw(_case("USB")) + draw(_board()), draw(usb_id(maker)), draw(usb_id(model)),
                 draw(_case(serial))]
        if interface != 0 or draw(st.booleans()):
            parts.append(draw(_number(interface)))
        parts.append(draw(st.sampled_from(["INSTR", "instr", "RAW"])))
        return sep.join(parts)
    _, port = inst
    head = draw(st.sampled_from([f"ASRL{port}", f"asrl0{port}", f"ASRLCOM{port}",
                                 f"AsrlCom{port}"]))
    return head + draw(st.sampled_from(["::INSTR", "::instr", ""]))


@st.composite
def broken(draw: st.DrawFn, text: str) -> str:
    """``text`` with a space, tab or line break put somewhere (VISA names have none)."""
    where = draw(st.integers(0, len(text)))
    return text[:where] + draw(st.sampled_from([" ", "\t", "\n", "  "])) + text[where:]


@st.composite
def lock_cases(draw: st.DrawFn) -> tuple[tuple, str, tuple, str]:
    first = draw(instruments())
    second = first if draw(st.booleans()) else draw(instruments())
    a = draw(spellings(first))
    b = draw(spellings(second))
    if draw(st.integers(0, 9)) == 0:
        b = draw(broken(b))
    return first, a, second, b


def _check_no_double_holder(case: tuple[tuple, str, tuple, str], folder: Path) -> None:
    first, a, second, b = case
    holder = BenchLock([a], "run A", folder).acquire()
    try:
        other = BenchLock([b], "run B", folder)
        try:
            other.acquire()
        except BenchBusy as busy:
            assert first == second, f"{a!r} and {b!r} are different instruments"
            assert "run A" in str(busy)
        except InputError:
            assert any(c.isspace() for c in b), f"{b!r} was refused as a resource name"
        else:
            other.release()
            assert first != second, f"{a!r} and {b!r} were held at once by two runs"
            assert not any(c.isspace() for c in b), f"{b!r} was accepted"
    finally:
        holder.release()


@settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(case=lock_cases())
def test_random_spellings_never_give_two_holders(case, tmp_path_factory) -> None:
    _check_no_double_holder(case, tmp_path_factory.getbasetemp() / "resource-locks")


@pytest.mark.soak
@settings(max_examples=1000, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(case=lock_cases())
def test_random_spellings_never_give_two_holders_1000(case, tmp_path_factory) -> None:
    _check_no_double_holder(case, tmp_path_factory.getbasetemp() / "resource-locks-soak")


@pytest.mark.parametrize(("written", "spelled"), [
    ("tcpip0::127.0.0.1::5025::socket", "TCPIP0::127.0.0.1::5025::SOCKET"),
    ("Tcpip::Lab-Host.local::inst0::instr", "TCPIP::Lab-Host.local::inst0::INSTR"),
    ("gpib0::18::instr", "GPIB0::18::INSTR"),
    ("asrl/dev/ttyUSB0::instr", "ASRL/dev/ttyUSB0::INSTR"),
    ("usb0::0x1234::0x5678::SerNo9a::instr", "USB0::0x1234::0x5678::SerNo9a::INSTR"),
    ("TCPIP0::10.0.0.2::5025::SOCKET", "TCPIP0::10.0.0.2::5025::SOCKET"),
])
def test_visa_spelling_upper_cases_keywords_only(written: str, spelled: str) -> None:
    from sweeprig.transport.resources import visa_spelling

    assert visa_spelling(written) == spelled
    rname.parse_resource_name(spelled)  # the reference parser (pyvisa) accepts it
