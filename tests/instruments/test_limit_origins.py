"""Limits with their origin: the profile's own range named by file and line, bounds that only
ever tighten, and one "≤ limit" rule for the drivers and the pre-flight check."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from sweeprig.errors import InputError, SafetyLimitError
from sweeprig.instruments import make_driver
from sweeprig.instruments.limits import Bound, OpLimits, beyond, profile_limits
from sweeprig.instruments.profile import builtin_profile_dirs, key_line, load_profile
from sweeprig.transport import FakeTransport


def _line(name: str, *key: str) -> int:
    path = next(d / f"{name}.toml" for d in builtin_profile_dirs()
                if (d / f"{name}.toml").is_file())
    return key_line(path.read_text(encoding="utf-8"), key)


def test_profile_limits_name_the_file_line_and_key() -> None:
    limits = profile_limits(load_profile("scpi-source"), "power", "lo")
    assert limits.unit == "dBm" and limits.as_pair() == (-130.0, 20.0)
    high = limits.high
    assert high is not None and high.source == "profile"
    line = _line("scpi-source", "ops", "power", "max")
    assert high.origin == (f"the lo source's profile 'scpi-source' "
                           f"(drivers/scpi-source.toml:{line}: ops.power.max)")
    assert high.describe("dBm").endswith("allows at most 20 dBm")


def test_bounds_only_tighten_and_the_tightest_is_named() -> None:
    limits = OpLimits("power", "dBm", (Bound(20.0, "max", "profile", "profile"),))
    limits = limits.with_bound(Bound(25.0, "max", "bench", "bench"))  # looser: no effect
    assert limits.high is not None and limits.high.origin == "profile"
    limits = limits.with_bound(Bound(15.0, "max", "bench", "bench"))
    assert limits.high is not None and limits.high.origin == "bench"
    assert limits.refusal(15.0) is None
    refused = limits.refusal(16.0)
    assert refused is not None and refused.origin == "bench"


@given(value=st.floats(-1e12, 1e12), bound=st.floats(-1e12, 1e12),
       side=st.sampled_from(["max", "min"]))
def test_one_rule_scalar_and_vectorised(value: float, bound: float, side: str) -> None:
    """The driver's scalar test and the pre-flight's vectorised one are the same function."""
    scalar = Bound(bound, side, "bench", "x").refuses(value)  # type: ignore[arg-type]
    vector = bool(beyond(np.array([value, value]), bound, side)[1])  # type: ignore[arg-type]
    assert scalar == vector
    if side == "max":
        assert scalar == (value > bound + 1e-9 * max(1.0, abs(value)))


def test_the_driver_names_the_profile_and_then_the_bench() -> None:
    source = make_driver("scpi-source", "rf", FakeTransport(lambda _cmd: "1"))
    with pytest.raises(SafetyLimitError) as info:
        source.set_power(21.0)
    text = info.value.message()
    assert "the rf source's profile 'scpi-source' (drivers/scpi-source.toml:" in text
    assert "ops.power.max) allows at most 20 dBm" in text and "bench" not in text
    source.tighten_limit("power", max_value=10.0, origin="the bench file (b.toml:9: x)")
    with pytest.raises(SafetyLimitError, match=r"the bench file \(b.toml:9: x\) allows at most"):
        source.set_power(11.0)
    with pytest.raises(InputError, match=r"ops\.frequency\.max") as freq:
        source.set_frequency(7e9)
    assert not isinstance(freq.value, SafetyLimitError)
    assert "its driver profile" in (freq.value.fix or "")


def test_a_chamber_set_point_beyond_the_profile_is_a_safety_refusal() -> None:
    chamber = make_driver("thermal-chamber", "chamber", FakeTransport(lambda _cmd: "1"))
    with pytest.raises(SafetyLimitError, match=r"ops\.setpoint\.max"):
        chamber.set_setpoint_c(190.0)
