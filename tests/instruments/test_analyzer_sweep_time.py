"""The sweep wait comes from the analyzer's own sweep time (SWEep:TIME?), asked once per
configuration, not from the planner's model."""

from __future__ import annotations

from dataclasses import replace

from sweeprig.instruments import AnalyzerDriver
from sweeprig.instruments.profile import load_profile
from sweeprig.transport.fake import FakeTransport


def _analyzer(replies: dict[str, str]) -> tuple[AnalyzerDriver, FakeTransport]:
    def handle(cmd: str) -> str | None:
        return replies.get(cmd) if cmd.endswith("?") or "?" in cmd else None

    link = FakeTransport(handle)
    sa = AnalyzerDriver("sa", link, load_profile("scpi-analyzer"))
    sa.single_units = True  # pins each operation's own text (joined: test_compound)
    return sa, link


def test_wait_and_timeout_follow_the_reported_sweep_time() -> None:
    sa, link = _analyzer({"SENS:SWE:TIME?": "0.25", "*OPC?": "1"})
    sa.configure(centre_hz=70e6, span_hz=20e3, rbw_hz=1e3, averages=4)
    sweep_s, origin = sa.expected_sweep_s(4, planned_s=0.01)
    assert (sweep_s, origin) == (1.0, "instrument")  # 0.25 s × 4 averages, not the plan's
    sa.sweep(sweep_s)
    # *OPC? waits twice the expected time plus the I/O timeout (FakeTransport: 5 s default)
    assert link.timeouts_s[-1] == 2 * 1.0 + 5.0
    sa.expected_sweep_s(4, planned_s=0.01)
    assert link.sent.count("SENS:SWE:TIME?") == 1  # same settings: not asked again
    sa.configure(span_hz=40e3)
    sa.expected_sweep_s(4, planned_s=0.01)
    assert link.sent.count("SENS:SWE:TIME?") == 2  # new settings: asked again
    sa.forget_state()
    sa.expected_sweep_s(4, planned_s=0.01)
    assert link.sent.count("SENS:SWE:TIME?") == 3


def test_a_profile_without_the_query_keeps_the_planned_time() -> None:
    profile = load_profile("scpi-analyzer")
    bare = replace(profile, ops={k: v for k, v in profile.ops.items() if k != "sweep_time"})
    sa = AnalyzerDriver("sa", FakeTransport(lambda _c: "1"), bare)
    assert sa.expected_sweep_s(3, planned_s=0.2) == (0.2, "plan")
