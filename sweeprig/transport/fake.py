"""An in-process transport for narrow unit tests.

``FakeTransport(handler)`` turns a plain function into an instrument: the handler receives
each command and returns the reply (``str`` or ``bytes``), or ``None`` for no reply. Wrap a
simulated instrument's ``handle`` method, or write a lambda. Every exchange is recorded in
``log`` (a list of :class:`~sweeprig.transport.base.Transaction`) and ``sent`` (the commands).

A query whose handler returns ``None`` raises :class:`TransportError` as a real timeout would.
A handler may raise :class:`TransportError` itself to act out a dropped connection.
"""

from __future__ import annotations

import time
from collections.abc import Callable

import numpy as np

from sweeprig.errors import TransportError
from sweeprig.transport import blocks
from sweeprig.transport.base import PostedQuery, Transaction, TransactionHook
from sweeprig.transport.settings import DEFAULT_CONNECTION, ConnectionSettings

Handler = Callable[[str], "str | bytes | None"]


class FakeTransport:
    """A :class:`~sweeprig.transport.base.Transport` backed by a function.

    ``resource`` is only a label (default ``"FAKE::INSTR"``). After ``close()`` every
    exchange raises :class:`TransportError` until ``reconnect()``.
    """

    def __init__(
        self,
        handler: Handler,
        *,
        resource: str = "FAKE::INSTR",
        on_transaction: TransactionHook | None = None,
        settings: ConnectionSettings | None = None,
    ) -> None:
        self.handler = handler
        self.settings = settings or DEFAULT_CONNECTION
        self.resource = resource
        self.on_transaction = on_transaction
        self.log: list[Transaction] = []
        self.closed = False
        self.reconnects = 0
        self.device_clears = 0
        self.timeouts_s: list[float | None] = []

    @property
    def sent(self) -> list[str]:
        """Every command sent so far, in order (writes and queries)."""
        return [t.sent for t in self.log]

    def clear_log(self) -> None:
        """Forget the recorded exchanges."""
        self.log.clear()
        self.timeouts_s.clear()

    def _exchange(self, cmd: str) -> str | bytes | None:
        if self.closed:
            raise TransportError(
                f"connection is closed (command {cmd!r})",
                where=self.resource,
                fix="reconnect before sending",
            )
        return self.handler(cmd)

    def _record(self, start: float, t0: float, cmd: str, received: str | None) -> None:
        transaction = Transaction(start, self.resource, cmd, received, time.perf_counter() - t0)
        self.log.append(transaction)
        if self.on_transaction is not None:
            self.on_transaction(transaction)

    def write(self, cmd: str) -> None:
        """Pass ``cmd`` to the handler; any reply is dropped."""
        start, t0 = time.time(), time.perf_counter()
        try:
            self._exchange(cmd)
        except TransportError as exc:
            self._record(start, t0, cmd, f"<error: {exc.what}>")
            raise
        self._record(start, t0, cmd, None)

    def query(self, cmd: str, *, timeout_s: float | None = None) -> str:
        """Pass ``cmd`` to the handler and return its reply as text (trailing newline removed)."""
        start, t0 = time.time(), time.perf_counter()
        self.timeouts_s.append(timeout_s)
        try:
            reply = self._exchange(cmd)
            if reply is None:
                raise TransportError(
                    f"no reply to {cmd!r} (timeout)",
                    where=self.resource,
                    fix="check that the command is a query the instrument understands",
                )
            if isinstance(reply, bytes | bytearray):
                try:
                    reply = bytes(reply).decode("ascii")
                except UnicodeDecodeError as exc:
                    raise TransportError(
                        f"reply to {cmd!r} is not ASCII text",
                        where=self.resource,
                        fix="check the instrument's data format",
                    ) from exc
        except TransportError as exc:
            self._record(start, t0, cmd, f"<error: {exc.what}>")
            raise
        text = reply.rstrip("\r\n")
        self._record(start, t0, cmd, text)
        return text

    def post(self, cmd: str) -> PostedQuery:
        """A query whose reply :meth:`collect` reads: the handler answers it then."""
        return PostedQuery(cmd, time.time(), time.perf_counter())

    def collect(self, posted: PostedQuery, *, timeout_s: float | None = None) -> str:
        """The reply to ``posted``, as :meth:`query` gives it."""
        return self.query(posted.cmd, timeout_s=timeout_s)

    def query_binary_floats(self, cmd: str, *, timeout_s: float | None = None) -> np.ndarray:
        """Pass ``cmd`` to the handler and decode its reply as a block of floats in the byte
        order and data type of ``settings`` (big-endian REAL,32 by default)."""
        start, t0 = time.time(), time.perf_counter()
        self.timeouts_s.append(timeout_s)
        where = f"{self.resource}, command {cmd!r}"
        try:
            reply = self._exchange(cmd)
            if reply is None:
                raise TransportError(f"no reply to {cmd!r} (timeout)", where=self.resource)
            data = reply.encode("latin-1") if isinstance(reply, str) else bytes(reply)
            big = self.settings.byte_order == "big"
            if self.settings.datatype == "real64":
                payload = blocks.parse_block(data, where=where)
                if len(payload) % 8:
                    raise TransportError(f"a REAL,64 block of {len(payload)} bytes",
                                         where=where)
                values = np.frombuffer(payload, dtype=">f8" if big else "<f8").astype(float)
            else:
                values = blocks.parse_real32_block(data, big_endian=big, where=where)
        except TransportError as exc:
            self._record(start, t0, cmd, f"<error: {exc.what}>")
            raise
        except UnicodeEncodeError as exc:
            self._record(start, t0, cmd, "<error: reply is not bytes>")
            raise TransportError(f"reply to {cmd!r} is not a block", where=self.resource) from exc
        self._record(start, t0, cmd, f"<REAL,32 block: {values.size} values>")
        return values

    def clear_device(self) -> str:
        """A device clear: recorded, nothing else (the handler answers in step)."""
        self.device_clears += 1
        start, t0 = time.time(), time.perf_counter()
        self._record(start, t0, "<device clear>", "back in step")
        return "device clear sent; back in step"

    def close(self) -> None:
        """Mark the connection closed."""
        self.closed = True

    def reconnect(self) -> None:
        """Open the connection again and count the reconnect."""
        self.closed = False
        self.reconnects += 1
