"""The ``sweeprig`` command's entry point: stop signals handled before anything else.

The stop handlers (SIGINT, SIGTERM, SIGHUP) are installed before the command line and its
libraries are imported, so a signal at any moment ends in one message and a non-zero exit,
never a traceback: during start-up, during a run (which then makes the bench safe and
records itself as aborted) or while it finishes (later signals are only recorded).
"""

from __future__ import annotations

import sys
from collections.abc import Callable

_STARTING = "sweeprig: stopped by SIGINT (Ctrl-C) while starting; nothing was done"


def main() -> None:
    """Console entry point (``sweeprig ...`` and ``python -m sweeprig ...``)."""
    stops = None
    try:
        from sweeprig.signals import RunStopped, install
    except KeyboardInterrupt:  # before the handlers were installed
        _say(_STARTING)
        raise SystemExit(130) from None
    try:
        stops = install()
        if stops is not None:
            # Held while the libraries load: a stop raised inside their import-time machinery
            # (a schema being built, an import lock's callback) could come out as their error.
            with stops.shielded():
                app = _import_app()
            stops.raise_pending()
        else:
            app = _import_app()
        app()
    except RunStopped as stop:
        _say(f"sweeprig: {stop}; nothing more was done")
        raise SystemExit(stop.exit_code) from None
    except Exception as exc:
        if stops is None or not stops.raised or stops.requested is None:
            raise
        # The stop was raised inside a library that wrapped it in an error of its own.
        stop = RunStopped(stops.requested)
        _say(f"sweeprig: {stop}; nothing more was done (it ended: {type(exc).__name__})")
        raise SystemExit(stop.exit_code) from None
    except KeyboardInterrupt:  # the handlers could not be installed
        _say(_STARTING)
        raise SystemExit(130) from None
    finally:
        if stops is not None:
            _quiet_exit()


def _import_app() -> Callable[[], object]:
    """The command line's app, imported with the cyclic garbage collector paused: the import
    makes hundreds of thousands of objects (models, schemas, dataclasses) and none of them is
    garbage, so collections during it are wasted (about 3 % of ``sweeprig check``'s start-up).
    Everything made so far is then moved out of the collector's sight (``gc.freeze``): it
    lives as long as the process, and later collections need not walk it again."""
    import gc

    was_enabled = gc.isenabled()
    gc.disable()
    try:
        from sweeprig.cli.main import app
    finally:
        gc.freeze()
        if was_enabled:
            gc.enable()
    return app


def _quiet_exit() -> None:
    """The work is done and the process is ending: ignore further stop signals, so that one
    arriving while the interpreter shuts down neither interrupts it nor kills the process
    (the interpreter would put the default action back for a handler of its own)."""
    import signal

    from sweeprig.signals import STOP_SIGNALS, active

    stops = active()
    if stops is not None:
        stops.begin_stop_path()
    for sig in STOP_SIGNALS:
        try:
            signal.signal(sig, signal.SIG_IGN)
        except (ValueError, OSError):
            continue


def _say(text: str) -> None:
    try:
        sys.stderr.write(text + "\n")
        sys.stderr.flush()
    except (OSError, ValueError):  # no stderr (a closed pipe): the exit code says it
        pass
