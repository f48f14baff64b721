"""Transports: how drivers reach instruments.

``Transport`` (the protocol), ``Transaction`` (one exchange, for the bus log), ``FakeTransport``
(in-process, for tests). ``VisaTransport`` lives in :mod:`sweeprig.transport.visa` (imported
on demand so that pyvisa is loaded only where it is used). Reply parsers:
:mod:`sweeprig.transport.blocks`.
"""

from sweeprig.transport.base import Transaction, TransactionHook, Transport
from sweeprig.transport.fake import FakeTransport

__all__ = ["FakeTransport", "Transaction", "TransactionHook", "Transport"]
