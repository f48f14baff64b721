"""Where SIGHUP does not exist (Windows) the package still imports and runs, and nothing
asks the operating system whether a process id is alive (that means something else there)."""

from __future__ import annotations

import subprocess
import sys
import textwrap
from pathlib import Path

WITHOUT_SIGHUP = textwrap.dedent("""
    import importlib, os, pkgutil, signal, sys

    del signal.SIGHUP  # as on Windows

    def no_pid_probe(*args):
        raise AssertionError(f"os.kill{args}: a PID probe")

    os.kill = no_pid_probe

    import sweeprig
    for module in pkgutil.walk_packages(sweeprig.__path__, "sweeprig."):
        if not module.name.endswith("__main__"):  # that one runs the command line
            importlib.import_module(module.name)

    from typer.testing import CliRunner
    from sweeprig.cli.main import app
    from sweeprig.engine.session import shipped_sequences_dir

    store = sys.argv[1]
    quick = str(shipped_sequences_dir() / "demo" / "quick.toml")
    for args in (["run", quick, "--sim", "--store", store, "--quiet", "--no-report"],
                 ["runs", "--store", store], ["status", "1", "--store", store]):
        result = CliRunner().invoke(app, args)
        assert result.exit_code == 0, (args, result.output, result.exception)
        print(result.output)
""")


def test_the_package_imports_and_runs_without_sighup(tmp_path: Path) -> None:
    done = subprocess.run([sys.executable, "-c", WITHOUT_SIGHUP, str(tmp_path / "s.sqlite")],
                          capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stdout + done.stderr
    assert "complete" in done.stdout


#: Unit tests run where SIGHUP does not exist: the stop signals' (what SIGHUP's absence
#: touches; one file, so the test stays short; the package's import and a run are the test
#: above). pytest itself starts after SIGHUP is deleted, so every import sees a signal module
#: like Windows' (Python documentation, signal module: on Windows, signal() accepts only
#: SIGABRT, SIGFPE, SIGILL, SIGINT, SIGSEGV, SIGTERM or SIGBREAK).
UNIT_TESTS_WITHOUT_SIGHUP = ("tests/test_signals.py",)

PYTEST_WITHOUT_SIGHUP = textwrap.dedent("""
    import signal, sys
    del signal.SIGHUP  # as on Windows, before pytest or sweeprig is imported
    import pytest
    sys.exit(pytest.main(["-q", "-x", "-p", "no:cacheprovider", *sys.argv[1:]]))
""")


def test_unit_tests_pass_without_sighup() -> None:
    root = Path(__file__).resolve().parent.parent
    done = subprocess.run([sys.executable, "-c", PYTEST_WITHOUT_SIGHUP,
                           *UNIT_TESTS_WITHOUT_SIGHUP], capture_output=True, text=True,
                          timeout=300, cwd=root)
    assert done.returncode == 0, done.stdout[-4000:] + done.stderr[-2000:]
    assert " passed" in done.stdout and " failed" not in done.stdout
