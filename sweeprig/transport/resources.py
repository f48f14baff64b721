"""VISA resource names: parsed, and reduced to the identity of the instrument they reach.

Two runs must never drive one instrument, whatever its name in their bench files. So a lock
is not taken on the spelling of a resource string but on what it reaches (:func:`lock_keys`):

- keywords are case-insensitive and the board number defaults to 0 (VISA resource syntax);
  the board of a LAN or USB resource only picks the local interface, so it is left out;
- ``TCPIP::host::port::SOCKET``: the host is resolved to its addresses and the port read as a
  number; every loopback or unspecified address and every address of this machine is one
  host, "this machine" (``localhost``, ``127.0.0.1``, ``::1``, the machine's name);
- ``TCPIP::host[::device][::INSTR]``: the LAN device name defaults to ``inst0`` and is
  compared without case;
- ``GPIB[board]::primary[::secondary][::INSTR]``: numbers, not text (``05`` is ``5``);
- ``ASRL[n | COMn | path]::INSTR``: ``COM3`` is ``ASRL3``; a device path has its links resolved;
- ``USB[board]::maker::model::serial[::interface][::INSTR | ::RAW]``: ids in hex or decimal,
  serial without case, interface 0 by default;
- anything else (VXI, PXI, aliases) is compared as text without case.

A host can resolve to several addresses, so a resource has a set of keys; two spellings of
one instrument share at least one. The grammar follows the VISA resource-name syntax as pyvisa
parses it (``pyvisa.rname``), which the tests use as the outside reference.
"""

from __future__ import annotations

import ipaddress
import os
import re
import socket
from dataclasses import dataclass
from functools import lru_cache

__all__ = ["ResourceName", "ResourceNameError", "lock_keys", "parse_resource"]


class ResourceNameError(ValueError):
    """A text is not a valid VISA resource name (the message says why)."""


@dataclass(frozen=True)
class ResourceName:
    """A parsed VISA resource name, its fields canonical (hosts not yet resolved).

    ``kind``: ``tcpip-socket``, ``tcpip-instr``, ``gpib``, ``asrl``, ``usb`` or ``other``.
    ``board``: the interface board number (``0`` when not written).
    ``fields``: the kind's own fields, canonical: (host, port) · (host, device name) ·
    (primary, secondary or -1) · (port name,) · (maker id, model code, serial, interface) ·
    (the whole text, case-folded).
    """

    kind: str
    board: int
    fields: tuple[str | int, ...]


_KEYWORD = re.compile(r"^(TCPIP|GPIB|USB|ASRL)(\d*)$", re.IGNORECASE)
_ASRL = re.compile(r"^ASRL(.+)$", re.IGNORECASE)
_DIGITS = re.compile(r"^\d+$")
_DEVICE = re.compile(r"^[A-Za-z0-9_,.\-]+$")


def parse_resource(text: str) -> ResourceName:
    """Parse a VISA resource name; :class:`ResourceNameError` says what is wrong."""
    if not isinstance(text, str) or not text:
        raise ResourceNameError("the resource name is empty")
    if any(c.isspace() for c in text):
        raise ResourceNameError("a resource name has no spaces or line breaks")
    if not text.isprintable() or not text.isascii():
        raise ResourceNameError("a resource name has only printable ASCII characters")
    head, _, rest = text.partition("::")
    match = _KEYWORD.match(head)
    if match is None:
        asrl = _ASRL.match(head)
        if asrl is not None:
            return _asrl(asrl.group(1), rest, text)
        return ResourceName("other", 0, (text.casefold(),))
    keyword, board_text = match.group(1).upper(), match.group(2)
    board = int(board_text) if board_text else 0
    if keyword == "ASRL":
        return _asrl(board_text, rest, text)
    if not rest:
        raise ResourceNameError(f"nothing follows {head!r}")
    if keyword == "TCPIP":
        return _tcpip(board, rest)
    parts = rest.split("::")
    if keyword == "GPIB":
        return _gpib(board, parts)
    return _usb(board, parts)


def _suffix(parts: list[str], allowed: tuple[str, ...]) -> tuple[list[str], str | None]:
    if parts and parts[-1].upper() in allowed:
        return parts[:-1], parts[-1].upper()
    return parts, None


def _tcpip(board: int, rest: str) -> ResourceName:
    if rest.startswith("["):  # an IPv6 address in brackets holds "::" itself
        close = rest.find("]")
        if close < 0:
            raise ResourceNameError("an IPv6 address opened with '[' has no ']'")
        host, after = rest[1:close], rest[close + 1:]
        if after and not after.startswith("::"):
            raise ResourceNameError("'::' must follow the ']' of an IPv6 address")
        parts = [host, *(after[2:].split("::") if after else [])]
        _check_ipv6(host)
    else:
        parts = rest.split("::")
    if any(not p for p in parts):
        raise ResourceNameError("a field between '::' is empty")
    host = parts[0]
    tail, suffix = _suffix(parts[1:], ("SOCKET", "INSTR"))
    if suffix == "SOCKET":
        if len(tail) != 1:
            raise ResourceNameError("write a socket as TCPIP[board]::host::port::SOCKET")
        return ResourceName("tcpip-socket", board, (host.casefold(), _port(tail[0])))
    if len(tail) > 1:
        raise ResourceNameError(
            "write a LAN instrument as TCPIP[board]::host[::device name][::INSTR] "
            "or a socket as TCPIP[board]::host::port::SOCKET")
    device = tail[0] if tail else "inst0"
    if not _DEVICE.fullmatch(device):
        raise ResourceNameError(f"{device!r} is not a LAN device name (e.g. inst0, hislip0)")
    return ResourceName("tcpip-instr", board, (host.casefold(), device.casefold()))


def _check_ipv6(host: str) -> None:
    try:
        ipaddress.IPv6Address(host.split("%", 1)[0])
    except ValueError:
        raise ResourceNameError(f"[{host}] is not an IPv6 address") from None


def _port(text: str) -> int:
    if not _DIGITS.fullmatch(text) or not 0 < int(text) < 65536:
        raise ResourceNameError(f"{text!r} is not a port number (1 to 65535)")
    return int(text)


def _number(text: str, what: str) -> int:
    if not _DIGITS.fullmatch(text):
        raise ResourceNameError(f"{text!r} is not a {what} (a whole number)")
    return int(text)


def _gpib(board: int, parts: list[str]) -> ResourceName:
    parts, suffix = _suffix(parts, ("INSTR", "INTFC"))
    if suffix == "INTFC" or not parts or len(parts) > 2:
        if suffix == "INTFC" and not parts:
            return ResourceName("other", board, (f"gpib{board}::intfc",))
        raise ResourceNameError("write a GPIB instrument as GPIB[board]::primary[::secondary]"
                                "::INSTR")
    primary = _number(parts[0], "GPIB primary address")
    secondary = _number(parts[1], "GPIB secondary address") if len(parts) == 2 else -1
    return ResourceName("gpib", board, (primary, secondary))


def _usb(board: int, parts: list[str]) -> ResourceName:
    parts, _ = _suffix(parts, ("INSTR", "RAW"))
    if len(parts) not in (3, 4):
        raise ResourceNameError("write a USB instrument as USB[board]::maker id::model code::"
                                "serial[::interface]::INSTR")
    maker, model = _usb_id(parts[0], "maker id"), _usb_id(parts[1], "model code")
    interface = _number(parts[3], "USB interface number") if len(parts) == 4 else 0
    return ResourceName("usb", board, (maker, model, parts[2].casefold(), interface))


def _usb_id(text: str, what: str) -> int:
    try:
        value = int(text, 16) if text[:2].lower() == "0x" else int(text, 10)
    except ValueError:
        raise ResourceNameError(f"{text!r} is not a USB {what} (hex 0x1234 or decimal)") from None
    if not 0 <= value <= 0xFFFF:
        raise ResourceNameError(f"{text!r} is not a USB {what} (0 to 0xFFFF)")
    return value


def _asrl(port: str, rest: str, text: str) -> ResourceName:
    if not port:
        raise ResourceNameError("write a serial port as ASRL<n>::INSTR, ASRLCOM<n>::INSTR or "
                                "ASRL/dev/ttyS0::INSTR")
    if rest and rest.upper() != "INSTR":
        raise ResourceNameError("a serial port resource ends in ::INSTR")
    com = re.fullmatch(r"COM(\d+)", port, re.IGNORECASE)
    if _DIGITS.fullmatch(port):
        name = str(int(port))
    elif com is not None:
        name = str(int(com.group(1)))  # COM3 is ASRL3 (the VISA convention on Windows)
    else:
        name = port
    return ResourceName("asrl", 0, (name,))


# -- identity of what a resource reaches -------------------------------------------------------

THIS_MACHINE = "this-machine"


@lru_cache(maxsize=1)
def _own_addresses() -> frozenset[str]:
    """This machine's addresses as its own name resolves (best effort)."""
    out: set[str] = set()
    try:
        for info in socket.getaddrinfo(socket.gethostname(), None):
            out.add(_canonical_ip(str(info[4][0])))
    except (OSError, UnicodeError):
        pass
    return frozenset(out)


def _canonical_ip(text: str) -> str:
    ip = ipaddress.ip_address(text.split("%", 1)[0])
    if isinstance(ip, ipaddress.IPv6Address) and ip.ipv4_mapped is not None:
        ip = ip.ipv4_mapped
    return ip.compressed


def _is_this_machine(address: str) -> bool:
    ip = ipaddress.ip_address(address)
    return ip.is_loopback or ip.is_unspecified or address in _own_addresses()


def host_identities(host: str) -> frozenset[str]:
    """The set of names for the machine ``host`` reaches: its canonical addresses, or
    ``this-machine`` for this machine, or the name itself when it cannot be resolved."""
    name = host.casefold().rstrip(".")
    if name in ("localhost", socket.gethostname().casefold()):
        return frozenset({THIS_MACHINE})
    try:
        addresses = {_canonical_ip(name)}
    except ValueError:
        try:
            addresses = {_canonical_ip(str(i[4][0])) for i in socket.getaddrinfo(name, None)}
        except (OSError, UnicodeError, ValueError):
            return frozenset({f"name:{name}"})
    return frozenset(THIS_MACHINE if _is_this_machine(a) else a for a in addresses)


def lock_keys(resource: str) -> frozenset[str]:
    """The keys that identify what ``resource`` reaches; two spellings of one instrument share
    at least one key. Raises :class:`ResourceNameError` for a text that is not a resource."""
    parsed = parse_resource(resource)
    kind, fields = parsed.kind, parsed.fields
    if kind in ("tcpip-socket", "tcpip-instr"):
        host, rest = str(fields[0]), fields[1]
        tail = f"port {rest}" if kind == "tcpip-socket" else f"device {rest}"
        return frozenset(f"lan {h} {tail}" for h in host_identities(host))
    if kind == "gpib":
        return frozenset({f"gpib{parsed.board} {fields[0]} {fields[1]}"})
    if kind == "asrl":
        name = str(fields[0])
        if not _DIGITS.fullmatch(name):
            name = os.path.realpath(name) if os.sep in name or "/" in name else name.casefold()
        return frozenset({f"serial {name}"})
    if kind == "usb":
        maker, model, serial, interface = fields
        return frozenset({f"usb {maker:04x}:{model:04x} {serial} {interface}"})
    return frozenset({f"visa {fields[0]}"})


_INTERFACE_KEYWORD = re.compile(r"^(tcpip|gpib|usb|asrl|vxi|pxi|gpib-vxi)(?=\d|::|/|$)",
                                re.IGNORECASE)
_CLASS_KEYWORDS = frozenset({"SOCKET", "INSTR", "INTFC", "BACKPLANE", "MEMACC", "RAW",
                             "SERVANT"})


def visa_spelling(resource: str) -> str:
    """``resource`` with its interface and resource-class keywords in upper case.

    VISA resource names are case-insensitive (VPP-4.3, resource names), but pyvisa's parser
    accepts only upper-case keywords; host names, serial device paths and USB serials are
    left exactly as written.
    """
    text = resource.strip()
    text = _INTERFACE_KEYWORD.sub(lambda m: m.group(1).upper(), text, count=1)
    head, sep, last = text.rpartition("::")
    if sep and last.upper() in _CLASS_KEYWORDS:
        text = f"{head}::{last.upper()}"
    return text
