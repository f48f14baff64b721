"""The one physical world the simulated instruments share.

Signal flow (powers in dBm, frequencies in Hz, losses in dB, positive = loss)::

    rf source  ─ cable "rf"  ─┐
                               ├─ combiner ─ DUT RF port (power-meter sensor plane)
    rf2 source ─ cable "rf2" ─┘
    lo source  ─ cable "lo"  ─ DUT LO port
    DUT IF port ─ path "if"      ─ RF switch channel 1 ─┐
    DUT RF port ─ path "rf_port" ─ RF switch channel 2 ─┼─ analyzer input
    DUT LO port ─ path "lo_port" ─ RF switch channel 3 ─┘
    dc supply ─ DUT supply;  chamber probe ─ DUT die temperature (plus self-heating)

The world reads the instruments' states through small views (protocols below), asks the
mixer model for its response on demand (cached by a key of everything that matters), and
answers the analyzer (input spectrum), the power meter (sensed power) and the supply (load
current). It knows no SCPI. Deterministic: it draws no random numbers itself.
"""

from __future__ import annotations

import math
import threading
from collections import OrderedDict
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from enum import IntEnum
from typing import Protocol

import numpy as np

from sweeprig.sim.analyzer_display import KT0_DBM_PER_HZ, InputSpectrum
from sweeprig.sim.mixer.types import MixerResponse, OperatingPoint, Product, ToneInput

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

    def at(self, freq_hz: float) -> float:
        """Loss at ``freq_hz``, dB."""
        if self.ref_freq_hz is None:
            return self.loss_db
        return self.loss_db * math.sqrt(max(freq_hz, 0.0) / self.ref_freq_hz)


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
        self._lock = threading.RLock()
        self._cache: OrderedDict[tuple[object, ...], MixerResponse] = OrderedDict()
        self.evaluations = 0  # number of model evaluations (cache misses), for tests

    def connect(
        self,
        *,
        rf: SourceView | None = None,
        rf2: SourceView | None = None,
        lo: SourceView | None = None,
        supply: SupplyView | None = None,
        chamber: ChamberView | None = None,
        switch: SwitchView | None = None,
    ) -> None:
        """Attach the instruments' views (any may be absent)."""
        with self._lock:
            self._sources = {"rf": rf, "rf2": rf2, "lo": lo}
            self._supply, self._chamber, self._switch = supply, chamber, switch
            self._cache.clear()

    # --- the DUT's inputs -------------------------------------------------------------
    def rf_inputs(self) -> list[ToneInput]:
        """Tones at the DUT RF port (after cable and combiner), in source order rf, rf2."""
        tones = []
        for role in ("rf", "rf2"):
            tone = self._tone_at_port(role, (self._cable(role), self.config.cabling.combiner))
            if tone is not None:
                tones.append(tone)
        return tones

    def lo_input(self) -> ToneInput | None:
        """The tone at the DUT LO port, or None when the LO is off."""
        return self._tone_at_port("lo", (self.config.cabling.lo,))

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
        temperature = self._rounded(self.probe_temperature_c())
        key = (lo, rf, round(volts, 6), temperature)
        with self._lock:
            hit = self._cache.get(key)
            if hit is not None:
                self._cache.move_to_end(key)
                return hit
            value = self._evaluate(lo, rf, volts, temperature)
            theta = self.config.self_heating_c_per_w
            if theta and value.supply_current_a > 0:
                heated = self._rounded(temperature + theta * volts * value.supply_current_a)
                value = self._evaluate(lo, rf, volts, heated)
            self._cache[key] = value
            while len(self._cache) > _CACHE_ENTRIES:
                self._cache.popitem(last=False)
            return value

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
        """Lines and noise density at the analyzer input for the switch's channel."""
        channel = self._switch.channel if self._switch is not None else SwitchChannel.IF
        response = self.response()
        cabling = self.config.cabling
        if channel == SwitchChannel.RF:
            products, noise_dbm_per_hz = response.rf_port, KT0_DBM_PER_HZ
            cable = cabling.rf_port
        elif channel == SwitchChannel.LO:
            products, noise_dbm_per_hz = response.lo_port, KT0_DBM_PER_HZ
            cable = cabling.lo_port
        else:
            products, noise_dbm_per_hz = response.if_port, response.if_noise_dbm_per_hz
            cable = cabling.if_
        lines = tuple(
            (p.freq_hz, p.power_dbm - cable.at(p.freq_hz))
            for p in products
            if p.freq_hz > 0 and math.isfinite(p.power_dbm)
        )
        return InputSpectrum(lines, _lossy_noise(noise_dbm_per_hz, cable))

    def sensed_power_dbm(self) -> float:
        """Total power at the DUT RF input plane (fundamentals and harmonics), dBm."""
        total_mw = 0.0
        for tone in self.rf_inputs():
            total_mw += 10.0 ** (tone.power_dbm / 10.0)
            for h_dbc in tone.harmonics_dbc:
                total_mw += 10.0 ** ((tone.power_dbm + h_dbc) / 10.0)
        return 10.0 * math.log10(total_mw) if total_mw > 0 else _NO_SIGNAL_DBM

    def supply_current_a(self, supply_v: float) -> float:
        """Current the DUT draws at ``supply_v`` volts, A (the supply's load line)."""
        if supply_v < self.dead_below_v():
            return 0.0
        return float(self.response(supply_v=supply_v).supply_current_a)

    # --- helpers --------------------------------------------------------------------------
    def _cable(self, role: str) -> CableLoss:
        cabling = self.config.cabling
        return {"rf": cabling.rf, "rf2": cabling.rf2, "lo": cabling.lo}[role]

    def _tone_at_port(self, role: str, path: Sequence[CableLoss]) -> ToneInput | None:
        source = self._sources.get(role)
        if source is None or not source.output_on:
            return None
        freq = float(source.freq_hz)
        loss = sum(c.at(freq) for c in path)
        harmonics = tuple(
            float(h) - (sum(c.at((n + 2) * freq) for c in path) - loss)
            for n, h in enumerate(source.harmonics_dbc)
        )
        return ToneInput(
            freq_hz=freq, power_dbm=float(source.delivered_power_dbm) - loss,
            harmonics_dbc=harmonics,
        )

    def _rounded(self, temperature_c: float) -> float:
        step = self.config.temperature_resolution_c
        return round(temperature_c / step) * step if step > 0 else temperature_c


def _lossy_noise(
    density_dbm_per_hz: float, cable: CableLoss
) -> Callable[[np.ndarray], np.ndarray]:
    """Noise density after a matched lossy cable at T0: N·G + kT0·(1 − G), G = loss as ratio.

    (A matched attenuator at T0 adds kT0·(1 − G); Pozar, noise chapter.)
    """

    def density(freqs_hz: np.ndarray) -> np.ndarray:
        f = np.asarray(freqs_hz, dtype=float)
        if cable.ref_freq_hz is None:
            loss_db = np.full(f.shape, cable.loss_db)
        else:
            loss_db = cable.loss_db * np.sqrt(np.maximum(f, 0.0) / cable.ref_freq_hz)
        gain = 10.0 ** (-loss_db / 10.0)
        kt0_mw = 10.0 ** (KT0_DBM_PER_HZ / 10.0)
        n_mw = 10.0 ** (density_dbm_per_hz / 10.0) * gain + kt0_mw * (1.0 - gain)
        return 10.0 * np.log10(n_mw)

    return density
