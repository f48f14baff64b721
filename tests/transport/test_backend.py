"""Who chooses the VISA backend: a bench file may only name one; a library path comes from
the command line or the environment (pyvisa loads and runs a library it is given)."""

from __future__ import annotations

import pytest

from sweeprig.transport.backend import (
    NAMED_BACKENDS,
    VISA_LIBRARY_ENV,
    bench_file_fix,
    bench_file_problem,
    choose_visa_library,
    visa_library_override,
)


@pytest.mark.parametrize("value", sorted(NAMED_BACKENDS))
def test_named_backends_are_allowed_in_a_bench_file(value: str) -> None:
    assert bench_file_problem(value) is None


@pytest.mark.parametrize("value", [
    "/usr/lib/libvisa.so", "./evil.so", "C:\\Windows\\System32\\visa64.dll", "libvisa.so.7",
    "/opt/lib/libvisa.so@ivi", "@sim", "@PY", " @py", "", "x" * 500,
])
def test_anything_else_is_refused(value: str) -> None:
    problem = bench_file_problem(value)
    assert problem is not None and "visa_library" in problem
    assert len(problem) < 300  # a long value is cut, not echoed whole
    assert "--visa-library" in bench_file_fix() and VISA_LIBRARY_ENV in bench_file_fix()


def test_order_of_choice() -> None:
    assert choose_visa_library(None, environ={}) == "@py"
    assert choose_visa_library("@ivi", environ={}) == "@ivi"
    env = {VISA_LIBRARY_ENV: "/opt/vendor/libvisa.so"}
    assert choose_visa_library("@ivi", environ=env) == "/opt/vendor/libvisa.so"
    with visa_library_override("@py"):
        assert choose_visa_library("@ivi", environ=env) == "@py"
    with visa_library_override(None):
        assert choose_visa_library("@ivi", environ=env) == "/opt/vendor/libvisa.so"
    # a value that is not a named backend is never used, even if it got past the loader
    assert choose_visa_library("/tmp/evil.so", environ={}) == "@py"
