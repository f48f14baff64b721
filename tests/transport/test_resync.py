"""After a timed-out query no late reply is read as a later answer: device clear, drain and a
marked query (IEEE 488.2-1992 5.8 device clear, from memory; see sweeprig.transport.resync).

The simulated source holds replies back (``late`` faults) and sends them in order, as an
instrument does: later, or before the reply to the next message.
"""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager

import pytest

from sweeprig.clock import VirtualClock
from sweeprig.sim.faults import FaultPlan
from sweeprig.sim.instruments import SignalSource
from sweeprig.sim.server import ServedBench, serve
from sweeprig.transport.base import ReplyTimeout
from sweeprig.transport.resync import ResyncFailed, resynchronise
from sweeprig.transport.visa import VisaTransport

#: Short enough to keep the test fast; the late reply comes long after it (delay_s).
TIMEOUT_S = 0.1


class _Scripted:
    """A session that answers from a script: stale lines first, then what it is asked."""

    def __init__(self, stale: list[bytes], *, answers: bool = True) -> None:
        self.lines = list(stale)
        self.sent: list[str] = []
        self.answers = answers
        self.ese = 7

    def device_clear(self) -> bool:
        return True

    def write_line(self, text: str) -> None:
        self.sent.append(text)
        if text.startswith("*ESE?;") and self.answers:
            marker = int(text.split(";")[1].split()[1])
            self.lines.append(f"{self.ese};{marker}".encode())
        elif text.startswith("*ESE "):
            self.ese = int(text.split()[1])

    def read_line(self, timeout_s: float) -> bytes | None:
        return self.lines.pop(0) if self.lines else None


def test_resynchronise_discards_everything_before_the_marked_answer() -> None:
    session = _Scripted([b"1", b"2400000000", b"7;3"])  # "7;3": stale, not this marker
    report = resynchronise(session, timeout_s=0.1)
    assert report.cleared
    # the drain read all three (they came before the marked query); the register restored
    assert report.discarded == 3
    assert session.sent[-1] == "*ESE 7" and session.ese == 7


def test_resynchronise_fails_when_nothing_answers() -> None:
    with pytest.raises(ResyncFailed):
        resynchronise(_Scripted([], answers=False), timeout_s=0.01)


@contextmanager
def _late_source(count: int, rate: float) -> Iterator[ServedBench]:
    plan = FaultPlan.from_mapping({"faults": [
        {"role": "rf", "kind": "late", "match": "FREQ?", "rate": rate, "seed": 11,
         "max_count": count, "delay_s": 5.0}]})
    with serve({"rf": SignalSource(VirtualClock())}, faults=plan) as bench:
        yield bench


def exchange_with_late_replies(count: int, *, rate: float = 0.5) -> tuple[int, int, int]:
    """Set a new frequency, read it back, until ``count`` replies came late; each timeout is
    followed by the transport's resynchronisation and the read-back asked again.

    Returns (read-backs, mis-assigned read-backs, late replies injected).
    """
    readings = wrong = 0
    with _late_source(count, rate) as bench, \
            VisaTransport(bench.resources["rf"], timeout_s=TIMEOUT_S) as link:
        step = 0
        while len(bench.faults.log.events("rf")) < count or step < 10:
            step += 1
            freq_hz = 1.0e9 + 1000.0 * step  # every answer differs from every other
            link.write(f"FREQ {freq_hz:.0f}")
            for _attempt in range(40):
                try:
                    reply = link.query("FREQ?")
                except ReplyTimeout as exc:
                    assert exc.resynced, exc.message()
                    continue
                readings += 1
                wrong += float(reply) != freq_hz
                break
            else:
                raise AssertionError(f"step {step}: forty timeouts in a row")
        late = len([e for e in bench.faults.log.events("rf") if e.kind == "late"])
    return readings, wrong, late


def test_twenty_late_replies_shift_no_answer() -> None:
    readings, wrong, late = exchange_with_late_replies(20)
    assert late == 20
    assert wrong == 0 and readings >= 10


def test_without_resync_a_late_reply_would_shift_the_next_answer() -> None:
    """The hazard the resynchronisation removes, shown on plain pyvisa."""
    import pyvisa

    with _late_source(1, 1.0) as bench:
        rm = pyvisa.ResourceManager("@py")
        try:
            inst = rm.open_resource(bench.resources["rf"], read_termination="\n",
                                    write_termination="\n", timeout=int(TIMEOUT_S * 1000))
            inst.write("FREQ 1000000000")
            with pytest.raises(pyvisa.errors.VisaIOError):
                inst.query("FREQ?")
            inst.write("FREQ 2000000000")
            assert inst.query("FREQ?") == "1000000000"  # the late answer, taken as the new one
            inst.close()
        finally:
            rm.close()


def test_clear_device_on_request() -> None:
    with _late_source(1, 1.0) as bench, \
            VisaTransport(bench.resources["rf"], timeout_s=TIMEOUT_S) as link:
        link.write("*ESE 5")
        text = link.clear_device()
        assert "back in step" in text
        assert link.query("*ESE?") == "5"  # the register the marked query used is restored
