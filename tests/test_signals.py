"""Stop signals in this process (the main thread): the first raises once, later ones are only
recorded, shields hold a stop until their section ends, and handlers are put back."""

from __future__ import annotations

import signal
import threading
import time
import weakref

import pytest

from sweeprig import signals
from sweeprig.signals import (
    STOP_SIGNALS,
    RunStopped,
    deferred,
    handles_stop_signals,
    raise_pending,
    stop_path,
    stop_signals,
    uninterrupted,
)


def test_the_first_signal_raises_once_and_later_ones_are_only_recorded() -> None:
    with stop_signals() as stops:
        assert stops is not None
        with pytest.raises(RunStopped) as caught:
            signal.raise_signal(signal.SIGTERM)
        assert caught.value.signame == "SIGTERM"
        assert str(caught.value) == "stopped by SIGTERM"
        assert caught.value.exit_code == 128 + signal.SIGTERM
        for sig in (*STOP_SIGNALS, *STOP_SIGNALS):
            signal.raise_signal(sig)  # no exception: the stop is already under way
        assert stops.requested == "SIGTERM"
        assert len(stops.received) == 1 + 2 * len(STOP_SIGNALS)


def test_sigint_says_ctrl_c_and_sighup_is_handled_where_it_exists() -> None:
    assert str(RunStopped("SIGINT")) == "stopped by SIGINT (Ctrl-C)"
    assert signal.SIGINT in STOP_SIGNALS and signal.SIGTERM in STOP_SIGNALS
    assert (getattr(signal, "SIGHUP", None) in STOP_SIGNALS) == hasattr(signal, "SIGHUP")


def test_handlers_are_put_back_when_the_api_installed_them() -> None:
    before = {sig: signal.getsignal(sig) for sig in STOP_SIGNALS}
    with stop_signals() as stops:
        assert stops is not None
        assert all(signal.getsignal(sig) == stops.handle for sig in STOP_SIGNALS)
    assert {sig: signal.getsignal(sig) for sig in STOP_SIGNALS} == before
    assert signals.active() is None


def test_a_shield_holds_the_stop_and_raise_pending_releases_it_once() -> None:
    with stop_signals() as stops:
        assert stops is not None

        def record_a_run() -> int:
            signal.raise_signal(STOP_SIGNALS[-1])  # arrives while the run is being recorded
            return 42

        assert uninterrupted(record_a_run) == 42  # the value is kept before the stop is raised
        with pytest.raises(RunStopped):
            raise_pending()
        raise_pending()  # once only


def test_deferred_raises_after_a_clean_section_but_not_over_an_error() -> None:
    with stop_signals():
        steps: list[str] = []
        with pytest.raises(RunStopped), deferred():
            signal.raise_signal(signal.SIGINT)
            steps.append("after the signal")
        assert steps == ["after the signal"]
    with stop_signals() as stops:
        assert stops is not None
        with pytest.raises(ValueError), deferred():
            signal.raise_signal(signal.SIGINT)
            raise ValueError("the section failed")
        assert stops.requested == "SIGINT" and not stops.raised


def test_nested_shields_hold_the_stop_until_the_outermost_ends() -> None:
    with stop_signals() as stops:
        assert stops is not None
        with stops.shielded():
            with deferred():
                signal.raise_signal(signal.SIGTERM)
            assert not stops.raised  # the outer shield still holds it
        with pytest.raises(RunStopped):
            stops.raise_pending()


def test_the_stop_path_lasts_until_the_run_function_returns() -> None:
    seen: list[str] = []

    @handles_stop_signals
    def run() -> str:
        try:
            with stop_path():
                signal.raise_signal(signal.SIGTERM)
        except RunStopped as stop:
            seen.append(str(stop))
        for sig in STOP_SIGNALS:  # the finish: nothing may cut it short
            signal.raise_signal(sig)
        seen.append("finished")
        return "aborted"

    assert run() == "aborted"
    assert seen == ["stopped by SIGTERM", "finished"]


def test_a_signal_only_while_finishing_is_recorded_not_raised() -> None:
    @handles_stop_signals
    def run() -> tuple[str, str | None]:
        with stop_path():
            pass
        signal.raise_signal(signal.SIGINT)  # arrives while the run finishes
        stops = signals.active()
        assert stops is not None
        return "complete", stops.requested

    assert run() == ("complete", "SIGINT")


def test_outside_the_main_thread_nothing_is_installed() -> None:
    results: list[object] = []

    def worker() -> None:
        with stop_signals() as stops:
            results.append(stops)
        results.append(uninterrupted(lambda: "plain call"))
        raise_pending()

    thread = threading.Thread(target=worker)
    thread.start()
    thread.join()
    assert results == [None, "plain call"]


def test_a_stop_landing_in_a_weakref_callback_is_delivered_again_not_lost() -> None:
    class Thing:
        pass

    def callback(_ref: object) -> None:
        signal.raise_signal(signal.SIGTERM)  # the handler runs inside this callback

    with stop_signals() as stops:
        assert stops is not None
        thing = Thing()
        ref = weakref.ref(thing, callback)
        with pytest.raises(RunStopped) as caught:
            del thing  # the callback's RunStopped is "ignored" by Python...
            # ...and raised again here, moments later (a thread of its own sends it: on a
            # loaded machine that thread may start late, so the wait is generous)
            give_up = time.monotonic() + 30.0
            while time.monotonic() < give_up:
                time.sleep(0.001)
        assert caught.value.signame == "SIGTERM"
        assert stops.received == ["SIGTERM"]
        assert ref() is None
