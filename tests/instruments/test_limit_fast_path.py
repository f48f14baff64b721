"""The limit checks the drivers run for every value they send, made cheap, refuse exactly what
the project's one vectorised rule (:func:`sweeprig.instruments.limits.beyond`) refuses.

Two shortcuts are pinned here: the scalar comparison (:func:`scalar_beyond`, the tightest
bounds found once per :class:`OpLimits`) against the numpy rule over a corpus of values at,
beside and far from every bound of every shipped profile (NaN, infinities and signed zeros
included); and the driver's memo of the last value checked per setting, which must check a
value again once a limit has been tightened.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from sweeprig.errors import InputError, SafetyLimitError
from sweeprig.instruments import make_driver
from sweeprig.instruments.analyzer import AnalyzerDriver
from sweeprig.instruments.limits import (
    LIMIT_TOLERANCE,
    Bound,
    OpLimits,
    beyond,
    profile_limits,
    scalar_beyond,
)
from sweeprig.instruments.profile import load_all_profiles
from sweeprig.transport import FakeTransport


def _reference_refusal(limits: OpLimits, value: float) -> Bound | None:
    """The refusal as it was written before the fast path: the tightest bounds looked up per
    call and each tested with the vectorised rule."""
    def tightest(side: str, pick: type[min] | type[max]) -> Bound | None:
        bounds = [b for b in limits.bounds if b.side == side]
        if not bounds:
            return None
        best = pick(b.value for b in bounds)
        return next(b for b in bounds if b.value == best)

    for bound in (tightest("max", min), tightest("min", max)):
        if bound is not None and bool(beyond(np.asarray(value, dtype=float), bound.value,
                                             bound.side)):
            return bound
    return None


def _values_around(bound: float) -> list[float]:
    slack = LIMIT_TOLERANCE * max(1.0, abs(bound))
    out = [bound, bound + slack, bound - slack, bound + 2 * slack, bound - 2 * slack,
           math.nextafter(bound + slack, math.inf), math.nextafter(bound - slack, -math.inf),
           math.nextafter(bound, math.inf), math.nextafter(bound, -math.inf),
           bound * (1 + 1e-12), bound * (1 - 1e-12), bound + 1.0, bound - 1.0]
    return out


_SPECIAL = [0.0, -0.0, 1.0, -1.0, 1e-300, -1e-300, 1e300, -1e300, math.inf, -math.inf,
            math.nan, 5e-324, 1.0 + 1e-9, 1.0 - 1e-9]


def _corpus() -> list[OpLimits]:
    """Every bounded operation of every shipped profile, and the same with a tighter bench
    bound beside its profile's (two bounds on a side: the tightest must win)."""
    found: list[OpLimits] = []
    for profile in load_all_profiles():
        for name, operation in profile.ops.items():
            if operation.max is None and operation.min is None:
                continue
            limits = profile_limits(profile, name, "x")
            found.append(limits)
            if operation.max is not None:
                found.append(limits.with_bound(Bound(float(operation.max) - 3.0, "max",
                                                     "bench", "bench")))
            if operation.min is not None:
                found.append(limits.with_bound(Bound(float(operation.min) + 0.5, "min",
                                                     "bench", "bench")))
    return found


def test_the_corpus_is_not_empty() -> None:
    assert len(_corpus()) > 20


def test_refusal_matches_the_vectorised_rule_on_every_shipped_limit() -> None:
    checked = 0
    for limits in _corpus():
        values = list(_SPECIAL)
        for bound in limits.bounds:
            values += _values_around(bound.value)
        for value in values:
            assert limits.refusal(value) is _reference_refusal(limits, value), (limits, value)
            checked += 1
    assert checked > 500


@pytest.mark.parametrize("bound", [0.0, -0.0, 20.0, -130.0, 1e-12, 6e9, -1e300, 1e300])
@pytest.mark.parametrize("side", ["max", "min"])
def test_scalar_and_vectorised_rules_agree_at_the_edges(bound: float, side: str) -> None:
    values = _SPECIAL + _values_around(bound)
    vector = beyond(np.array(values), bound, side)  # type: ignore[arg-type]
    for value, expected in zip(values, vector.tolist(), strict=True):
        assert scalar_beyond(value, bound, side == "max") is expected, (value, bound, side)
        assert Bound(bound, side, "bench", "x").refuses(value) is expected  # type: ignore[arg-type]


def test_limits_made_by_replace_and_with_bound_find_their_own_tightest() -> None:
    limits = OpLimits("power", "dBm", (Bound(20.0, "max", "profile", "p"),))
    tighter = limits.with_bound(Bound(10.0, "max", "bench", "b"))
    assert limits.high is not None and limits.high.value == 20.0
    assert tighter.high is not None and tighter.high.origin == "b"
    assert tighter.refusal(15.0) is tighter.high and limits.refusal(15.0) is None
    assert limits == OpLimits("power", "dBm", (Bound(20.0, "max", "profile", "p"),))


def test_a_value_accepted_before_is_refused_after_a_limit_is_tightened() -> None:
    source = make_driver("scpi-source", "rf", FakeTransport(lambda _cmd: "1"))
    source.single_units = True
    assert source.set_power(5.0) is True
    assert source.set_power(5.0) is False  # unchanged: not sent again
    source.tighten_limit("power", max_value=0.0)
    with pytest.raises(SafetyLimitError, match="bench"):
        source.set_power(5.0)  # the same value, the memo's limits are gone
    with pytest.raises(SafetyLimitError):
        source.set_value("power", 5.0, force=True)


def test_the_memo_keeps_types_apart_and_never_takes_nan() -> None:
    source = make_driver("scpi-source", "rf", FakeTransport(lambda _cmd: "1"))
    source.single_units = True
    assert source.set_frequency(1e9) is True
    with pytest.raises(InputError):
        source.set_frequency(True)  # type: ignore[arg-type]  # True == 1 but is no number
    for _ in range(2):
        with pytest.raises(InputError):
            source.set_frequency(math.nan)
    with pytest.raises(InputError):
        source.set_output(1)  # type: ignore[arg-type]  # 1 == True but is no on/off
    assert source.set_output(True) is True


def test_the_memo_of_several_values_gives_what_checking_each_time_gives() -> None:
    """A reading's markers ask for the same few frequencies every point: each is remembered
    (up to ``CHECKED_KEPT`` per setting), and every answer, token or refusal, is the one a
    driver without the memo gives (a fresh memo before every call), through a tightened
    limit and an unhashable value."""
    from sweeprig.instruments.driver import CHECKED_KEPT

    fast, _ = _analyzer()
    slow, _ = _analyzer()
    operation = fast.profile.op("marker_level")
    markers = [70e6, 78.4e6, 61.6e6, 76e6]
    values: list[object] = [*markers * 3, *(float(f) for f in range(CHECKED_KEPT * 2)),
                            *markers, 70_000_000, np.float64(70e6), math.nan, -0.0, 0.0,
                            [70e6], "70e6", True, *markers]

    def answers() -> list[object]:
        out: list[object] = []
        for value in values:
            for sa in (fast, slow):
                if sa is slow:
                    sa._checked_memo.clear()
                try:
                    out.append((sa is fast, sa._checked_token(operation, value)))
                except (InputError, SafetyLimitError) as exc:
                    out.append((sa is fast, type(exc), str(exc)))
        return out

    def agree(out: list[object]) -> None:
        for a, b in zip(out[::2], out[1::2], strict=True):
            assert a[1:] == b[1:]  # type: ignore[index]

    agree(answers())
    assert len(fast._checked_memo["marker_level"][1]) <= CHECKED_KEPT
    for sa in (fast, slow):
        sa.add_bound("marker_level", Bound(72e6, "max", "bench", "a test bench"))
    agree(answers())  # 78.4e6 and 76e6 refused now, remembered or not



def _analyzer() -> tuple[AnalyzerDriver, list[str]]:
    sent: list[str] = []

    def reply(cmd: str) -> str:
        sent.append(cmd)
        return "0"

    sa = make_driver("scpi-analyzer", "sa", FakeTransport(reply))
    assert isinstance(sa, AnalyzerDriver)
    sa.single_units = True
    return sa, sent


SETTINGS: dict[str, float] = dict(centre_hz=70e6, span_hz=1e6, rbw_hz=1e3, ref_level_dbm=0.0,
                                  attenuation_db=10.0, averages=1)


def test_an_analyzer_configuration_it_has_sends_what_setting_by_setting_would() -> None:
    """The analyzer's shortcut for a configuration it already has (the same arguments, every
    setting still cached under the same limits) sends, skips and refuses exactly what the
    settings one by one do: a setting sent otherwise, forgotten or re-limited since goes
    through the checks again, and a NaN never takes the shortcut."""
    fast, fast_sent = _analyzer()
    slow, slow_sent = _analyzer()  # the memo dropped before every configure: no shortcut

    def both(action: str, **kwargs: object) -> None:
        outcomes = []
        for sa, sent in ((fast, fast_sent), (slow, slow_sent)):
            if sa is slow:
                sa._unchanged_memo = None
            sent.clear()
            try:
                result: object = getattr(sa, action)(**kwargs)
            except (InputError, SafetyLimitError) as exc:
                result = type(exc)
            outcomes.append((result, list(sent), sa.settings_skipped))
        assert outcomes[0] == outcomes[1], (action, kwargs)

    both("configure", **SETTINGS)
    for _ in range(3):
        both("configure", **SETTINGS)
    assert fast_sent == [] and fast.settings_skipped == 3 * 8  # eight settings, all skipped
    both("set_value", op="centre", value=71e6)  # sent otherwise: the next configure sends it
    both("configure", **SETTINGS)
    both("configure", **SETTINGS)
    both("forget_state")
    both("configure", **SETTINGS)
    both("configure", **SETTINGS)
    both("add_bound", op="centre",
         bound=Bound(value=60e6, side="max", source="bench", origin="a test bench"))
    both("configure", **SETTINGS)  # refused now, nothing sent
    both("configure", **{**SETTINGS, "centre_hz": 50e6})
    both("configure", **{**SETTINGS, "centre_hz": 50e6})
    for _ in range(2):
        both("configure", **{**SETTINGS, "centre_hz": 50e6, "span_hz": math.nan})


def test_forgetting_the_state_forgets_every_memo_so_everything_is_sent_and_checked_again(
        ) -> None:
    """A recovery or reset calls ``forget_state``: no memo of what was sent or checked before
    it survives (the engine must not take anything from before a fault on trust)."""
    sa, sent = _analyzer()
    sa.configure(**SETTINGS)
    assert sa.configure(**SETTINGS) == 0
    assert sa._unchanged_memo is not None and sa._checked_memo
    first = list(sent)
    sa.forget_state()
    assert sa._unchanged_memo is None and not sa._checked_memo and sa.state() == {}
    sent.clear()
    assert sa.configure(**SETTINGS) > 0
    assert sent == first  # every setting sent again, as on the first configure
