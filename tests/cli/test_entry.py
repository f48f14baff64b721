"""The command's entry point: a stop signal ends it with one line and the shell's exit code
(128 + the signal's number), even when a library wrapped the stop in an error of its own."""

from __future__ import annotations

import os
import signal
import sys
from collections.abc import Iterator

import pytest

from sweeprig import signals
from sweeprig.cli import entry, main
from sweeprig.signals import STOP_SIGNALS, RunStopped


@pytest.fixture(autouse=True)
def _restore_handlers() -> Iterator[None]:
    before = {sig: signal.getsignal(sig) for sig in STOP_SIGNALS}
    hook = sys.unraisablehook
    yield
    signals.uninstall()
    for sig, handler in before.items():
        signal.signal(sig, handler)
    sys.unraisablehook = hook


def _run(monkeypatch: pytest.MonkeyPatch, app: object) -> int:
    monkeypatch.setattr(main, "app", app)
    with pytest.raises(SystemExit) as ended:
        entry.main()
    return int(ended.value.code or 0)


def test_a_stop_during_the_command_exits_with_128_plus_the_signal(monkeypatch, capsys) -> None:
    def app() -> None:
        signal.raise_signal(signal.SIGTERM)
        signal.raise_signal(signal.SIGINT)  # a second one changes nothing

    assert _run(monkeypatch, app) == 128 + signal.SIGTERM
    err = capsys.readouterr().err
    assert err == "sweeprig: stopped by SIGTERM; nothing more was done\n"


def test_a_stop_wrapped_by_a_library_still_ends_as_the_stop(monkeypatch, capsys) -> None:
    def app() -> None:
        try:
            signal.raise_signal(signal.SIGINT)
        except RunStopped as stop:  # as a library calling back into Python might
            raise ValueError(f"Error building serializer: {stop}") from None

    assert _run(monkeypatch, app) == 128 + signal.SIGINT
    err = capsys.readouterr().err
    assert "stopped by SIGINT (Ctrl-C)" in err and "ValueError" in err
    assert "Traceback" not in err


def test_an_error_without_a_stop_is_not_hidden(monkeypatch) -> None:
    def app() -> None:
        raise ValueError("a real fault")

    monkeypatch.setattr(main, "app", app)
    with pytest.raises(ValueError, match="a real fault"):
        entry.main()


def test_after_the_command_further_signals_are_ignored(monkeypatch) -> None:
    def app() -> None:
        raise SystemExit(0)

    assert _run(monkeypatch, app) == 0
    assert all(signal.getsignal(sig) == signal.SIG_IGN for sig in STOP_SIGNALS)
    signal.raise_signal(signal.SIGTERM)  # the process is ending: nothing happens


def test_the_app_is_imported_with_the_collector_paused_and_left_as_found() -> None:
    import gc

    from sweeprig.cli import entry

    try:
        assert gc.isenabled()
        assert callable(entry._import_app())
        assert gc.isenabled()  # a paused collector would let a long run's cycles pile up
        gc.disable()
        entry._import_app()
        assert not gc.isenabled()  # one the caller paused stays paused
    finally:
        gc.enable()
        gc.unfreeze()


def test_import_frozen_imports_freezes_and_leaves_the_collector_as_found() -> None:
    import gc
    import sys

    from sweeprig.lazy import import_frozen

    try:
        gc.enable()
        import_frozen("sweeprig.plan.risks")
        assert "sweeprig.plan.risks" in sys.modules
        assert gc.isenabled() and gc.get_freeze_count() > 0
        gc.disable()
        import_frozen("sweeprig.plan.risks")
        assert not gc.isenabled()
    finally:
        gc.enable()
        gc.unfreeze()


def test_the_command_asks_for_arrow_s_memory_on_the_c_heap_first(monkeypatch) -> None:
    """Before the command line (and pyarrow) is loaded; a user's own choice is kept."""
    from sweeprig.memory import ARROW_POOL_VARIABLE

    def app() -> None:
        raise SystemExit(0)

    monkeypatch.delenv(ARROW_POOL_VARIABLE, raising=False)
    assert _run(monkeypatch, app) == 0
    assert os.environ[ARROW_POOL_VARIABLE] == "system"
    monkeypatch.setenv(ARROW_POOL_VARIABLE, "mimalloc")
    assert _run(monkeypatch, app) == 0
    assert os.environ[ARROW_POOL_VARIABLE] == "mimalloc"
