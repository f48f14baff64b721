"""A trace carries the axis the analyzer reports (read back), not the one requested."""

from __future__ import annotations

import numpy as np

from sweeprig.instruments import AnalyzerDriver
from sweeprig.instruments.profile import load_profile
from sweeprig.instruments.trace import Trace
from sweeprig.transport.fake import FakeTransport


def test_axis_is_evenly_spaced_from_start_to_stop() -> None:
    trace = Trace.from_centre_span(70e6, 20e3, np.zeros(5))
    # reference: numpy's own linspace of the read-back edges, both included
    np.testing.assert_allclose(trace.freq_hz, [69.99e6, 69.995e6, 70e6, 70.005e6, 70.01e6])
    assert trace.span_hz == 20e3 and trace.centre_hz == 70e6 and trace.points_agree


def test_the_axis_is_what_the_analyzer_reads_back() -> None:
    # the analyzer clamped the span to 10 kHz and kept 3 points where 20 kHz was asked
    replies: dict[str, str | bytes] = {"SENS:FREQ:CENT?": "70000000", "SENS:FREQ:SPAN?": "10000",
               "SENS:SWE:POIN?": "3", "*OPC?": "1"}
    block = np.array([-90, -20, -91], dtype=">f4").tobytes()
    replies["TRAC:DATA? TRACE1"] = b"#212" + block  # IEEE 488.2 definite-length block

    def answer(cmd: str) -> str | bytes | None:
        return replies.get(cmd)

    link = FakeTransport(answer)
    sa = AnalyzerDriver("sa", link, load_profile("scpi-analyzer"))
    sa.single_units = True  # pins each operation's own text (joined: test_compound)
    sa.configure(centre_hz=70e6, span_hz=20e3)
    trace = sa.read_trace()
    np.testing.assert_allclose(trace.freq_hz, [69.995e6, 70e6, 70.005e6])
    np.testing.assert_allclose(trace.levels_dbm, [-90, -20, -91])
    assert trace.points_reported == 3 and trace.points_agree
    sa.read_trace()
    assert link.sent.count("SENS:FREQ:SPAN?") == 1  # once per configuration
