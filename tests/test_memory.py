"""Freed memory handed back to the operating system (sweeprig.memory)."""

from __future__ import annotations

import ctypes
import subprocess
import sys

import pytest

from sweeprig.memory import (
    ARROW_POOL_VARIABLE,
    arrow_pool_on_the_c_heap,
    release_freed_memory,
    resident_mb,
)

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


def test_arrow_is_asked_for_the_c_heap_unless_the_user_chose() -> None:
    environ: dict[str, str] = {}
    arrow_pool_on_the_c_heap(environ)
    assert environ == {ARROW_POOL_VARIABLE: "system"}
    chosen = {ARROW_POOL_VARIABLE: "jemalloc"}
    arrow_pool_on_the_c_heap(chosen)
    assert chosen == {ARROW_POOL_VARIABLE: "jemalloc"}


def test_a_process_that_asks_before_loading_pyarrow_gets_the_c_heap() -> None:
    """pyarrow reads the variable when it loads: what the command and the report's children
    rely on (``malloc_trim`` then reaches Arrow's freed memory)."""
    code = ("import os; from sweeprig.memory import arrow_pool_on_the_c_heap; "
            "os.environ.pop('ARROW_DEFAULT_MEMORY_POOL', None); "
            "arrow_pool_on_the_c_heap(os.environ); import pyarrow as pa; "
            "print(pa.default_memory_pool().backend_name)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True, timeout=120)
    assert out.stdout.strip() == "system"


_ARENAS = """
import ctypes, sys, threading
from sweeprig.memory import one_malloc_arena
if sys.argv[1] == "one":
    assert one_malloc_arena() is True
libc = ctypes.CDLL(None)
libc.malloc.restype = ctypes.c_void_p
libc.malloc.argtypes = [ctypes.c_size_t]
def work():
    for _ in range(64):
        ctypes.memset(libc.malloc(65536), 1, 65536)
threads = [threading.Thread(target=work) for _ in range(3)]
for t in threads:
    t.start()
for t in threads:
    t.join()
libc.malloc_stats()  # one "Arena n:" block per arena, on standard error
"""


@pytest.mark.skipif(not GLIBC, reason="mallopt and malloc_stats are glibc's")
def test_one_malloc_arena_serves_every_thread_from_one_arena() -> None:
    def arenas(how: str) -> int:
        done = subprocess.run([sys.executable, "-c", _ARENAS, how], capture_output=True,
                              text=True, check=True, timeout=60)
        return done.stderr.count("Arena ")

    assert arenas("one") == 1
    assert arenas("default") > 1  # (each thread its own, without it)
