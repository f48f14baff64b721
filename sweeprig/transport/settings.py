"""How to talk to one resource: terminations, binary-block byte order and serial settings.

These are stated by the instrument's driver profile (``[connection]``, docs/driver-profiles.md)
and applied by the transport when it opens the resource. The names follow pyvisa's resource
attributes (``write_termination``, ``read_termination``, ``baud_rate``, ``data_bits``,
``parity``, ``stop_bits``, ``flow_control``) so that each maps onto one attribute.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

ByteOrder = Literal["big", "little"]
BinaryDatatype = Literal["real32", "real64"]
Parity = Literal["none", "odd", "even", "mark", "space"]
FlowControl = Literal["none", "xon_xoff", "rts_cts", "dtr_dsr"]

TERMINATIONS: tuple[str, ...] = ("\n", "\r", "\r\n", "")
"""Allowed terminations: LF, CR, CR LF, or none (the bus's own end, e.g. GPIB EOI)."""


@dataclass(frozen=True)
class SerialSettings:
    """Serial line settings (applied only to ``ASRL`` resources)."""

    baud_rate: int = 9600
    data_bits: int = 8
    parity: Parity = "none"
    stop_bits: float = 1.0
    flow_control: FlowControl = "none"


@dataclass(frozen=True)
class ConnectionSettings:
    """What a transport applies to its resource.

    ``write_termination``: appended to every command. ``read_termination``: ends a reply;
    ``None`` leaves the choice to the resource type (LF on sockets and serial lines, the
    bus's end indicator elsewhere). ``byte_order``/``datatype``: of IEEE 488.2 definite-length
    blocks of floats (SCPI ``FORMat:BORDer NORMal`` = big-endian, ``SWAPped`` = little).
    ``serial``: line settings for a serial resource.
    """

    write_termination: str = "\n"
    read_termination: str | None = None
    byte_order: ByteOrder = "big"
    datatype: BinaryDatatype = "real32"
    serial: SerialSettings | None = None

    def read_termination_for(self, resource: str) -> str | None:
        """The read termination to set on ``resource`` (None: leave the resource's own)."""
        if self.read_termination is not None:
            return self.read_termination
        upper = resource.strip().upper()
        if upper.endswith("::SOCKET") or upper.startswith("ASRL"):
            return "\n"
        return None


DEFAULT_CONNECTION = ConnectionSettings()
