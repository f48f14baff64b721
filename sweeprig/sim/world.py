"""The one physical world the simulated instruments share.

Signal flow (powers in dBm, frequencies in Hz, losses in dB, positive = loss)::

    rf source  ─ [low-pass] ─ cable "rf"  ─┐
                               ├─ combiner ─ DUT RF port (power-meter sensor plane)
    rf2 source ─ [low-pass] ─ cable "rf2" ─┘
    lo source  ─ [low-pass] ─ cable "lo"  ─ DUT LO port
    DUT IF port ─ path "if"      ─ RF switch channel 1 ─┐
    DUT RF port ─ path "rf_port" ─ RF switch channel 2 ─┼─ analyzer input
    DUT LO port ─ path "lo_port" ─ RF switch channel 3 ─┘
    power-meter sensor ─ DUT RF input plane (switch channel 4) or LO input plane (channel 5)
    DUT position: the part (switch channel 6) or the calibration thru (channel 7), which
        passes what arrives at the DUT RF input plane, without loss, to every output path
    dc supply ─ DUT supply;  chamber probe ─ DUT die temperature (plus self-heating)

The world reads the instruments' states through small views (protocols below), asks the
mixer model for its response on demand (cached by a key of everything that matters), and
answers the analyzer (input spectrum), the power meter (sensed power) and the supply (load
current). It knows no SCPI. Deterministic: its only random draws are the seeded phases of
the sources' spurious lines (``WorldConfig.spur_phase_seed``), the same on every run.

Sources' spurious lines (non-harmonic, at carrier + offset) are small: the world carries them
through the part linearly instead of giving each its own tone to the mixer model. An RF
source's spur converts to the output at the part's small-signal conversion gain and its
ports' band edges (at
|f_spur − f_LO| for a downconverter, f_spur + f_LO for an up); an LO spur converts each input
tone with the same gain, at its own dBc (LO spurs transfer dB for dB onto the output of a
hard-switched mixer: common practice, no source). A spur line that falls on a part line adds
to it as a voltage with a seeded phase.
"""

from __future__ import annotations

import cmath
import math
import threading
from collections import OrderedDict
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from enum import IntEnum
from functools import lru_cache
from typing import Protocol

import numpy as np

from sweeprig.sim.analyzer_display import KT0_DBM_PER_HZ, InputSpectrum
from sweeprig.sim.mismatch import PortMatch
from sweeprig.sim.mixer.types import MixerResponse, OperatingPoint, Product, ToneInput
from sweeprig.sim.noise_source import NoiseSourceModel, density_mw_per_hz, mixer_output_density_mw
from sweeprig.sim.read_ahead import ReadAhead, context_of

AMBIENT_C = 23.0
_NO_SIGNAL_DBM = -200.0
# Responses kept (a supply in current limit asks for many voltages while one state holds).
_CACHE_ENTRIES = 128


class MixerModel(Protocol):
    """What the world needs of a mixer part (``sweeprig.sim.mixer``'s ``MixerPart``)."""

    def evaluate(
        self, op: OperatingPoint, lo: ToneInput | None, rf: Sequence[ToneInput]
    ) -> MixerResponse: ...


class SourceView(Protocol):
    """A signal source as the world sees it (delivered level includes its level error)."""

    @property
    def freq_hz(self) -> float: ...

    @property
    def delivered_power_dbm(self) -> float: ...

    @property
    def output_on(self) -> bool: ...

    @property
    def harmonics_dbc(self) -> tuple[float, ...]: ...


class SupplyView(Protocol):
    """The DC supply as the world sees it (voltage at its terminals, V)."""

    @property
    def output_voltage_v(self) -> float: ...

    @property
    def output_on(self) -> bool: ...


class ChamberView(Protocol):
    def probe_temperature_c(self) -> float: ...


class SwitchView(Protocol):
    @property
    def channel(self) -> int: ...


@dataclass(frozen=True)
class CableLoss:
    """Insertion loss of one connection, dB (positive).

    ``ref_freq_hz=None``: flat ``loss_db``. Otherwise skin-effect-like loss that grows as
    sqrt(f): ``loss_db · sqrt(f / ref_freq_hz)`` (a·√f, common practice for coaxial cable
    below its dielectric-loss region, no source).
    """

    loss_db: float = 0.0
    ref_freq_hz: float | None = None
    #: Loss ripple versus frequency (standing waves between connectors): peak dB, period Hz,
    #: phase rad; the loss never goes below 0 dB.
    ripple_db: float = 0.0
    ripple_period_hz: float = 300e6
    ripple_phase_rad: float = 0.0

    def at(self, freq_hz: float) -> float:
        """Loss at ``freq_hz``, dB."""
        if self.ref_freq_hz is None:
            loss = self.loss_db
        else:
            loss = self.loss_db * math.sqrt(max(freq_hz, 0.0) / self.ref_freq_hz)
        if self.ripple_db:
            loss = max(0.0, loss + self.ripple_db * math.sin(
                2.0 * math.pi * freq_hz / self.ripple_period_hz + self.ripple_phase_rad))
        return loss


@dataclass(frozen=True)
class LowPassFilter:
    """A low-pass filter at a source's output: Butterworth of ``order`` with its −3 dB
    corner at ``corner_hz``, rejection ``10·log10(1 + (f/f_c)^(2·order))`` dB (the
    Butterworth magnitude, Pozar, filter design chapter), no loss in the pass band."""

    corner_hz: float
    order: int = 5

    def at(self, freq_hz: float) -> float:
        """Rejection at ``freq_hz``, dB (positive)."""
        ratio = max(freq_hz, 0.0) / self.corner_hz
        return 10.0 * math.log10(1.0 + ratio ** (2 * self.order))


@dataclass(frozen=True)
class NotchFilter:
    """A band-stop left in a source's output path (a planted fault: a filter from another
    set-up, a connector that resonates): ``depth_db`` of loss over ``center_hz`` ±
    ``width_hz``/2, none outside. An idealised flat stop band (no source): it buries one
    frequency's tone while its neighbours pass, which no cable's smooth loss can do."""

    center_hz: float
    width_hz: float
    depth_db: float

    def at(self, freq_hz: float) -> float:
        """Rejection at ``freq_hz``, dB (positive)."""
        return self.depth_db if abs(freq_hz - self.center_hz) <= 0.5 * self.width_hz else 0.0


@dataclass(frozen=True)
class Cabling:
    """Losses of every connection of the simulated bench.

    ``rf``, ``rf2``, ``lo``: source to DUT port (``rf`` and ``rf2`` then pass the
    ``combiner``); ``if_``, ``rf_port``, ``lo_port``: DUT port to the analyzer input through
    the switch (channels 1, 2, 3).
    """

    rf: CableLoss = field(default_factory=CableLoss)
    rf2: CableLoss = field(default_factory=CableLoss)
    lo: CableLoss = field(default_factory=CableLoss)
    if_: CableLoss = field(default_factory=CableLoss)
    combiner: CableLoss = field(default_factory=CableLoss)
    rf_port: CableLoss = field(default_factory=CableLoss)
    lo_port: CableLoss = field(default_factory=CableLoss)
    #: The combiner's imbalance: extra loss of the rf2 input over the rf input, dB.
    combiner_imbalance_db: float = 0.0


@dataclass(frozen=True)
class DeadMixer:
    """Passive leakage of an unpowered mixer (no conversion), dB of isolation (positive)."""

    rf_to_if_db: float = 45.0
    lo_to_if_db: float = 40.0
    lo_to_rf_db: float = 35.0
    min_supply_v: float = 0.5


@dataclass(frozen=True)
class WorldConfig:
    """Everything about the world that is not an instrument setting."""

    cabling: Cabling = field(default_factory=Cabling)
    dead_mixer: DeadMixer = field(default_factory=DeadMixer)
    self_heating_c_per_w: float = 0.0
    ambient_c: float = AMBIENT_C
    temperature_resolution_c: float = 0.01
    source_filters: tuple[tuple[str, LowPassFilter], ...] = ()
    #: Band-stops in the sources' output paths (planted faults): (role, filter).
    source_notches: tuple[tuple[str, NotchFilter], ...] = ()
    spur_phase_seed: int = 0
    spur_delay_s: float = 2e-9
    #: The noise source at the DUT RF input plane (None: none on this bench; the DUT input
    #: then sits at T0, as before noise sources were modelled).
    noise_source: NoiseSourceModel | None = None
    #: Interfering lines picked up on the IF path ahead of the analyzer (a nearby
    #: transmitter, a switching supply): (Hz, dBm at the analyzer input).
    interferers: tuple[tuple[float, float], ...] = ()
    #: Port mismatch: a reflection coefficient per connection (None: every port matched).
    match: PortMatch | None = None

    def source_filter(self, role: str) -> LowPassFilter | None:
        """The low-pass filter at a source's output (``rf``, ``rf2``, ``lo``), or None."""
        for name, filt in self.source_filters:
            if name == role:
                return filt
        return None


@dataclass(frozen=True)
class SpurLine:
    """A line made from a source's spurious output: frequency (Hz), complex amplitude at the
    DUT port (sqrt(mW), with its seeded phase), the source role that made it."""

    freq_hz: float
    amplitude: complex
    role: str


@dataclass(frozen=True)
class EvaluationInputs:
    """The inputs of one model evaluation: LO and input tones at the DUT ports, supply
    volts and the die temperature used (degC)."""

    lo: ToneInput | None
    rf: tuple[ToneInput, ...]
    supply_v: float
    temperature_c: float


class SwitchChannel(IntEnum):
    """RF switch channels: which DUT port the analyzer sees."""

    IF = 1
    RF = 2
    LO = 3


class SimWorld:
    """Ties the simulated instruments together around one mixer part.

    Build it, build the instruments with its callbacks (:meth:`analyzer_input`,
    :meth:`sensed_power_dbm`, :meth:`supply_current_a`), then :meth:`connect` the instrument
    views. Thread-safe: the instruments run in server threads.
    """

    def __init__(self, part: MixerModel, config: WorldConfig | None = None) -> None:
        self.part = part
        self.config = config or WorldConfig()
        self._sources: dict[str, SourceView | None] = {"rf": None, "rf2": None, "lo": None}
        self._supply: SupplyView | None = None
        self._chamber: ChamberView | None = None
        self._switch: SwitchView | None = None
        self._ns_supply: SupplyView | None = None
        self._ns_output: Callable[[], bool] | None = None
        self._lock = threading.RLock()
        self._cache: OrderedDict[tuple[object, ...], MixerResponse] = OrderedDict()
        self._inputs: dict[int, tuple[MixerResponse, EvaluationInputs]] = {}
        self.evaluations = 0  # number of model evaluations (cache misses), for tests
        self._read_ahead = ReadAhead()
        self._last_input: tuple[MixerResponse, int, InputSpectrum] | None = None
        # (role, frequency Hz, the source's harmonics dBc) → the path's loss there (dB) and
        # the harmonics at the DUT port (dBc); (role, a spur's frequency Hz) → the path's loss
        # there (dB): the paths are fixed, the sources step
        self._path_losses: dict[tuple[object, ...], tuple[float, tuple[float, ...]]] = {}
        self._spur_losses: dict[tuple[str, float], float] = {}
        # (feed port, port, frequency Hz) → the junction's mismatch, dB: the ports are
        # fixed, the sources step
        self._junctions: dict[tuple[str, str, float], float] = {}
        # the tones at the DUT ports as one analyzer request read them (role → tone), held
        # by the thread making that request while it lasts (see analyzer_input)
        self._held = threading.local()

    def connect(
        self,
        *,
        rf: SourceView | None = None,
        rf2: SourceView | None = None,
        lo: SourceView | None = None,
        supply: SupplyView | None = None,
        chamber: ChamberView | None = None,
        switch: SwitchView | None = None,
        ns_supply: SupplyView | None = None,
        ns_output: Callable[[], bool] | None = None,
    ) -> None:
        """Attach the instruments' views (any may be absent). ``ns_supply``: the supply
        output driving the noise source; ``ns_output``: whether the analyzer's own
        noise-source output is on (what drives it depends on the source's ``driven_by``)."""
        with self._lock:
            self._ns_supply = ns_supply
            self._ns_output = ns_output
            self._sources = {"rf": rf, "rf2": rf2, "lo": lo}
            self._supply, self._chamber, self._switch = supply, chamber, switch
            self._cache.clear()
            self._inputs.clear()
            self._last_input = None
            self._path_losses.clear()
            self._spur_losses.clear()
            self._junctions.clear()
            self._read_ahead = ReadAhead()

    # --- the DUT's inputs -------------------------------------------------------------
    def rf_inputs(self) -> list[ToneInput]:
        """Tones at the DUT RF port (after cable and combiner), in source order rf, rf2."""
        tones = []
        for role in ("rf", "rf2"):
            tone = self._tone_at_port(role)
            if tone is not None:
                tones.append(tone)
        return tones

    def lo_input(self) -> ToneInput | None:
        """The tone at the DUT LO port, or None when the LO is off."""
        return self._tone_at_port("lo")

    def thru_fitted(self) -> bool:
        """Whether the calibration thru replaces the part (switch channel 7)."""
        return bool(getattr(self._switch, "thru", False))

    def sensor_at_lo(self) -> bool:
        """Whether the power-meter sensor is at the DUT LO input plane (switch channel 5)."""
        return getattr(self._switch, "sensor_channel", 4) == 5

    def noise_source_on(self) -> bool:
        """Whether the noise source is driven on (its supply on at or above its drive)."""
        ns, supply = self.config.noise_source, self._ns_supply
        if ns is not None and ns.driven_by == "sa":
            return self._ns_output is not None and bool(self._ns_output())
        if ns is None or supply is None or not supply.output_on:
            return False
        return ns.is_on(float(supply.output_voltage_v))

    def noise_source_current_a(self, supply_v: float) -> float:
        """Current the noise source draws at ``supply_v`` volts, A: a diode with its bias
        resistor, 45 mA at 28 V and nothing below 5 V (an invented load line, no source)."""
        if self.config.noise_source is None or supply_v <= 5.0:
            return 0.0
        return 0.045 * (supply_v - 5.0) / 23.0

    def input_noise_temperature_k(self, freq_hz: np.ndarray) -> np.ndarray:
        """Noise temperature at the DUT RF input plane, K (T0 without a noise source)."""
        ns = self.config.noise_source
        f = np.asarray(freq_hz, dtype=float)
        if ns is None:
            return np.full(f.shape, 290.0)
        return ns.temperature_k(f, self.noise_source_on())

    def _band_temperature_k(self, freq_hz: np.ndarray) -> np.ndarray | float:
        """:meth:`input_noise_temperature_k` for the converted noise: while the noise source
        is off its temperature is one number (the array of it, as a number: the output
        density takes it elementwise alike, bit for bit)."""
        ns = self.config.noise_source
        if ns is not None and not self.noise_source_on():
            return ns.cold_k
        return self.input_noise_temperature_k(freq_hz)

    def probe_temperature_c(self) -> float:
        """Chamber probe temperature (ambient without a chamber), degC."""
        if self._chamber is not None:
            return float(self._chamber.probe_temperature_c())
        return self.config.ambient_c

    def die_temperature_c(self) -> float:
        """Die temperature, degC: probe temperature plus self-heating θ·V·I (I: the model's)."""
        base = self.probe_temperature_c()
        theta = self.config.self_heating_c_per_w
        if not theta:
            return base
        return base + theta * self.supply_voltage_v() * self.response().supply_current_a

    def supply_voltage_v(self) -> float:
        """Voltage at the DUT supply pin, V (0 when the supply is off or absent)."""
        supply = self._supply
        if supply is None or not supply.output_on:
            return 0.0
        return float(supply.output_voltage_v)

    def dead_below_v(self) -> float:
        """Supply voltage below which the part counts as unpowered (no supply at all), V.

        Between this and the part's own minimum supply the model itself decides (its bias
        may be off while other currents still flow).
        """
        return self.config.dead_mixer.min_supply_v

    # --- the model, cached ----------------------------------------------------------------
    def response(self, supply_v: float | None = None) -> MixerResponse:
        """The mixer's response for the present source, supply and chamber states.

        ``supply_v`` overrides the supply voltage (the supply asks "what current at V?").
        The instruments' views are read before the world's lock is taken, and the lock is
        never held while calling into an instrument, so instrument threads cannot deadlock.
        """
        lo = self.lo_input()
        rf = tuple(self.rf_inputs())
        volts = self.supply_voltage_v() if supply_v is None else max(0.0, float(supply_v))
        match = self.config.match
        if self.thru_fitted():
            if match is not None:  # the thru hands the RF feed to the output path's load
                load = _LOAD_OF_CHANNEL.get(self._channel(), "load_if")
                rf = tuple(_moved(t, self._junction_db("source_rf", load, t.freq_hz))
                           for t in rf)
            return _thru_response(rf)
        if match is not None:  # the incident waves the part's own ports actually get
            rf = tuple(_moved(t, self._junction_db("source_rf", "part_rf", t.freq_hz))
                       for t in rf)
            if lo is not None:
                lo = _moved(lo, self._junction_db("source_lo", "part_lo", lo.freq_hz))
        temperature = self._rounded(self.probe_temperature_c())
        key = (lo, rf, round(volts, 6), temperature)
        with self._lock:
            hit = self._cache.get(key)
            if hit is not None:
                self._cache.move_to_end(key)
                return hit
            if volts < self.dead_below_v():
                return self._keep(key, self._evaluate(lo, rf, volts, temperature),
                                  EvaluationInputs(lo, rf, volts, temperature))
            used = self._die_temperature_key(lo, rf, volts, temperature)
            context = context_of(lo, rf, key[2], temperature)
            ahead = self._read_ahead.take(context, rf)
            if ahead is not None:  # evaluated ahead with the sweep's earlier points
                tones, value = ahead
                return self._keep(key, value, EvaluationInputs(lo, tones, volts, used))
            many = getattr(self.part, "evaluate_many", None)
            sets = self._read_ahead.plan(context, rf) if many is not None else []
            if not sets:
                value = self._evaluate(lo, rf, volts, used)
                return self._keep(key, value, EvaluationInputs(lo, rf, volts, used))
            self.evaluations += 1
            op = OperatingPoint(temperature_c=used, supply_v=volts)
            value, *rest = many(op, lo, [rf, *sets])
            self._read_ahead.store(context, sets, rest)
            return self._keep(key, value, EvaluationInputs(lo, rf, volts, used))

    def _junction_db(self, feed: str, port: str, freq_hz: float) -> float:
        """``config.match.junction_db(feed, port, freq_hz)``, each answer worked out once
        (the same call, so the same number)."""
        key = (feed, port, freq_hz)
        db = self._junctions.get(key)
        if db is None:
            assert self.config.match is not None
            db = self.config.match.junction_db(feed, port, freq_hz)
            if len(self._junctions) >= _CACHE_ENTRIES:
                self._junctions.clear()
            self._junctions[key] = db
        return db

    def _die_temperature_key(self, lo: ToneInput | None, rf: tuple[ToneInput, ...],
                             volts: float, temperature: float) -> float:
        """The die temperature the model is evaluated at: the probe's plus self-heating
        θ·V·I, I the part's supply current at the probe temperature (rounded). A part that
        states its supply current (it depends on the operating point only, not the tones)
        is asked for it; another is evaluated once for it."""
        theta = self.config.self_heating_c_per_w
        if not theta:
            return temperature
        current_at = getattr(self.part, "supply_current_at", None)
        if current_at is not None:
            current = float(current_at(OperatingPoint(temperature_c=temperature,
                                                      supply_v=volts)))
        else:
            current = self._evaluate(lo, rf, volts, temperature).supply_current_a
        return self._rounded(temperature + theta * volts * current) if current > 0 else temperature

    def _keep(self, key: tuple[object, ...], value: MixerResponse,
              inputs: EvaluationInputs) -> MixerResponse:
        """Cache a response under its key and remember what the model was given for it."""
        self._cache[key] = value
        self._inputs[id(value)] = (value, inputs)
        while len(self._cache) > _CACHE_ENTRIES:
            old = self._cache.popitem(last=False)[1]
            self._inputs.pop(id(old), None)
        return value

    @property
    def read_ahead(self) -> ReadAhead:
        """The sweep read-ahead (its ``served`` and ``evaluated`` counts, for tests)."""
        return self._read_ahead

    def evaluation_inputs(self, response: MixerResponse) -> EvaluationInputs | None:
        """What the model was given for a response this world returned (None when unknown):
        the truth queries evaluate the part again on exactly these."""
        with self._lock:
            hit = self._inputs.get(id(response))
        return hit[1] if hit is not None and hit[0] is response else None

    def _evaluate(
        self, lo: ToneInput | None, rf: tuple[ToneInput, ...], volts: float, temp_c: float
    ) -> MixerResponse:
        self.evaluations += 1
        if volts < self.dead_below_v():
            return self._dead_response(lo, rf)
        return self.part.evaluate(OperatingPoint(temperature_c=temp_c, supply_v=volts), lo, rf)

    def _dead_response(self, lo: ToneInput | None, rf: Sequence[ToneInput]) -> MixerResponse:
        """An unpowered mixer: no conversion, only passive leakage between the ports."""
        dead = self.config.dead_mixer
        n_rf = len(rf)
        if_lines: list[Product] = []
        rf_lines: list[Product] = []
        if lo is not None:
            orders = (1, *(0,) * n_rf)
            if_lines.append(Product(lo.freq_hz, lo.power_dbm - dead.lo_to_if_db, orders))
            rf_lines.append(Product(lo.freq_hz, lo.power_dbm - dead.lo_to_rf_db, orders))
        for k, tone in enumerate(rf):
            orders = (0, *(1 if j == k else 0 for j in range(n_rf)))
            if_lines.append(Product(tone.freq_hz, tone.power_dbm - dead.rf_to_if_db, orders))
        return MixerResponse(
            if_port=tuple(if_lines),
            rf_port=tuple(rf_lines),
            if_noise_dbm_per_hz=KT0_DBM_PER_HZ,
            supply_current_a=0.0,
        )

    # --- what the instruments ask ---------------------------------------------------------
    def analyzer_input(self) -> InputSpectrum:
        """Lines and noise density at the analyzer input for the switch's channel.

        The sources are read once for it: the tone at each DUT port is held while it lasts
        (the response, the LO for the spurs and the RF tones for the LO's spurs ask for
        them again; the sources do not change while the analyzer's request runs)."""
        channel = self._switch.channel if self._switch is not None else SwitchChannel.IF
        held = self._held
        if getattr(held, "tones", None) is not None:  # inside a request already
            return self.spectrum_for(self.response(), channel)
        held.tones = {}
        try:
            return self.spectrum_for(self.response(), channel)
        finally:
            held.tones = None

    def spectrum_for(self, response: MixerResponse, channel: int) -> InputSpectrum:
        """What reaches the analyzer from a response on a switch channel."""
        last = self._last_input
        if last is not None and last[0] is response and last[1] == channel:
            return last[2]  # the same response on the same channel: the same spectrum
        spectrum = self._analyzer_input(response, channel)
        self._last_input = (response, channel, spectrum)
        return spectrum

    def _analyzer_input(self, response: MixerResponse, channel: int) -> InputSpectrum:
        cabling = self.config.cabling
        if channel == SwitchChannel.RF:
            port, noise_dbm_per_hz = "rf_port", KT0_DBM_PER_HZ
            cable = cabling.rf_port
        elif channel == SwitchChannel.LO:
            port, noise_dbm_per_hz = "lo_port", KT0_DBM_PER_HZ
            cable = cabling.lo_port
        else:
            port, noise_dbm_per_hz = "if_port", response.if_noise_dbm_per_hz
            cable = cabling.if_
        levels = response.levels(port)  # arrays: the response's products are never made
        freq, level = levels.freq_hz, levels.power_dbm
        ok = (freq > 0) & np.isfinite(level)
        if not ok.all():
            freq, level = freq[ok], level[ok]
        level = level - _cable_loss_db(cable, freq)
        match = self.config.match
        if match is not None and not self.thru_fitted():  # the part's output port ↔ the path
            level = level + match.junction_db_array(
                _PART_OF_CHANNEL.get(channel, "part_if"),
                _LOAD_OF_CHANNEL.get(channel, "load_if"), freq)
        lo = self.lo_input() if channel == SwitchChannel.IF else None  # asked once
        if channel == SwitchChannel.IF:
            spurs = self._spur_lines(response, lo)
            if spurs:
                extra = [(s.freq_hz, s.amplitude * 10.0 ** (-cable.at(s.freq_hz) / 20.0))
                         for s in spurs]
                freq, level = add_coherent_arrays(freq, level, extra)
        if channel == SwitchChannel.IF and self.config.interferers:
            freq = np.concatenate([freq, [f for f, _ in self.config.interferers]])
            level = np.concatenate([level, [p for _, p in self.config.interferers]])
        if channel == SwitchChannel.IF and self.config.noise_source is not None:
            return self._noise_source_spectrum(response, freq, level, cable, lo)
        return InputSpectrum.from_arrays(freq, level, _lossy_noise(noise_dbm_per_hz, cable))

    def _noise_source_spectrum(
        self, response: MixerResponse, freq_hz: np.ndarray, level_dbm: np.ndarray,
        cable: CableLoss, lo: ToneInput | None,
    ) -> InputSpectrum:
        """The IF path's spectrum on a bench with a noise source at the DUT RF input: the
        thru passes its noise temperature; the part converts it from the signal and image
        bands (:func:`sweeprig.sim.noise_source.mixer_output_density_mw`); ``lo``: the
        tone at the DUT LO port now."""
        gain_db = response.notes.get("conversion_gain_db")
        in_port = getattr(self.part, "input_port", None)
        out_port = getattr(self.part, "output_port", None)
        thru = self.thru_fitted()
        # the noise source's state as it is when the density is asked for (this spectrum is
        # kept for its response and channel while the source switches; its wideband noise
        # below is the one of when it was made)
        temperature_k = self.input_noise_temperature_k
        part_mw = 10.0 ** (response.if_noise_dbm_per_hz / 10.0)
        converts = (not thru and lo is not None and gain_db is not None
                    and math.isfinite(gain_db) and in_port is not None and out_port is not None
                    and getattr(self.part, "conversion", "down") == "down")

        def at_port_mw(freqs_hz: np.ndarray) -> np.ndarray:
            f = np.asarray(freqs_hz, dtype=float)
            if thru:
                return density_mw_per_hz(temperature_k(f))
            if not converts:
                return np.full(f.shape, part_mw)
            assert lo is not None and gain_db is not None
            f_s, f_i = lo.freq_hz + f, np.abs(lo.freq_hz - f)
            mid = 10.0 ** (gain_db / 10.0) * _of_frequencies(
                ("port²", out_port), f, lambda: np.asarray(out_port.magnitude(f)) ** 2)
            g_s = mid * np.asarray(in_port.magnitude(f_s)) ** 2
            g_i = mid * np.asarray(in_port.magnitude(f_i)) ** 2
            return mixer_output_density_mw(part_mw, self._band_temperature_k(f_s),
                                           self._band_temperature_k(f_i), g_s, g_i)

        def density(freqs_hz: np.ndarray) -> np.ndarray:
            f = np.asarray(freqs_hz, dtype=float)
            gain = _cable_gain(cable, f)
            kt0_mw = 10.0 ** (KT0_DBM_PER_HZ / 10.0)
            return 10.0 * np.log10(at_port_mw(f) * gain + kt0_mw * (1.0 - gain))

        # The noise loads the analyzer's first mixer over the band it reaches it in: the
        # output port's low-pass noise bandwidth, π/2 times a first-order corner (standard
        # result), or the analyzer's whole input range.
        corner = None if thru or out_port is None else getattr(out_port, "lowpass_hz", None)
        band_hz = 13.6e9 if corner is None else 0.5 * math.pi * corner
        centre = float(corner) / 2.0 if corner is not None else 1e9
        wide = float(10.0 ** (density(np.array([centre]))[0] / 10.0)) * band_hz
        return InputSpectrum.from_arrays(freq_hz, level_dbm, density,
                                         wideband_noise_dbm=10.0 * math.log10(wide))

    def source_spurs(self, role: str) -> list[tuple[float, float]]:
        """A source's spurious lines at its DUT port: (frequency Hz, power dBm), after its
        low-pass filter and cables; empty when the source is off or has none."""
        source = self._sources.get(role)
        spurious = getattr(source, "spurious", ()) if source is not None else ()
        if source is None or not source.output_on or not spurious:
            return []
        freq = float(getattr(source, "output_freq_hz", source.freq_hz))
        delivered_dbm = float(source.delivered_power_dbm)  # read once for all its spurs
        out = []
        for offset_hz, dbc in spurious:
            f = freq + float(offset_hz)
            if f <= 0:
                continue
            loss = self._spur_losses.get((role, f))  # the path's loss at f, kept
            if loss is None:
                if len(self._spur_losses) >= _CACHE_ENTRIES:
                    self._spur_losses.clear()
                loss = self._spur_losses[(role, f)] = sum(c.at(f) for c in self._path(role))
            out.append((f, delivered_dbm + float(dbc) - loss))
        return out

    def spur_lines(self, response: MixerResponse) -> list[SpurLine]:
        """Output-port lines made from the sources' spurious outputs (see the module
        docstring), with their seeded phases."""
        return self._spur_lines(response, self.lo_input())

    def _spur_lines(self, response: MixerResponse, lo: ToneInput | None) -> list[SpurLine]:
        """:meth:`spur_lines` with the tone at the DUT LO port now (``lo``)."""
        gain_db = response.notes.get("conversion_gain_db")
        if gain_db is None or not math.isfinite(gain_db) or lo is None:
            return []
        up = getattr(self.part, "conversion", "down") == "up"
        in_port = getattr(self.part, "input_port", None)
        out_port = getattr(self.part, "output_port", None)
        out: list[SpurLine] = []

        def converted(f_in: float, f_lo: float) -> float:
            return f_in + f_lo if up else abs(f_in - f_lo)

        def edges_db(f_in: float, f_out: float) -> float:
            """The ports' band edges at the spur's input and output frequencies (the
            notes' gain is mid-band), dB."""
            if in_port is None or out_port is None:
                return 0.0
            mag = in_port.scalar_magnitude(f_in) * out_port.scalar_magnitude(f_out)
            return 20.0 * math.log10(mag) if mag > 0 else -math.inf

        for r, role in enumerate(("rf", "rf2")):
            for j, (f, p) in enumerate(self.source_spurs(role)):
                f_out = converted(f, lo.freq_hz)
                out.append(self._spur(f_out, p + gain_db + edges_db(f, f_out), role, r, j))
        lo_spurs = self.source_spurs("lo")
        if lo_spurs:
            for tone in self.rf_inputs():
                for j, (f, p) in enumerate(lo_spurs):
                    f_out = converted(tone.freq_hz, f)
                    level = (tone.power_dbm + gain_db + edges_db(tone.freq_hz, f_out)
                             + (p - lo.power_dbm))
                    out.append(self._spur(f_out, level, "lo", 2, j))
        return [s for s in out if s.freq_hz > 0 and math.isfinite(abs(s.amplitude))
                and abs(s.amplitude) > 0]

    def _spur(self, freq_hz: float, power_dbm: float, role: str, r: int, j: int) -> SpurLine:
        phase0, delay = _spur_phase_law(self.config.spur_phase_seed, self.config.spur_delay_s,
                                        r, j)
        return SpurLine(freq_hz, cmath.rect(10.0 ** (power_dbm / 20.0),
                                            phase0 - 2.0 * math.pi * freq_hz * delay), role)

    def sensed_power_dbm(self) -> float:
        """Total power at the sensor's plane (fundamentals, harmonics, spurs), dBm: the DUT
        RF input plane, or its LO input plane when the switch routes the sensor there."""
        total_mw = 0.0
        if self.sensor_at_lo():
            lo = self.lo_input()
            tones = [lo] if lo is not None else []
            roles: tuple[str, ...] = ("lo",)
        else:
            tones, roles = self.rf_inputs(), ("rf", "rf2")
        match = self.config.match
        if match is not None:  # the sensor's own junction with the feed
            feed = "source_lo" if self.sensor_at_lo() else "source_rf"
            tones = [_moved(t, match.junction_db(feed, "sensor", t.freq_hz)) for t in tones]
        for tone in tones:
            total_mw += 10.0 ** (tone.power_dbm / 10.0)
            for h_dbc in tone.harmonics_dbc:
                total_mw += 10.0 ** ((tone.power_dbm + h_dbc) / 10.0)
        for role in roles:
            for _, p in self.source_spurs(role):
                total_mw += 10.0 ** (p / 10.0)
        return 10.0 * math.log10(total_mw) if total_mw > 0 else _NO_SIGNAL_DBM

    def supply_current_a(self, supply_v: float) -> float:
        """Current the DUT draws at ``supply_v`` volts, A (the supply's load line).

        A part that states its supply current (it depends on the operating point only,
        never on the tones: ``supply_current_at``) is asked for it at the operating point
        :meth:`response` would evaluate, which gives the same number as the response's
        own ``supply_current_a`` without evaluating the response (the supply asks at every
        reading, before the analyzer's own request evaluates it); another part is
        evaluated."""
        if supply_v < self.dead_below_v():
            return 0.0
        current_at = getattr(self.part, "supply_current_at", None)
        if current_at is None:
            return float(self.response(supply_v=supply_v).supply_current_a)
        if self.thru_fitted():
            return 0.0  # the calibration thru draws nothing (see _thru_response)
        volts = max(0.0, float(supply_v))
        temperature = self._rounded(self.probe_temperature_c())
        used = self._die_temperature_key(None, (), volts, temperature)
        return float(current_at(OperatingPoint(temperature_c=used, supply_v=volts)))

    # --- helpers --------------------------------------------------------------------------
    def _path(self, role: str) -> tuple[CableLoss | LowPassFilter | NotchFilter, ...]:
        """Everything between a source and its DUT port: its filter, any band-stop planted
        there, its cable (and the combiner)."""
        cabling = self.config.cabling
        path: tuple[CableLoss | LowPassFilter | NotchFilter, ...] = {
            "rf": (cabling.rf, cabling.combiner),
            "rf2": (cabling.rf2, cabling.combiner, CableLoss(cabling.combiner_imbalance_db)),
            "lo": (cabling.lo,),
        }[role]
        path = tuple(n for name, n in self.config.source_notches if name == role) + path
        filt = self.config.source_filter(role)
        return path if filt is None else (filt, *path)

    def _tone_at_port(self, role: str) -> ToneInput | None:
        tones: dict[str, ToneInput | None] | None = getattr(self._held, "tones", None)
        if tones is None:
            return self._read_tone_at_port(role)
        if role not in tones:
            tones[role] = self._read_tone_at_port(role)
        return tones[role]

    def _read_tone_at_port(self, role: str) -> ToneInput | None:
        source = self._sources.get(role)
        if source is None or not source.output_on:
            return None
        # what the source really makes: its setting moved by its reference's error
        freq = float(getattr(source, "output_freq_hz", source.freq_hz))
        made = tuple(source.harmonics_dbc)
        key = (role, freq, made)
        hit = self._path_losses.get(key)  # the path's losses at this frequency, kept
        if hit is None:
            path = self._path(role)
            loss = sum(c.at(freq) for c in path)
            harmonics = tuple(
                float(h) - (sum(c.at((n + 2) * freq) for c in path) - loss)
                for n, h in enumerate(made)
            )
            if len(self._path_losses) >= _CACHE_ENTRIES:
                self._path_losses.clear()
            hit = self._path_losses[key] = (loss, harmonics)
        loss, harmonics = hit
        return ToneInput(
            freq_hz=freq, power_dbm=float(source.delivered_power_dbm) - loss,
            harmonics_dbc=harmonics,
        )

    def _channel(self) -> int:
        return self._switch.channel if self._switch is not None else SwitchChannel.IF

    def _rounded(self, temperature_c: float) -> float:
        step = self.config.temperature_resolution_c
        return round(temperature_c / step) * step if step > 0 else temperature_c


#: The bench's output-path port and the part's port behind each analyzer switch channel.
_LOAD_OF_CHANNEL = {SwitchChannel.IF: "load_if", SwitchChannel.RF: "load_rf_port",
                    SwitchChannel.LO: "load_lo_port"}
_PART_OF_CHANNEL = {SwitchChannel.IF: "part_if", SwitchChannel.RF: "part_rf",
                    SwitchChannel.LO: "part_lo"}


def _moved(tone: ToneInput, db: float) -> ToneInput:
    """``tone`` with its power moved by ``db`` (harmonics keep their dBc): what
    ``dataclasses.replace(tone, power_dbm=…)`` makes, built directly (a replace looks the
    fields up at every call, twice a model evaluation)."""
    if db == 0.0:
        return tone
    return ToneInput(tone.freq_hz, tone.power_dbm + db, tone.phase_rad, tone.harmonics_dbc)


def _thru_response(rf: Sequence[ToneInput]) -> MixerResponse:
    """The calibration thru in the part's place: each tone at the DUT RF input plane (and
    its harmonics) reaches every output path unchanged; no supply current, the output noise
    is kT0 (a matched passive thru at T0)."""
    lines: list[Product] = []
    n_rf = len(rf)
    for k, tone in enumerate(rf):
        orders = (0, *(1 if j == k else 0 for j in range(n_rf)))
        lines.append(Product(tone.freq_hz, tone.power_dbm, orders))
        for n, h_dbc in enumerate(tone.harmonics_dbc):
            lines.append(Product((n + 2) * tone.freq_hz, tone.power_dbm + h_dbc,
                                 tuple((n + 2) * o for o in orders)))
    ports = tuple(lines)
    return MixerResponse(if_port=ports, rf_port=ports, lo_port=ports,
                         if_noise_dbm_per_hz=KT0_DBM_PER_HZ, supply_current_a=0.0)


def add_coherent_arrays(
    freq_hz: np.ndarray, level_dbm: np.ndarray, extra: Sequence[tuple[float, complex]],
    tol_hz: float = 1e-3,
) -> tuple[np.ndarray, np.ndarray]:
    """Lines (Hz, dBm; taken as phase 0) plus extra lines (Hz, complex sqrt(mW)): one within
    ``tol_hz`` of a line adds to it as a voltage, the others join the lines."""
    freq = freq_hz.copy()
    level = level_dbm.copy()
    touched: dict[int, complex] = {}  # line index → its amplitude (phase 0) plus extras
    new_f: list[float] = []
    new_a: list[complex] = []
    # every extra line against every line at once: the first line within reach, or -1
    near = np.abs(freq_hz[None, :] - np.array([f for f, _ in extra], dtype=float)[:, None]) \
        <= tol_hz
    first = np.where(near.any(axis=1), near.argmax(axis=1), -1).tolist() if freq_hz.size \
        else [-1] * len(extra)
    for (f, amp), k in zip(extra, first, strict=True):
        if k >= 0:
            touched[k] = touched.get(k, complex(10.0 ** (level_dbm[k] / 20.0))) + amp
            continue
        for i, f0 in enumerate(new_f):
            if abs(f0 - f) <= tol_hz:
                new_a[i] += amp
                break
        else:
            new_f.append(f)
            new_a.append(amp)
    for k, amp in touched.items():
        total = abs(amp) ** 2
        level[k] = 10.0 * math.log10(total) if total > 0 else -math.inf
    if new_f:
        power = np.abs(np.array(new_a)) ** 2
        with np.errstate(divide="ignore"):
            extra_dbm = 10.0 * np.log10(power)
        freq = np.concatenate([freq, np.array(new_f)])
        level = np.concatenate([level, extra_dbm])
    ok = np.isfinite(level)
    return (freq, level) if ok.all() else (freq[ok], level[ok])


def add_coherent(
    lines: Sequence[tuple[float, float]], extra: Sequence[tuple[float, complex]],
    tol_hz: float = 1e-3,
) -> list[tuple[float, float]]:
    """:func:`add_coherent_arrays` on a list of (Hz, dBm) lines."""
    freq = np.array([f for f, _ in lines], dtype=float)
    level = np.array([p for _, p in lines], dtype=float)
    f, p = add_coherent_arrays(freq, level, extra, tol_hz)
    return list(zip(f.tolist(), p.tolist(), strict=True))


def _cable_loss_db(cable: CableLoss, freq_hz: np.ndarray) -> np.ndarray | float:
    """Loss of ``cable`` at each frequency, dB."""
    if cable.ref_freq_hz is None:
        loss: np.ndarray | float = cable.loss_db
    else:
        loss = cable.loss_db * np.sqrt(np.maximum(freq_hz, 0.0) / cable.ref_freq_hz)
    if cable.ripple_db:
        loss = np.maximum(0.0, loss + cable.ripple_db * np.sin(
            2.0 * np.pi * np.asarray(freq_hz, dtype=float) / cable.ripple_period_hz
            + cable.ripple_phase_rad))
    return loss


#: Arrays that depend on the frequencies alone (a cable's gain, a port's band edges), kept by
#: the frequencies' bytes: an analyzer asks for the same trace grid and marker frequencies
#: at every point (the noise density's callers never write to what they get).
_BY_FREQUENCIES: dict[tuple[object, ...], np.ndarray] = {}
_BY_FREQUENCIES_ENTRIES = 64  # a 10,001-point grid keeps 160 kB with its key


def _of_frequencies(what: tuple[object, ...], freq_hz: np.ndarray,
                    make: Callable[[], np.ndarray]) -> np.ndarray:
    """``make()`` for these frequencies (Hz, float array), made once and kept read-only."""
    key = (what, freq_hz.shape, freq_hz.tobytes())
    hit = _BY_FREQUENCIES.get(key)
    if hit is None:
        hit = np.array(make(), dtype=float)
        hit.flags.writeable = False
        if len(_BY_FREQUENCIES) >= _BY_FREQUENCIES_ENTRIES:
            _BY_FREQUENCIES.clear()
        _BY_FREQUENCIES[key] = hit
    return hit


def _cable_gain(cable: CableLoss, freq_hz: np.ndarray) -> np.ndarray:
    """The power gain of ``cable`` (a ratio, ≤ 1) at each frequency (Hz, float array)."""
    return _of_frequencies(("gain", cable), freq_hz, lambda: 10.0 ** (
        -np.broadcast_to(_cable_loss_db(cable, freq_hz), freq_hz.shape) / 10.0))


@lru_cache(maxsize=64)
def _spur_phase_law(seed: int, delay_s: float, role: int, index: int) -> tuple[float, float]:
    """(φ0 rad, τ s) of one spur path: φ0 uniform in [0, 2π), τ in [0.2, 1]·delay_s, from
    ``numpy.random.default_rng([seed, 31, role, index])``."""
    rng = np.random.default_rng([int(seed), 31, role, index])
    return float(rng.uniform(0.0, 2.0 * math.pi)), float(rng.uniform(0.2, 1.0) * delay_s)


def _lossy_noise(
    density_dbm_per_hz: float, cable: CableLoss
) -> Callable[[np.ndarray], np.ndarray]:
    """Noise density after a matched lossy cable at T0: N·G + kT0·(1 − G), G = loss as ratio.

    (A matched attenuator at T0 adds kT0·(1 − G); Pozar, noise chapter.)
    """

    def density(freqs_hz: np.ndarray) -> np.ndarray:
        f = np.asarray(freqs_hz, dtype=float)
        gain = _cable_gain(cable, f)
        kt0_mw = 10.0 ** (KT0_DBM_PER_HZ / 10.0)
        n_mw = 10.0 ** (density_dbm_per_hz / 10.0) * gain + kt0_mw * (1.0 - gain)
        return 10.0 * np.log10(n_mw)

    return density
