"""Stop signals (SIGINT, SIGTERM, SIGHUP): any number, at any moment, one clean stop.

The first stop signal raises :class:`RunStopped` once, wherever the main thread is (a long
wait, an instrument exchange, loading files). Every later signal is only recorded: it can
never interrupt the path that makes the bench safe and records how the run ended, nor start
a second shutdown. A run's body is :func:`stop_path` inside a function marked
:func:`handles_stop_signals`; code that must not be cut in half runs :func:`uninterrupted`
(recording a new run) or :func:`deferred` (a store transaction); a stop raised where Python
cannot pass it on (a weakref callback, ``__del__``) is delivered again, not lost.

Only the main thread can install signal handlers; elsewhere these helpers do nothing and
signals keep their previous behaviour.
"""

from __future__ import annotations

import _thread
import functools
import signal
import sys
import threading
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from types import FrameType
from typing import ParamSpec, TypeVar

P = ParamSpec("P")
T = TypeVar("T")

STOP_SIGNALS: tuple[signal.Signals, ...] = tuple(
    sig for sig in (signal.SIGINT, signal.SIGTERM, getattr(signal, "SIGHUP", None))
    if sig is not None
)
"""The signals that stop sweeprig: SIGINT (Ctrl-C), SIGTERM and, where it exists, SIGHUP."""


class RunStopped(BaseException):
    """A stop signal arrived. A ``BaseException`` (like ``KeyboardInterrupt``), so that no
    ``except Exception`` on the way (a retry loop, a recovery policy) can swallow it."""

    def __init__(self, signame: str) -> None:
        self.signame = signame
        hint = " (Ctrl-C)" if signame == "SIGINT" else ""
        super().__init__(f"stopped by {signame}{hint}")

    @property
    def exit_code(self) -> int:
        """The shell's convention for a process ended by a signal: 128 + its number."""
        try:
            return 128 + int(signal.Signals[self.signame])
        except KeyError:
            return 1


class StopSignals:
    """The stop state of the process: which signals arrived, whether the stop was raised.

    The handler raises :class:`RunStopped` for the first signal only, and only outside a
    shielded section; inside one, the first signal is kept pending (see
    :meth:`raise_pending`). Every signal is appended to :attr:`received`.
    """

    def __init__(self) -> None:
        self.received: list[str] = []
        self.raised = False
        self._shield_depth = 0
        self._redelivering = False

    @property
    def requested(self) -> str | None:
        """Name of the first stop signal received, or None."""
        return self.received[0] if self.received else None

    @property
    def shield_depth(self) -> int:
        """How many shields (and stop paths) hold signals now; 0: the next one raises."""
        return self._shield_depth

    def handle(self, signum: int, _frame: FrameType | None = None) -> None:
        """The signal handler (main thread, between two Python instructions)."""
        try:
            name = signal.Signals(signum).name
        except ValueError:
            name = f"signal {signum}"
        if self._redelivering:  # the same stop again (see swallowed), not a new signal
            self._redelivering = False
        else:
            self.received.append(name)
        if not self.raised and self._shield_depth == 0:
            self.raised = True
            raise RunStopped(name)

    def swallowed(self, stop: RunStopped) -> None:
        """The stop was raised where Python cannot pass an exception on (a weakref callback
        or a ``__del__`` method: "Exception ignored in ..."): raise it again at the main
        thread's next instruction instead of losing it."""
        try:
            signum = int(signal.Signals[stop.signame])
        except KeyError:
            return
        self.raised = False
        self._redelivering = True
        # From another thread, a moment later, so that it lands after the callback has
        # returned (at once, it would land in the hook reporting the ignored exception).
        threading.Thread(target=_signal_main_thread, args=(signum,), daemon=True,
                         name="sweeprig-stop-again").start()

    @contextmanager
    def shielded(self) -> Iterator[StopSignals]:
        """Inside, signals are only recorded; nothing pending is raised on the way out."""
        self._shield_depth += 1
        try:
            yield self
        finally:
            self._shield_depth -= 1

    def begin_stop_path(self) -> None:
        """From now until :meth:`end_stop_path` (or for good), signals are only recorded."""
        self._shield_depth += 1

    def end_stop_path(self, depth: int) -> None:
        self._shield_depth = depth

    def raise_pending(self) -> None:
        """Raise :class:`RunStopped` now for a signal kept pending by a shield (once)."""
        if self.requested is not None and not self.raised and self._shield_depth == 0:
            self.raised = True
            raise RunStopped(self.requested)


def _signal_main_thread(signum: int) -> None:
    time.sleep(0.005)
    main = threading.main_thread().ident
    kill = getattr(signal, "pthread_kill", None)
    if kill is not None and main is not None:
        kill(main, signum)  # a real signal: it also ends a blocking system call at once
    else:
        _thread.interrupt_main(signum)


_active: StopSignals | None = None
_previous: dict[int, object] = {}
_previous_unraisable_hook = sys.unraisablehook


def _unraisable_hook(unraisable: sys.UnraisableHookArgs) -> None:
    """A stop landing in a weakref callback or ``__del__`` is delivered again, not printed."""
    stops = _active
    if (stops is not None and isinstance(unraisable.exc_value, RunStopped)
            and threading.current_thread() is threading.main_thread()):
        stops.swallowed(unraisable.exc_value)
        return
    _previous_unraisable_hook(unraisable)


def active() -> StopSignals | None:
    """The installed stop state, or None when no handler is installed (or not main thread)."""
    return _active


def install() -> StopSignals | None:
    """Install the stop handlers for the rest of the process (the command line does this
    first thing). Returns the stop state; None when not called from the main thread."""
    global _active
    if _active is not None:
        return _active
    if threading.current_thread() is not threading.main_thread():
        return None
    stops = StopSignals()
    previous: dict[int, object] = {}
    for sig in STOP_SIGNALS:
        try:
            previous[sig] = signal.signal(sig, stops.handle)
        except (ValueError, OSError):  # not the main interpreter, or the signal is not ours
            continue
    _previous.clear()
    _previous.update(previous)
    global _previous_unraisable_hook
    _previous_unraisable_hook = sys.unraisablehook
    sys.unraisablehook = _unraisable_hook
    _active = stops
    return stops


def uninstall() -> None:
    """Put back the handlers that :func:`install` replaced."""
    global _active
    if threading.current_thread() is not threading.main_thread():
        return
    stops, _active = _active, None
    if stops is not None:
        stops.begin_stop_path()  # a signal during the restore is only recorded
    for sig, old in list(_previous.items()):
        try:
            signal.signal(sig, old)  # type: ignore[arg-type]
        except (ValueError, OSError, TypeError):
            continue
    _previous.clear()
    if sys.unraisablehook is _unraisable_hook:
        sys.unraisablehook = _previous_unraisable_hook


@contextmanager
def stop_signals() -> Iterator[StopSignals | None]:
    """The stop state for the duration: the process's own when installed (the command line),
    else installed here and removed on the way out (the Python API in the main thread)."""
    if threading.current_thread() is not threading.main_thread():
        yield None
        return
    if _active is not None:
        yield _active
        return
    stops = install()
    try:
        yield stops
    finally:
        if stops is not None:
            uninstall()


def handles_stop_signals(fn: Callable[P, T]) -> Callable[P, T]:
    """Run ``fn`` with the stop handlers installed; any stop path it began (see
    :func:`stop_path`) ends when it returns, so what follows (the command line's report)
    can be stopped again."""

    @functools.wraps(fn)
    def wrapper(*args: P.args, **kwargs: P.kwargs) -> T:
        with stop_signals() as stops:
            depth = stops.shield_depth if stops is not None else 0
            try:
                return fn(*args, **kwargs)
            finally:
                if stops is not None:
                    stops.end_stop_path(depth)

    return wrapper


@contextmanager
def stop_path() -> Iterator[StopSignals | None]:
    """The body of a run: a first signal inside raises :class:`RunStopped`; on the way out,
    whatever the way (the end, an error, the stop itself), the stop path begins and later
    signals are only recorded, until the function marked :func:`handles_stop_signals`
    returns."""
    stops = _main_thread_stops()
    try:
        yield stops
    finally:
        if stops is not None:
            stops.begin_stop_path()


def _main_thread_stops() -> StopSignals | None:
    if _active is None or threading.current_thread() is not threading.main_thread():
        return None
    return _active


def uninterrupted(fn: Callable[P, T], *args: P.args, **kwargs: P.kwargs) -> T:
    """Call ``fn`` with stop signals only recorded; call :func:`raise_pending` once its
    result is kept (so that, say, a run recorded in the store is never lost track of)."""
    stops = _main_thread_stops()
    if stops is None:
        return fn(*args, **kwargs)
    with stops.shielded():
        return fn(*args, **kwargs)


def raise_pending() -> None:
    """Raise :class:`RunStopped` now if a stop signal arrived during :func:`uninterrupted`."""
    stops = _main_thread_stops()
    if stops is not None:
        stops.raise_pending()


@contextmanager
def deferred() -> Iterator[None]:
    """Hold a stop during a short section that must not be cut in half (a store transaction:
    a stop between its last write and its COMMIT would leave it open); a stop asked meanwhile
    is raised as soon as the section ends without an error (unless an outer section or the
    stop path holds it longer)."""
    stops = _main_thread_stops()
    if stops is None:
        yield
        return
    with stops.shielded():
        yield
    stops.raise_pending()
