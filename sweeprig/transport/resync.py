"""Back in step after a lost reply: device clear, drain, and a marked query to resynchronise.

When a query times out, the instrument may still answer it later. Read naively, that late
reply would be taken for the answer to the next query, and every answer after it would be
shifted by one. :func:`resynchronise` makes the session safe again:

1. **Device clear** (VISA ``viClear``, pyvisa's ``Resource.clear()``). IEEE 488.2-1992,
   5.8 "Device Clear Requirements" (section number from memory, not checked against the
   text): a device clear empties the device's input buffer and output queue, resets the
   message exchange (the parser) and puts ``*OPC``/``*OPC?`` back in their idle states; it
   changes neither the device settings nor the status registers, which is why ``*CLS`` follows
   it at the driver level. On GPIB this is the DCL/SDC message; on a raw TCP socket there is
   no such message, and pyvisa-py's socket session only discards what has arrived.
2. **Drain**: read and discard whatever arrives within a short time.
3. **Marked query**: ``*ESE?;*ESE <n>;*ESE?`` with a number ``n`` never used just before. The
   instrument answers in order (IEEE 488.2-1992 message exchange: responses leave in the order
   the queries came, from memory 6.1), so any reply to an older query arrives *before* the
   answer ``<old>;<n>``: every line read before it is discarded. ``*ESE`` (the standard event
   status enable register, a mandatory IEEE 488.2 common command, 10.10 from memory) is then
   written back to ``<old>``, so nothing the instrument does changes.

After this, no reply to a query sent before the timeout can be read as a later answer,
whatever the link (raw socket, GPIB, USB, serial). The functions here work on the small
:class:`RawSession` surface so that they are tested with a scripted session too.
"""

from __future__ import annotations

import itertools
import re
from dataclasses import dataclass
from typing import Protocol

DRAIN_S = 0.05
"""How long the drain waits for more bytes, s (common practice, no source)."""

MAX_DRAIN_READS = 256
"""Reads before the drain gives up on an instrument that never stops talking."""

MAX_SYNC_READS = 64
"""Lines read while looking for the marked answer."""

_MARKED = re.compile(rb"^\s*\+?(\d+)\s*;\s*\+?(\d+)\s*$")
_NONCES = itertools.cycle(range(1, 255))


class RawSession(Protocol):
    """What resynchronising needs of a session: device clear, raw lines, a timeout."""

    def device_clear(self) -> bool:
        """Send a device clear; False when the link has none (nothing else happens)."""
        ...

    def write_line(self, text: str) -> None: ...

    def read_line(self, timeout_s: float) -> bytes | None:
        """One reply line (without its terminator), or None when nothing came in time."""
        ...


@dataclass(frozen=True)
class ResyncReport:
    """What a resynchronisation did: ``cleared`` (the link took a device clear),
    ``discarded`` (stale lines thrown away, drained or read before the marked answer),
    ``marker`` (the number used)."""

    cleared: bool
    discarded: int
    marker: int

    def describe(self) -> str:
        clear = "device clear sent" if self.cleared else "no device clear on this link"
        return f"{clear}; {self.discarded} stale repl{'y' if self.discarded == 1 else 'ies'} " \
               f"discarded; back in step (marker {self.marker})"


class ResyncFailed(Exception):
    """The marked answer never came: the instrument is not answering at all."""


def next_marker() -> int:
    """A number from 1 to 254, different from the one before (never 0: a cleared
    register reads 0)."""
    return next(_NONCES)


def resynchronise(session: RawSession, *, timeout_s: float) -> ResyncReport:
    """Device clear, drain, then read up to the marked answer (see the module docstring).

    ``timeout_s``: how long to wait for each line of the marked answer, s. Raises
    :class:`ResyncFailed` when the answer does not come.
    """
    cleared = session.device_clear()
    discarded = 0
    for _ in range(MAX_DRAIN_READS):
        if session.read_line(DRAIN_S) is None:
            break
        discarded += 1
    marker = next_marker()
    session.write_line(f"*ESE?;*ESE {marker};*ESE?")
    for _ in range(MAX_SYNC_READS):
        line = session.read_line(timeout_s)
        if line is None:
            raise ResyncFailed(f"no answer to the marked query (*ESE {marker})")
        match = _MARKED.match(line)
        if match is not None and int(match.group(2)) == marker:
            session.write_line(f"*ESE {int(match.group(1))}")
            return ResyncReport(cleared, discarded, marker)
        discarded += 1
    raise ResyncFailed(f"the marked answer (*ESE {marker}) did not come within "
                       f"{MAX_SYNC_READS} lines")
