"""Which VISA backend pyvisa uses, and who may choose it.

pyvisa takes a backend as a string: ``"@py"`` (pyvisa-py, pure Python, installed with
sweeprig), ``"@ivi"`` (the system's IVI VISA library, found the way pyvisa finds it), or the
path of a shared library, which pyvisa *loads and runs*. A bench file is data that travels
between people and machines, so it may only name a backend from :data:`NAMED_BACKENDS`;
a library path can be given only by the person at the keyboard, with the ``--visa-library``
option of ``run``, ``resume`` and ``safe`` or the :data:`VISA_LIBRARY_ENV` environment variable.

Order of choice: the command-line option, then the environment variable, then the bench
file's ``bench.visa_library``, then ``"@py"``. This module does not import pyvisa.
"""

from __future__ import annotations

import contextlib
import os
from collections.abc import Iterator, Mapping
from contextvars import ContextVar

from sweeprig.units import short_repr

DEFAULT_VISA_LIBRARY = "@py"
VISA_LIBRARY_ENV = "SWEEPRIG_VISA_LIBRARY"

NAMED_BACKENDS: Mapping[str, str] = {
    "@py": "pyvisa-py, the pure-Python backend installed with sweeprig",
    "@ivi": "the system's IVI VISA library, located by pyvisa",
}
"""The backends a bench file may name (backend → what it is)."""

_OVERRIDE: ContextVar[str | None] = ContextVar("sweeprig_visa_library", default=None)


def is_named_backend(value: str) -> bool:
    """Whether ``value`` is one of :data:`NAMED_BACKENDS` (exactly, lower case)."""
    return value in NAMED_BACKENDS


def bench_file_problem(value: str) -> str | None:
    """Why a bench file's ``visa_library`` value is refused, or None when it is allowed."""
    if is_named_backend(value):
        return None
    if value.strip().lower() in NAMED_BACKENDS:
        return f"visa_library {value!r} is not written as a backend name"
    return (f"visa_library {short_repr(value)} is not a named backend: a bench file may not name a "
            "VISA library file, since pyvisa would load and run it")


def bench_file_fix() -> str:
    """The fix for :func:`bench_file_problem`."""
    names = ", ".join(f'"{name}" ({what})' for name, what in NAMED_BACKENDS.items())
    return (f"write one of {names}; to use another VISA library, give its path with "
            f"--visa-library or the {VISA_LIBRARY_ENV} environment variable when you start "
            "the run")


@contextlib.contextmanager
def visa_library_override(value: str | None) -> Iterator[None]:
    """Within the block, use ``value`` (from the command line) whatever the bench file says.

    ``None`` leaves the choice to the environment variable and the bench file.
    """
    token = _OVERRIDE.set(value if value else None)
    try:
        yield
    finally:
        _OVERRIDE.reset(token)


def choose_visa_library(bench_value: str | None = None, *,
                        environ: Mapping[str, str] | None = None) -> str:
    """The backend to open: the command-line override, the environment variable, then
    ``bench_value`` (already checked to be a named backend), then ``"@py"``."""
    override = _OVERRIDE.get()
    if override:
        return override
    env = (os.environ if environ is None else environ).get(VISA_LIBRARY_ENV, "").strip()
    if env:
        return env
    if bench_value and is_named_backend(bench_value):
        return bench_value
    return DEFAULT_VISA_LIBRARY
