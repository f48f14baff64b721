"""Freed memory handed back to the operating system (sweeprig.memory)."""

from __future__ import annotations

import ctypes
import sys

import pytest

from sweeprig.memory import release_freed_memory, resident_mb

GLIBC = sys.platform.startswith("linux") and hasattr(ctypes.CDLL(None), "malloc_trim")


@pytest.mark.skipif(not GLIBC, reason="malloc_trim is glibc's")
def test_freed_heap_blocks_are_given_back() -> None:
    # Blocks below glibc's mmap threshold come from its heap; every other one is kept, so
    # free() cannot shrink the heap at its top: the freed pages stay resident until they
    # are released.
    libc = ctypes.CDLL(None)
    libc.malloc.restype = ctypes.c_void_p
    libc.malloc.argtypes = [ctypes.c_size_t]
    libc.free.argtypes = [ctypes.c_void_p]
    blocks = []
    for _ in range(3200):  # 200 MB in 64 KB blocks
        block = libc.malloc(65536)
        ctypes.memset(block, 1, 65536)  # resident
        blocks.append(block)
    freed, kept = blocks[0::2], blocks[1::2]
    for block in freed:
        libc.free(block)
    before = resident_mb()
    try:
        assert release_freed_memory() is True
        after = resident_mb()
    finally:
        for block in kept:
            libc.free(block)
    assert before - after > 50, (before, after)


def test_release_is_harmless_anywhere() -> None:
    # a second call, with nothing to give back, changes nothing and raises nothing
    release_freed_memory()
    assert release_freed_memory() in (True, False)
    assert resident_mb() > 0 or resident_mb() != resident_mb()  # (NaN where unknown)
