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
    import os

    from sweeprig.memory import arrow_pool_on_the_c_heap

    # before anything loads pyarrow: a large report's freed Arrow memory then goes back
    arrow_pool_on_the_c_heap(os.environ)
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
    """The command line's app, imported with the cyclic garbage collector paused and its
    objects frozen after (:func:`sweeprig.lazy.import_frozen`: about 3 % of ``sweeprig
    check``'s start-up), the collector left as found."""
    from sweeprig.lazy import import_frozen

    import_frozen("sweeprig.cli.main")
    from sweeprig.cli.main import app

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
