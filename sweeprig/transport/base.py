"""The transport protocol: how a driver talks to one instrument.

A transport carries SCPI text to one VISA resource and brings the reply back. Drivers receive
a transport and never import pyvisa; tests give them a
:class:`~sweeprig.transport.fake.FakeTransport`.

Every failure of the link (timeout, dropped connection, garbled reply) is raised as
:class:`sweeprig.errors.TransportError` naming the resource and the command.

An optional transaction hook (``on_transaction``) is called after every write and query with a
:class:`Transaction`; the engine uses it for the bus log. The hook must not raise.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Protocol, runtime_checkable

import numpy as np

from sweeprig.errors import TransportError


@dataclass(frozen=True)
class Transaction:
    """One exchange with an instrument.

    ``time_s``: wall-clock start, seconds since the Unix epoch (UTC).
    ``resource``: the VISA resource string.
    ``sent``: the command text (without the termination character).
    ``received``: the reply text; ``None`` for a write; for a binary block a short summary
    such as ``"<REAL,32 block: 1001 values>"``; ``"<error: ...>"`` when the exchange failed.
    ``duration_s``: wall-clock duration of the exchange, s.
    """

    time_s: float
    resource: str
    sent: str
    received: str | None
    duration_s: float


TransactionHook = Callable[[Transaction], None]


@dataclass(frozen=True)
class PostedQuery:
    """A query sent whose reply is read later (:meth:`Transport.collect`): several
    instruments then work on their messages at once, as on a bench where each has its own
    link. ``start_s``/``t0``: wall-clock and ``perf_counter`` start, s (for the bus log)."""

    cmd: str
    start_s: float
    t0: float


class ReplyTimeout(TransportError):
    """No reply within the timeout.

    ``resynced``: the transport then device-cleared the session, drained it and read up to a
    marked answer (:mod:`sweeprig.transport.resync`), so a late reply to the lost query can
    no longer be read as the answer to a later one; ``resync``: what it did, for the run's
    events. False when it could not (the instrument is not answering at all): reconnect.
    """

    resynced: bool = False
    resync: str = ""


@runtime_checkable
class Transport(Protocol):
    """What a driver needs of a connection to one instrument.

    ``query`` and ``query_binary_floats`` accept an optional ``timeout_s`` for exchanges that
    take longer than usual (waiting on ``*OPC?`` after a long sweep); ``None`` keeps the
    transport's own timeout.
    """

    resource: str
    on_transaction: TransactionHook | None

    def write(self, cmd: str) -> None:
        """Send ``cmd`` (no reply expected)."""
        ...

    def query(self, cmd: str, *, timeout_s: float | None = None) -> str:
        """Send ``cmd`` and return the reply text without its termination character."""
        ...

    def query_binary_floats(self, cmd: str, *, timeout_s: float | None = None) -> np.ndarray:
        """Send ``cmd`` and decode the reply, an IEEE 488.2 definite-length block of
        big-endian 32-bit floats (SCPI ``REAL,32`` with ``FORMat:BORDer NORMal``)."""
        ...

    def post(self, cmd: str) -> PostedQuery:
        """Send query ``cmd`` without waiting for its reply; :meth:`collect` reads it. Any
        other exchange on this transport first reads (and logs as discarded) the replies
        posted and not collected, so a reply is never taken as the answer to a later
        query."""
        ...

    def collect(self, posted: PostedQuery, *, timeout_s: float | None = None) -> str:
        """The reply to ``posted`` (as :meth:`query` returns it); a timeout is handled as
        :meth:`query` handles it."""
        ...

    def close(self) -> None:
        """Release the connection (idempotent)."""
        ...

    def reconnect(self) -> None:
        """Close and open the connection again (after a dropped socket or a timeout)."""
        ...
