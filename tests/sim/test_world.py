"""The simulated world: signal paths, cables, supply, chamber, switch, caching (no sockets)."""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
import pytest

from sweeprig.sim.analyzer_display import KT0_DBM_PER_HZ
from sweeprig.sim.mixer.types import MixerResponse, OperatingPoint, Product, ToneInput
from sweeprig.sim.world import (
    CableLoss,
    Cabling,
    DeadMixer,
    SimWorld,
    SwitchChannel,
    WorldConfig,
)
from tests.sim.world_stand_ins import Chamber, Source, Supply, Switch


@dataclass
class StandInMixer:
    """A tiny mixer: 10 dB conversion gain, LO→IF -30 dB, LO→RF -25 dB, 20 mA per volt."""

    calls: list[tuple[OperatingPoint, ToneInput | None, tuple[ToneInput, ...]]] = field(
        default_factory=list
    )

    def evaluate(
        self, op: OperatingPoint, lo: ToneInput | None, rf: Sequence[ToneInput]
    ) -> MixerResponse:
        self.calls.append((op, lo, tuple(rf)))
        if_lines: list[Product] = []
        rf_lines: list[Product] = []
        lo_lines: list[Product] = []
        if lo is not None:
            if_lines.append(Product(lo.freq_hz, lo.power_dbm - 30.0, (1, *(0,) * len(rf))))
            rf_lines.append(Product(lo.freq_hz, lo.power_dbm - 25.0, (1, *(0,) * len(rf))))
            for k, tone in enumerate(rf):
                orders = (-1, *(1 if j == k else 0 for j in range(len(rf))))
                if_lines.append(
                    Product(abs(tone.freq_hz - lo.freq_hz), tone.power_dbm + 10.0, orders)
                )
                lo_lines.append(Product(tone.freq_hz, tone.power_dbm - 40.0, orders))
        return MixerResponse(
            if_port=tuple(if_lines),
            rf_port=tuple(rf_lines),
            lo_port=tuple(lo_lines),
            if_noise_dbm_per_hz=-160.0,
            supply_current_a=0.02 * op.supply_v,
        )


def _world(
    cabling: Cabling | None = None, **config: float
) -> tuple[SimWorld, StandInMixer, dict[str, object]]:
    mixer = StandInMixer()
    world = SimWorld(mixer, WorldConfig(cabling=cabling or Cabling(), **config))
    parts: dict[str, object] = {
        "rf": Source(), "rf2": Source(freq_hz=2.401e9, output_on=False),
        "lo": Source(freq_hz=2.33e9, delivered_power_dbm=5.0, harmonics_dbc=()),
        "supply": Supply(), "chamber": Chamber(), "switch": Switch(),
    }
    world.connect(**parts)  # type: ignore[arg-type]
    return world, mixer, parts


def test_cable_and_combiner_losses_reach_the_dut_ports() -> None:
    cabling = Cabling(rf=CableLoss(1.5), lo=CableLoss(2.0), combiner=CableLoss(3.5))
    world, _, _ = _world(cabling)
    (rf,) = world.rf_inputs()
    assert rf.power_dbm == pytest.approx(-20.0 - 1.5 - 3.5)
    assert rf.harmonics_dbc == (-35.0, -45.0)  # flat loss: harmonics keep their dBc
    lo = world.lo_input()
    assert lo is not None and lo.power_dbm == pytest.approx(3.0)
    assert world.sensed_power_dbm() == pytest.approx(
        10 * math.log10(10 ** (-2.5) + 10 ** (-6.0) + 10 ** (-7.0)), abs=1e-9
    )


def test_sqrt_f_cable_loss_also_tilts_the_harmonics() -> None:
    cable = CableLoss(2.0, ref_freq_hz=1e9)
    assert cable.at(4e9) == pytest.approx(4.0)
    world, _, _ = _world(Cabling(rf=cable))
    (rf,) = world.rf_inputs()
    loss_f = 2.0 * math.sqrt(2.4)
    assert rf.power_dbm == pytest.approx(-20.0 - loss_f)
    assert rf.harmonics_dbc[0] == pytest.approx(-35.0 - (2.0 * math.sqrt(4.8) - loss_f))


def test_second_source_joins_through_the_combiner() -> None:
    world, _, parts = _world(Cabling(rf2=CableLoss(1.0), combiner=CableLoss(3.0)))
    parts["rf2"].output_on = True  # type: ignore[attr-defined]
    tones = world.rf_inputs()
    assert [t.freq_hz for t in tones] == [2.4e9, 2.401e9]
    assert tones[1].power_dbm == pytest.approx(-24.0)
    spectrum = world.analyzer_input()
    freqs = sorted(f for f, _ in spectrum.lines)
    assert freqs == pytest.approx(sorted([2.33e9, 70e6, 71e6]))


def test_analyzer_sees_the_if_port_through_the_if_cable() -> None:
    world, mixer, _ = _world(Cabling(if_=CableLoss(1.0)))
    spectrum = world.analyzer_input()
    lines = dict(spectrum.lines)
    assert lines[70e6] == pytest.approx(-20.0 + 10.0 - 1.0)
    assert lines[2.33e9] == pytest.approx(5.0 - 30.0 - 1.0)
    op = mixer.calls[-1][0]
    assert op.temperature_c == pytest.approx(85.0)
    assert op.supply_v == pytest.approx(5.0)


def test_if_noise_after_a_lossy_cable_tends_to_kt0() -> None:
    # A matched attenuator at T0: N_out = N_in·G + kT0·(1 − G) (Pozar, noise chapter)
    world, _, _ = _world(Cabling(if_=CableLoss(3.0)))
    density = world.analyzer_input().noise_at(np.array([70e6]))[0]
    gain = 10 ** (-0.3)
    kt0_mw = 1.380649e-23 * 290.0 / 1e-3  # Boltzmann (CODATA) at T0 = 290 K
    expected = 10 * math.log10(10 ** (-16.0) * gain + kt0_mw * (1 - gain))
    assert density == pytest.approx(expected, abs=1e-9)


def test_switch_selects_the_port_and_its_path() -> None:
    cabling = Cabling(if_=CableLoss(1.5), rf_port=CableLoss(2.5), lo_port=CableLoss(3.0))
    world, _, parts = _world(cabling)
    parts["switch"].channel = SwitchChannel.RF  # type: ignore[attr-defined]
    rf_port = world.analyzer_input()
    assert [f for f, _ in rf_port.lines] == [2.33e9]
    assert rf_port.lines[0][1] == pytest.approx(5.0 - 25.0 - 2.5)
    assert rf_port.noise_at(np.array([1e9]))[0] == pytest.approx(KT0_DBM_PER_HZ)
    parts["switch"].channel = SwitchChannel.LO  # type: ignore[attr-defined]
    lo_port = world.analyzer_input()
    assert [f for f, _ in lo_port.lines] == [2.4e9]
    assert lo_port.lines[0][1] == pytest.approx(-20.0 - 40.0 - 3.0)


def test_unpowered_mixer_only_leaks() -> None:
    world, mixer, parts = _world()
    parts["supply"].output_on = False  # type: ignore[attr-defined]
    calls = len(mixer.calls)
    lines = dict(world.analyzer_input().lines)
    assert len(mixer.calls) == calls  # the model is not asked: the part is dead
    assert 70e6 not in lines  # no conversion
    dead = DeadMixer()
    assert lines[2.4e9] == pytest.approx(-20.0 - dead.rf_to_if_db)
    assert lines[2.33e9] == pytest.approx(5.0 - dead.lo_to_if_db)
    assert world.supply_current_a(0.0) == 0.0


def test_supply_current_comes_from_the_model() -> None:
    world, mixer, _ = _world()
    assert world.supply_current_a(5.0) == pytest.approx(0.1)
    assert world.supply_current_a(3.3) == pytest.approx(0.066)
    assert mixer.calls[-1][0].supply_v == pytest.approx(3.3)


def test_responses_are_cached_until_something_changes() -> None:
    world, mixer, parts = _world()
    for _ in range(5):
        world.analyzer_input()
        world.sensed_power_dbm()
    assert world.evaluations == 1
    parts["rf"].delivered_power_dbm = -10.0  # type: ignore[attr-defined]
    world.analyzer_input()
    assert world.evaluations == 2
    parts["chamber"].temperature_c = 25.0  # type: ignore[attr-defined]
    world.analyzer_input()
    assert world.evaluations == 3
    assert mixer.calls[-1][0].temperature_c == pytest.approx(25.0)


def test_self_heating_raises_the_die_temperature() -> None:
    world, mixer, _ = _world(self_heating_c_per_w=100.0)
    # 5 V x 0.1 A = 0.5 W, 100 degC/W → +50 degC above the 85 degC probe
    assert world.die_temperature_c() == pytest.approx(135.0, abs=0.02)
    world.analyzer_input()
    assert mixer.calls[-1][0].temperature_c == pytest.approx(135.0, abs=0.02)


def test_sources_off_mean_no_tones() -> None:
    world, _, parts = _world()
    parts["rf"].output_on = False  # type: ignore[attr-defined]
    parts["lo"].output_on = False  # type: ignore[attr-defined]
    assert world.rf_inputs() == []
    assert world.lo_input() is None
    assert world.sensed_power_dbm() < -150.0
    assert world.analyzer_input().lines == ()


def test_world_without_instruments_is_quiet() -> None:
    world = SimWorld(StandInMixer())
    assert world.analyzer_input().lines == ()
    assert world.die_temperature_c() == pytest.approx(23.0)


def test_the_calibration_thru_passes_the_rf_plane_to_every_output_path() -> None:
    world, mixer, parts = _world(Cabling(rf=CableLoss(2.0), if_=CableLoss(1.0),
                                         rf_port=CableLoss(3.0), lo_port=CableLoss(4.0)))
    switch = parts["switch"]
    switch.thru = True  # type: ignore[attr-defined]
    calls = len(mixer.calls)
    for channel, loss in ((1, 1.0), (2, 3.0), (3, 4.0)):
        switch.channel = channel  # type: ignore[attr-defined]
        lines = dict(world.analyzer_input().lines)
        assert lines[2.4e9] == pytest.approx(-22.0 - loss)  # the RF plane's tone, no LO
        assert 70e6 not in lines and 2.33e9 not in lines
    assert len(mixer.calls) == calls  # the part is out of the path
    assert world.supply_current_a(5.0) >= 0.0


def test_the_sensor_reads_the_lo_plane_when_routed_there() -> None:
    world, _, parts = _world(Cabling(lo=CableLoss(2.0)))
    rf_plane = world.sensed_power_dbm()
    parts["switch"].sensor_channel = 5  # type: ignore[attr-defined]
    assert world.sensed_power_dbm() == pytest.approx(3.0)  # the LO's 5 dBm after 2 dB
    assert world.sensed_power_dbm() != pytest.approx(rf_plane)


def test_a_part_that_states_its_supply_current_is_not_evaluated_for_it() -> None:
    """The supply's load line asks a part with ``supply_current_at`` for its current at the
    operating point the response would use (self-heating included): the response's own
    number, without an evaluation; the calibration thru and a dead part draw nothing."""
    from sweeprig.sim.mixer import load_part

    part = load_part("kx-2417")
    world = SimWorld(part, WorldConfig(self_heating_c_per_w=40.0))
    parts = {"rf": Source(), "lo": Source(freq_hz=2.33e9, delivered_power_dbm=5.0),
             "supply": Supply(), "chamber": Chamber(), "switch": Switch()}
    world.connect(**parts)  # type: ignore[arg-type]
    for volts in (5.0, 3.3, 2.9):
        before = world.evaluations
        current = world.supply_current_a(volts)
        assert world.evaluations == before
        assert current == world.response(supply_v=volts).supply_current_a  # bit for bit
        assert world.evaluations == before + 1
    assert world.supply_current_a(0.2) == 0.0  # below the dead-mixer voltage
    parts["switch"].thru = True  # type: ignore[attr-defined]
    assert world.supply_current_a(5.0) == 0.0 == world.response(supply_v=5.0).supply_current_a


def test_repeated_frequencies_reuse_the_path_losses_with_the_same_numbers() -> None:
    """The losses of a source's path are kept per frequency: stepping a source away and
    back gives the very same tones at the DUT ports."""
    cabling = Cabling(rf=CableLoss(1.0, ref_freq_hz=1e9, ripple_db=0.2),
                      lo=CableLoss(2.0, ref_freq_hz=1e9))
    world, _, parts = _world(cabling)
    first = (world.rf_inputs(), world.lo_input())
    parts["rf"].freq_hz = 2.5e9  # type: ignore[attr-defined]
    assert world.rf_inputs() != first[0]
    parts["rf"].freq_hz = 2.4e9  # type: ignore[attr-defined]
    assert (world.rf_inputs(), world.lo_input()) == first


def test_an_analyzer_request_reads_each_source_once_and_gets_the_same_spectrum() -> None:
    """The tones held for one analyzer request are the tones read without holding: the
    spectrum is the one made from the response and the switch's channel directly, and the
    request reads each source's view once (the response, the spurs and the LO ask again)."""
    from sweeprig.sim.bench import build_sim_instruments

    bench = build_sim_instruments()  # the default bench: spurs, mismatch, a noise source
    world, inst = bench.world, bench.instruments
    inst["lo"].handle("FREQ 2.33 GHz;POW 7 dBm;OUTP ON")
    inst["rf"].handle("FREQ 2.4 GHz;POW -20 dBm;OUTP ON")
    inst["dc"].handle("VOLT 5;CURR 0.2;OUTP ON")
    held = world.analyzer_input()
    plain = world._analyzer_input(world.response(), 1)
    assert held.line_arrays()[0].tolist() == plain.line_arrays()[0].tolist()
    assert held.line_arrays()[1].tolist() == plain.line_arrays()[1].tolist()
    grid = np.linspace(60e6, 80e6, 11)
    assert held.noise_at(grid).tolist() == plain.noise_at(grid).tolist()
    assert held.wideband_noise_dbm == plain.wideband_noise_dbm
    assert getattr(world._held, "tones", None) is None  # nothing held after the request

    reads: list[str] = []
    read = world._read_tone_at_port

    def counted(role: str) -> ToneInput | None:
        reads.append(role)
        return read(role)

    world._read_tone_at_port = counted  # type: ignore[method-assign]
    world._last_input = None
    world.analyzer_input()
    assert sorted(reads) == ["lo", "rf", "rf2"]


def test_the_kept_junctions_are_the_matchs_own_numbers() -> None:
    from sweeprig.sim.bench import build_sim_instruments

    world = build_sim_instruments().world
    match = world.config.match
    assert match is not None
    for freq in (2.33e9, 2.4e9, 2.33e9, 70e6):
        for feed, port in (("source_rf", "part_rf"), ("source_lo", "part_lo")):
            assert world._junction_db(feed, port, freq) == match.junction_db(feed, port, freq)


def test_a_tone_moved_by_a_junction_is_the_replaced_tone() -> None:
    """The moved tone is built from the tone's fields directly: the same tone as
    ``dataclasses.replace`` makes (should the tone gain a field, this fails until the move
    carries it)."""
    import dataclasses

    from sweeprig.sim.world import _moved

    assert [f.name for f in dataclasses.fields(ToneInput)] == [
        "freq_hz", "power_dbm", "phase_rad", "harmonics_dbc"]
    tone = ToneInput(2.4e9, -20.0, 0.3, (-35.0, -45.0))
    for db in (0.0, 0.12, -0.4, 1e-17):
        assert _moved(tone, db) == dataclasses.replace(tone, power_dbm=tone.power_dbm + db)
    assert _moved(tone, 0.0) is tone


@pytest.mark.parametrize("hot", [False, True])
def test_the_converted_noise_takes_a_cold_source_as_one_temperature_alike(hot: bool) -> None:
    """With the noise source off its temperature enters the converted noise density as one
    number instead of an array of it: the same density, bit for bit, on the sweep's grid
    and at one frequency; on, the frequency-dependent temperatures are used as before."""
    from sweeprig.sim.bench import build_sim_instruments
    from sweeprig.sim.noise_source import mixer_output_density_mw

    bench = build_sim_instruments()
    world, inst = bench.world, bench.instruments
    inst["lo"].handle("FREQ 2.33 GHz;POW 7 dBm;OUTP ON")
    inst["rf"].handle("FREQ 2.4 GHz;POW -20 dBm;OUTP ON")
    inst["dc"].handle("VOLT 5;CURR 0.2;OUTP ON")
    if hot:
        inst["nsdc"].handle("VOLT 28;CURR 0.1;OUTP ON")
    assert world.noise_source_on() is hot
    fast = world.analyzer_input()
    world._band_temperature_k = world.input_noise_temperature_k  # type: ignore[method-assign]
    world._last_input = None
    plain = world.analyzer_input()
    for freqs in (np.linspace(60e6, 80e6, 1001), np.array([300e6])):
        assert fast.noise_at(freqs).tolist() == plain.noise_at(freqs).tolist()
    assert fast.wideband_noise_dbm == plain.wideband_noise_dbm
    gains = np.array([0.5, 1e-3, 2.0])
    cold = 296.15
    assert mixer_output_density_mw(1e-17, cold, cold, gains, gains).tolist() == \
        mixer_output_density_mw(1e-17, np.full(3, cold), np.full(3, cold), gains,
                                gains).tolist()
