"""Transports: how drivers reach instruments.

``Transport`` (the protocol), ``Transaction`` (one exchange, for the bus log), ``FakeTransport``
(in-process, for tests). ``VisaTransport`` lives in :mod:`sweeprig.transport.visa` (imported
on demand so that pyvisa is loaded only where it is used). Reply parsers:
:mod:`sweeprig.transport.blocks`.
"""

from sweeprig.lazy import lazy_names

#: Where each public name is defined, imported when first asked for (a bench file's check
#: reads :mod:`sweeprig.transport.backend` and :mod:`sweeprig.transport.resources` alone).
_WHERE = {
    "FakeTransport": "sweeprig.transport.fake",
    "Transaction": "sweeprig.transport.base",
    "TransactionHook": "sweeprig.transport.base",
    "Transport": "sweeprig.transport.base",
}

__getattr__ = lazy_names(__name__, _WHERE, globals())

__all__ = sorted(_WHERE)
