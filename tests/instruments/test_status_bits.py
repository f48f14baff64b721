"""Overload and uncalibrated flags read with SCPI-99's questionable bit meanings unless the
profile states its own, and enabled so they feed the status byte's summary bit.

Reference: SCPI-99 Volume 1, chapter 9 "Status Reporting" (from memory): QUEStionable bit 3
POWer, bit 8 CALibration; the summary reaches status-byte bit 3 only through ENABle.
"""

from __future__ import annotations

from sweeprig.instruments import AnalyzerDriver
from sweeprig.instruments.profile import load_profile, parse_profile
from sweeprig.transport.fake import FakeTransport


def test_shipped_profile_takes_the_scpi_defaults() -> None:
    profile = load_profile("scpi-analyzer")
    assert profile.op("overload").mask == 8
    assert profile.op("uncalibrated").mask == 256


def test_prepare_enables_the_flags_bits_and_reads_them() -> None:
    cond = {"value": 256}
    link = FakeTransport(lambda c: str(cond["value"]) if c == "STAT:QUES:COND?" else
                         ("1" if c.endswith("?") else None))
    sa = AnalyzerDriver("sa", link, load_profile("scpi-analyzer"))
    sa.prepare()
    sa.flush()  # the profile joins commands: held until the next message, sent now
    assert any("STAT:QUES:ENAB 264" in sent for sent in link.sent)
    assert sa.sweep_flags() == (False, True)
    cond["value"] = 16  # TEMPerature: neither flag
    assert sa.sweep_flags() == (False, False)


def test_a_profile_states_its_own_bit() -> None:
    text = load_profile("scpi-analyzer").path.read_text(encoding="utf-8")
    text = text.replace('[ops.overload]\nquery = "STAT:QUES:COND?"',
                        '[ops.overload]\nquery = "STAT:QUES:COND?"\nmask = 512')
    profile = parse_profile(text)
    assert profile.op("overload").mask == 512
