"""The simulated bench's read-ahead: a stepped sweep recognised, its next points evaluated
together (the model's vectorised sweep path), each answer the one evaluating on demand gives
(1e-9 dB); and self-heating with one model evaluation per point (no sockets)."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pytest

from sweeprig.sim.mixer import MixerPart, MixerResponse, OperatingPoint, ToneInput, load_part
from sweeprig.sim.read_ahead import FIRST_AHEAD, ReadAhead, context_of
from sweeprig.sim.world import SimWorld, WorldConfig
from tests.sim.world_stand_ins import Chamber, Source, Supply, Switch

#: Power difference allowed between read-ahead and on-demand lines, dB (issue 14's figure).
TOL_DB = 1e-9


@dataclass
class OnDemand:
    """The part without its sweep path: the world evaluates every point on its own."""

    part: MixerPart

    def evaluate(self, op: OperatingPoint, lo: ToneInput | None,
                 rf: Sequence[ToneInput]) -> MixerResponse:
        return self.part.evaluate(op, lo, rf)

    def supply_current_at(self, op: OperatingPoint) -> float:
        return self.part.supply_current_at(op)


def _bench(model: object, **config: float) -> tuple[SimWorld, dict[str, object]]:
    world = SimWorld(model, WorldConfig(**config))  # type: ignore[arg-type]
    parts: dict[str, object] = {
        "rf": Source(2.2e9, -30.0), "rf2": Source(2.201e9, -30.0),
        "lo": Source(2.1e9, 0.0, harmonics_dbc=(-30.0,)),
        "supply": Supply(output_voltage_v=3.3), "chamber": Chamber(temperature_c=25.0),
        "switch": Switch(),
    }
    world.connect(**parts)  # type: ignore[arg-type]
    return world, parts


def _assert_same(a: MixerResponse, b: MixerResponse, where: str) -> None:
    for port in ("if_port", "rf_port", "lo_port"):
        x, y = a.levels(port), b.levels(port)
        assert x.orders.tolist() == y.orders.tolist(), (where, port)
        np.testing.assert_allclose(x.freq_hz, y.freq_hz, rtol=0, atol=1e-5)
        strong = y.power_dbm > y.power_dbm.max(initial=0.0) - 100.0
        assert np.all(np.abs(x.power_dbm - y.power_dbm)[strong] <= TOL_DB), (where, port)


@pytest.mark.parametrize("heating", [0.0, 40.0])
def test_a_power_sweep_is_read_ahead_and_each_point_is_the_one_evaluated_on_demand(
    heating: float,
) -> None:
    """A two-tone power sweep in 0.1 dB steps (not exact in binary) with source harmonics,
    then a frequency step, a repeated point and a jump: the read-ahead serves most points,
    and every response equals the on-demand world's; with self-heating the die temperature
    is the same as on demand."""
    part = load_part("kx-2417")
    fast, fast_parts = _bench(part, self_heating_c_per_w=heating)
    slow, slow_parts = _bench(OnDemand(part.with_changes()), self_heating_c_per_w=heating)
    plan = [-40.0 + 0.1 * i for i in range(30)] + [-12.0, -12.0, -25.0]
    for i, power in enumerate(plan):
        for parts in (fast_parts, slow_parts):
            for role in ("rf", "rf2"):
                parts[role].delivered_power_dbm = power  # type: ignore[attr-defined]
            if i == 30:  # a frequency step
                parts["rf"].freq_hz = 2.21e9  # type: ignore[attr-defined]
        got, want = fast.response(), slow.response()
        _assert_same(got, want, f"point {i}")
        a, b = fast.evaluation_inputs(got), slow.evaluation_inputs(want)
        assert a is not None and b is not None
        assert a.temperature_c == b.temperature_c
        assert [t.power_dbm for t in a.rf] == pytest.approx([t.power_dbm for t in b.rf],
                                                             abs=1e-10)
    assert fast.read_ahead.served >= 20
    assert slow.evaluations == len(plan) - 1  # one model evaluation a point (one repeat)


def test_requests_that_do_not_follow_the_progression_are_evaluated_on_demand() -> None:
    """A predicted batch none of whose points is asked for stops the read-ahead for a
    while; a request off the predicted values by more than the tolerance is never served
    from a batch."""
    ahead = ReadAhead()
    lo = ToneInput(2.1e9, 0.0)
    ctx = context_of(lo, (ToneInput(2.2e9, -30.0),), 3.3, 25.0)

    def tones(p: float) -> tuple[ToneInput, ...]:
        return (ToneInput(2.2e9, p),)

    assert ahead.plan(ctx, tones(-30.0)) == [] and ahead.plan(ctx, tones(-29.0)) == []
    sets = ahead.plan(ctx, tones(-28.0))
    assert [s[0].power_dbm for s in sets] == [-28.0 + k for k in range(1, FIRST_AHEAD + 1)]
    ahead.store(ctx, sets, [MixerResponse(()) for _ in sets])
    assert ahead.take(ctx, tones(-27.0 + 1e-9)) is None  # outside 1e-10 dB
    assert ahead.take(ctx, tones(-27.0 + 1e-12)) is not None
    assert ahead.plan(ctx, tones(0.0)) == []  # left the sweep: the batch was used once
    assert ahead.plan(ctx, tones(10.0)) == []
    sets = ahead.plan(ctx, tones(20.0))
    assert len(sets) == FIRST_AHEAD  # 0, 10, 20: a progression again, at the first size
    ahead.store(ctx, sets, [MixerResponse(()) for _ in sets])
    assert ahead.plan(ctx, tones(-50.0)) == []  # the batch went unused: a cool-down
    assert ahead.plan(ctx, tones(-49.0)) == [] and ahead.plan(ctx, tones(-48.0)) == []
