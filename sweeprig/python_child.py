"""Whether this program can start a child Python interpreter (``sys.executable -c CODE``).

The report's table helper (:mod:`sweeprig.report.table_writing`) and the store's readers of a
large run's readings (:mod:`sweeprig.store.arrow_reader`, :mod:`sweeprig.store.side_reader`)
each run a short program in a fresh interpreter. That needs ``sys.executable`` to be a Python
interpreter: it is empty in an embedded interpreter, and in a frozen program it is the program
itself, which would take ``-c`` as one of its own options. Each falls back to doing the work
in this process instead.
"""

from __future__ import annotations

import sys


def python_child_possible() -> bool:
    """True when ``sys.executable`` can run ``-c`` code (not embedded, not frozen)."""
    return bool(sys.executable) and not getattr(sys, "frozen", False)
