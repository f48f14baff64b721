"""Figure: 1,000 injected late replies, 0 mis-assigned answers (prints the figures).

Each late reply costs one timeout plus the resynchronisation (device clear, drain, marked
query), so this takes a few minutes; the default suite runs 20 of them
(tests/transport/test_resync.py).
"""

from __future__ import annotations

import time

import pytest

from tests.transport.test_resync import exchange_with_late_replies

pytestmark = pytest.mark.perf


def test_thousand_late_replies_shift_no_answer() -> None:
    t0 = time.perf_counter()
    readings, wrong, late = exchange_with_late_replies(1000)
    elapsed = time.perf_counter() - t0
    print(f"\nlate replies injected: {late}; read-backs: {readings}; mis-assigned: {wrong}; "
          f"{elapsed:.0f} s ({elapsed / late * 1000:.0f} ms per late reply)")
    assert late == 1000
    assert wrong == 0
