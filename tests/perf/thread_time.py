"""Processor time of the thread inside a method, for the benchmarks of a served bench.

The simulated instruments' server threads and the engine's thread share one process and its
interpreter lock: wall time inside a method would count the waits for the lock as its work,
thread time (``time.thread_time``) does not.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from typing import Any

import pytest


def time_in_thread(monkeypatch: pytest.MonkeyPatch, owner: type, name: str,
                   add: Callable[[Any, float], None]) -> None:
    """Replace ``owner.name`` (for the test) by the same method that, after each call, passes
    its object and the processor time of the calling thread spent in the call (s) to
    ``add``, whether the call returned or raised."""
    original = getattr(owner, name)

    def timed(self: Any, *args: Any, **kwargs: Any) -> Any:
        start = time.thread_time()
        try:
            return original(self, *args, **kwargs)
        finally:
            add(self, time.thread_time() - start)

    monkeypatch.setattr(owner, name, timed)
