"""Handing freed memory back to the operating system between the stages of a large job.

A large run's reduction frees hundreds of MB at a time (the stored points and readings once
the capture table exists, a pass's old figures once the new ones stand). CPython and NumPy
free through the C library's allocator, and glibc's keeps much of that in its heap: a 4 MB
column freed lets later columns up to that size be carved from the heap (its threshold for
giving large blocks their own pages grows to the largest one freed), and the heap only
shrinks from its top. The process' resident memory then stays at its peak, and the next
stage's growth starts from there. :func:`release_freed_memory` asks glibc to return every
free page of its heap (``malloc_trim(0)``, which since glibc 2.8 releases free pages
anywhere in the heap, not only at its top: glibc's manual page, from memory;
``tests/test_memory.py`` checks it on this system); on any other C library or system it
does nothing. It costs a walk of the heap (milliseconds): for the boundaries of large stages,
not for loops.

Arrow (pandas' text columns, the Parquet files, a large run's Arrow reads) allocates from
an allocator of its own by default (mimalloc or jemalloc, as pyarrow was built), whose
freed pages ``malloc_trim`` cannot reach. :func:`arrow_pool_on_the_c_heap` asks for the C
library's allocator instead, through Arrow's environment variable, read once when pyarrow
first loads (changing the pool later leaves what the first one holds where it is, and the
two together rose higher: measured). The 100k-point report benchmark, with it: the report
process' peak 583 -> 562 to 565 MB, its table helper's 270 -> 239 to 241 MB, the time the
same.
"""

from __future__ import annotations

import ctypes
import sys
from collections.abc import Callable, MutableMapping
from functools import cache, lru_cache


@cache
def _glibc(name: str, *argtypes: type) -> Callable[..., int] | None:
    """glibc's function ``name`` taking ``argtypes`` and returning an int, or None where
    there is none (not Linux, musl, no libc)."""
    if not sys.platform.startswith("linux"):
        return None
    try:
        function = getattr(ctypes.CDLL("libc.so.6"), name)
    except (OSError, AttributeError):
        return None
    function.argtypes = list(argtypes)
    function.restype = ctypes.c_int
    return function  # type: ignore[no-any-return]


def release_freed_memory() -> bool:
    """Return the C heap's free pages to the operating system; True when the allocator has
    a way to (glibc), whether or not it had pages to give back."""
    trim = _glibc("malloc_trim", ctypes.c_size_t)
    if trim is None:
        return False
    trim(0)
    return True


#: glibc's ``mallopt`` parameter for the most arenas its allocator makes (``M_ARENA_MAX``,
#: from its ``malloc.h``).
_M_ARENA_MAX = -8


@lru_cache(maxsize=1)
def one_malloc_arena() -> bool:
    """Ask the C library's allocator (glibc) to serve every thread of this process from one
    arena: a thread's own arena keeps what the thread freed for that thread alone (a
    report's table-feeding thread and Arrow's converting threads each held megabytes of
    freed slices apart from the main heap, which ``malloc_trim`` does not give back
    either). For a process that allocates mostly in one thread at a time (the report:
    measured the same time). Applies to the threads that take an arena from then on. True
    when set (glibc); once a process."""
    mallopt = _glibc("mallopt", ctypes.c_int, ctypes.c_int)
    return mallopt is not None and bool(mallopt(_M_ARENA_MAX, 1))


#: Arrow's environment variable naming its default memory pool.
ARROW_POOL_VARIABLE = "ARROW_DEFAULT_MEMORY_POOL"


def arrow_pool_on_the_c_heap(environ: MutableMapping[str, str]) -> None:
    """Ask, in the environment ``environ`` (``os.environ``, or a child process' own), for
    Arrow's memory from the C library's allocator: for a process that has not loaded
    pyarrow yet (the ``sweeprig`` command at its start, the report's helper processes). A
    value already set (a user's own choice) is kept."""
    environ.setdefault(ARROW_POOL_VARIABLE, "system")


def arrow_child_environment() -> dict[str, str]:
    """A copy of this process' environment for a child process that loads pyarrow, with
    :func:`arrow_pool_on_the_c_heap` asked in it."""
    import os

    environ = dict(os.environ)
    arrow_pool_on_the_c_heap(environ)
    return environ


def resident_mb() -> float:
    """This process's resident memory now, MB (``/proc/self/statm``; NaN where there is
    none)."""
    import resource

    try:
        with open("/proc/self/statm", encoding="ascii") as statm:
            pages = int(statm.read().split()[1])
    except (OSError, IndexError, ValueError):
        return float("nan")
    return pages * resource.getpagesize() / 2**20


def peak_resident_mb() -> float | None:
    """This process's peak resident memory, MB, from ``/proc/self/status`` (``VmHWM``: this
    program's own; the resource module's figure of a process started by fork and exec still
    holds its parent's); None where the system does not say."""
    try:
        with open("/proc/self/status", encoding="ascii", errors="replace") as status:
            text = status.read()
    except OSError:
        return None
    for line in text.splitlines():
        if line.startswith("VmHWM:"):
            return float(line.split()[1]) / 1024.0  # kB
    return None
