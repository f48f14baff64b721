"""Pure parsers for SCPI replies and IEEE 488.2 data blocks.

Every function here is total: it returns a value or raises
:class:`sweeprig.errors.TransportError` carrying the raw reply; never another exception.
No I/O. ``where`` (for example ``"TCPIP0::127.0.0.1::5025::SOCKET, 'MEAS:POW?'"``) is put in
the error so the user can tell which instrument and command answered badly.

Number syntax follows IEEE 488.2 NRf (decimal, optional sign, optional fraction, optional
exponent; ASCII digits only). SCPI-99 answers ``9.91E37`` for "not a number"; the float
parsers refuse it, since no measurement was made.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

import numpy as np

from sweeprig.errors import TransportError

_NRF = re.compile(r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?", re.ASCII)
_INT_TEXT = re.compile(r"[+-]?\d+", re.ASCII)
_ERROR_QUOTED = re.compile(r'\s*([+-]?\d{1,9})\s*,\s*"((?:[^"]|"")*)"\s*', re.ASCII | re.DOTALL)
_ERROR_BARE = re.compile(r"\s*([+-]?\d{1,9})\s*(?:,(.*))?", re.ASCII | re.DOTALL)

SCPI_NAN = 9.91e37
"""What SCPI-99 instruments answer when a value is not available."""

_MAX_REPLY_IN_MESSAGE = 80


@dataclass(frozen=True)
class ScpiError:
    """One entry of an instrument's error queue: ``code`` (0 = no error) and ``text``."""

    code: int
    text: str

    @property
    def is_error(self) -> bool:
        """True unless this is the ``0,"No error"`` entry that ends the queue."""
        return self.code != 0

    def __str__(self) -> str:
        return f'{self.code},"{self.text}"'


def _shown(raw: object) -> str:
    text = repr(raw)
    if len(text) > _MAX_REPLY_IN_MESSAGE:
        text = text[: _MAX_REPLY_IN_MESSAGE - 3] + "..."
    return text


def _garbage(raw: object, expected: str, where: str | None) -> TransportError:
    return TransportError(
        f"reply {_shown(raw)} is not {expected}",
        where=where,
        fix="check that the driver profile's command matches this instrument's SCPI dialect "
        "and that the reply format (ASCii, byte order) is what the profile expects",
    )


def _text(raw: object, expected: str, where: str | None) -> str:
    if isinstance(raw, bytes | bytearray):
        try:
            raw = bytes(raw).decode("ascii")
        except UnicodeDecodeError:
            raise _garbage(raw, expected, where) from None
    if not isinstance(raw, str):
        raise _garbage(raw, expected, where)
    return raw.strip()


def parse_float(raw: str, *, where: str | None = None) -> float:
    """Parse a numeric reply (NR1/NR2/NR3, e.g. ``"+2.40000000E+09"``) as a float."""
    text = _text(raw, "a number", where)
    if _NRF.fullmatch(text) is None:
        raise _garbage(raw, "a number", where)
    value = float(text)
    if not math.isfinite(value):
        raise _garbage(raw, "a number within float range", where)
    if value == SCPI_NAN:
        raise TransportError(
            f"reply {_shown(raw)} is SCPI's 'not a number' (9.91E37): the instrument had no value",
            where=where,
            fix="make sure a measurement was taken before reading it (sweep finished, marker on)",
        )
    return value


def parse_int(raw: str, *, where: str | None = None) -> int:
    """Parse an integer reply; an integral NR2/NR3 such as ``"+8.0E+00"`` is accepted too."""
    text = _text(raw, "an integer", where)
    if _INT_TEXT.fullmatch(text) is not None:
        try:
            return int(text)
        except ValueError:  # more digits than Python reads from text (4300)
            raise _garbage(raw, "an integer", where) from None
    if _NRF.fullmatch(text) is None:
        raise _garbage(raw, "an integer", where)
    value = float(text)
    if not math.isfinite(value) or value != math.floor(value) or abs(value) > 2.0**63:
        raise _garbage(raw, "an integer", where)
    return int(value)


def parse_bool(raw: str, *, where: str | None = None) -> bool:
    """Parse a boolean reply: ``1``/``0`` (any NRf form) or ``ON``/``OFF``."""
    text = _text(raw, "a boolean (1/0/ON/OFF)", where)
    upper = text.upper()
    if upper == "ON":
        return True
    if upper == "OFF":
        return False
    if _NRF.fullmatch(text) is not None:
        value = float(text)
        if value == 1.0:
            return True
        if value == 0.0:
            return False
    raise _garbage(raw, "a boolean (1/0/ON/OFF)", where)


def parse_csv_floats(raw: str, *, where: str | None = None) -> np.ndarray:
    """Parse a comma-separated list of numbers (an ASCII trace) into a float64 array.

    An empty reply gives an empty array. SCPI's 9.91E37 becomes NaN here (a trace may have
    points without a value); any other non-number raises.
    """
    text = _text(raw, "a comma-separated list of numbers", where)
    if text == "":
        return np.zeros(0, dtype=np.float64)
    items = text.split(",")
    values = np.empty(len(items), dtype=np.float64)
    for i, item in enumerate(items):
        item = item.strip()
        if _NRF.fullmatch(item) is None:
            raise _garbage(raw, f"a comma-separated list of numbers (item {i} is {item!r})", where)
        value = float(item)
        if not math.isfinite(value):
            raise _garbage(raw, "a list of numbers within float range", where)
        values[i] = math.nan if value == SCPI_NAN else value
    return values


def parse_scpi_error(raw: str, *, where: str | None = None) -> ScpiError:
    """Parse an error-queue entry ``<code>,"<text>"`` (``""`` inside the text is one quote).

    An unquoted text (``-113,Undefined header``) and a bare code are accepted too.
    """
    text = _text(raw, 'an error-queue entry such as -222,"Data out of range"', where)
    match = _ERROR_QUOTED.fullmatch(text)
    if match is not None:
        return ScpiError(int(match[1]), match[2].replace('""', '"'))
    match = _ERROR_BARE.fullmatch(text)
    if match is not None:
        return ScpiError(int(match[1]), (match[2] or "").strip())
    raise _garbage(raw, 'an error-queue entry such as -222,"Data out of range"', where)


def block_length(data: bytes) -> int | None:
    """Total length in bytes (header + payload) of the definite-length block at the start of
    ``data``, or ``None`` if the header is not complete yet. Raises on a malformed header;
    an indefinite block (``#0``) also raises, since its length is not known up front."""
    if not isinstance(data, bytes | bytearray):
        raise _garbage(data, "an IEEE 488.2 block", None)
    start = _block_start(data)
    if start is None:
        return None
    if len(data) < start + 2:
        return None
    digits_char = data[start + 1]
    if not 0x31 <= digits_char <= 0x39:
        raise _garbage(bytes(data[:16]), "an IEEE 488.2 definite-length block (#<n><len>...)", None)
    n_digits = digits_char - 0x30
    header_end = start + 2 + n_digits
    if len(data) < header_end:
        return None
    length_text = bytes(data[start + 2 : header_end])
    if not length_text.isdigit():
        raise _garbage(bytes(data[:16]), "an IEEE 488.2 definite-length block (#<n><len>...)", None)
    return header_end + int(length_text)


def _block_start(data: bytes | bytearray) -> int | None:
    """Index of the ``#`` after optional leading whitespace; None if data is only whitespace."""
    for i, byte in enumerate(data):
        if byte == 0x23:  # '#'
            return i
        if byte not in b" \t\r\n":
            raise _garbage(bytes(data[:16]), "an IEEE 488.2 block starting with '#'", None)
    return None


def parse_block(data: bytes, *, where: str | None = None) -> bytes:
    """Return the payload of an IEEE 488.2 block (``#<n><length><payload>``).

    Definite-length blocks may be followed only by the message terminator (``\\n``, ``\\r\\n``,
    spaces). An indefinite block (``#0<payload>\\n``) gives everything up to the final newline.
    """
    if not isinstance(data, bytes | bytearray):
        raise _garbage(data, "an IEEE 488.2 block", where)
    data = bytes(data)
    try:
        start = _block_start(data)
    except TransportError:
        raise _garbage(data[:16], "an IEEE 488.2 block starting with '#'", where) from None
    if start is None or len(data) < start + 2:
        raise _garbage(data[:16], "a complete IEEE 488.2 block", where)
    if data[start + 1] == 0x30:  # '#0': indefinite length, ends with NL
        payload = data[start + 2 :]
        return payload[:-1] if payload.endswith(b"\n") else payload
    try:
        total = block_length(data)
    except TransportError:
        raise _garbage(data[:16], "an IEEE 488.2 definite-length block", where) from None
    if total is None or len(data) < total:
        raise TransportError(
            f"IEEE 488.2 block is truncated: {len(data)} bytes received, "
            f"{total if total is not None else 'more'} expected",
            where=where,
            fix="check the connection and the timeout; a long trace may need a longer timeout",
        )
    if data[total:].strip(b" \t\r\n") != b"":
        raise _garbage(data[total : total + 16], "the end of the message after the block", where)
    header_len = 2 + data[start + 1] - 0x30
    return data[start + header_len : total]


def decode_real32(
    payload: bytes, *, big_endian: bool = True, where: str | None = None
) -> np.ndarray:
    """Decode a ``REAL,32`` payload (IEEE 754 single precision) into a float64 array."""
    if not isinstance(payload, bytes | bytearray):
        raise _garbage(payload, "REAL,32 data", where)
    if len(payload) % 4 != 0:
        raise TransportError(
            f"REAL,32 block has {len(payload)} bytes, not a multiple of 4",
            where=where,
            fix="set the instrument's data format to REAL,32 (FORMat REAL,32) before reading",
        )
    dtype = np.dtype(">f4" if big_endian else "<f4")
    # a signalling NaN in the data widens to a quiet NaN; numpy warns on that cast
    with np.errstate(invalid="ignore"):
        return np.frombuffer(bytes(payload), dtype=dtype).astype(np.float64)


def parse_real32_block(
    data: bytes, *, big_endian: bool = True, where: str | None = None
) -> np.ndarray:
    """Parse a whole ``REAL,32`` block reply (header + payload + terminator) to float64."""
    return decode_real32(parse_block(data, where=where), big_endian=big_endian, where=where)


def encode_block(payload: bytes) -> bytes:
    """Wrap ``payload`` in an IEEE 488.2 definite-length header (no terminator)."""
    length = str(len(payload)).encode("ascii")
    if len(length) > 9:
        raise ValueError("payload too long for an IEEE 488.2 definite-length block")
    return b"#" + str(len(length)).encode("ascii") + length + bytes(payload)


def encode_real32_block(values: np.ndarray, *, big_endian: bool = True) -> bytes:
    """``values`` as an IEEE 488.2 ``REAL,32`` block (no terminator); for tests and fakes."""
    dtype = np.dtype(">f4" if big_endian else "<f4")
    return encode_block(np.asarray(values, dtype=dtype).tobytes())
