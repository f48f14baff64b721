"""What is truly at each port of a simulated bench: every line by origin, and the noise.

Pure and socket-free: give a sim-bench description (a model, a file path, a shipped bench
name or None for the default), a :class:`Drive` (what the sources, supply and chamber are set
to) and a port, and get every line the analyzer would see there, split by origin:

* ``part_dbm``: made by the part from clean sources (no harmonics, no spurious), without
  its linear leakage paths;
* ``source_harmonic_dbm``: what the sources' harmonics and spurious lines add (made in the
  part or carried through it);
* ``leakage_dbm``: what the part's linear paths add (LO→IF, RF→IF, LO→RF, RF→LO isolation,
  the port reflections; everything of an unpowered part);
* ``analyzer_dbm``: (with analyzer settings) the analyzer's own first-mixer products there;
* ``total_dbm``: the vector sum, as displayed (with analyzer settings: after the analyzer's
  compression and amplitude error, without noise; else the level at the analyzer input).

Every ``*_dbm`` is referred to the analyzer input connector (after the port's cable to the
analyzer), like the analyzer's display; ``port_dbm`` is the line's total at the DUT port
plane. The components are complex amplitudes of separate evaluations of the same model
(full − without leakage − with clean sources), so the parts add as voltages to exactly the
total the served bench shows: ``total`` is computed by the same code as the served analyzer
(:class:`~sweeprig.sim.world.SimWorld` and :mod:`sweeprig.sim.analyzer_display`). A component
that is absent is ``-inf``.

:func:`noise` gives the mean displayed noise at a frequency (DANL, the part's output noise in
the noise bandwidth, the analyzer's reciprocal mixing of the strong lines): the level the
simulated analyzer's noise trace averages to (its log-detector offsets have zero mean in dB).

The served bench answers the same questions through ``simctl``
(``SIMulation:TRUTh:LINE? <port>,<freq>``, ``SIMulation:TRUTh:NOISe? <freq>``; see
docs/instruments.md), for the present instrument states.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass, replace
from functools import lru_cache
from typing import Literal

import numpy as np

from sweeprig.errors import InputError
from sweeprig.sim.analyzer_display import (
    AnalyzerParams,
    SweepSettings,
    combine_displayed,
    first_mixer,
    noise_breakdown_mw,
)
from sweeprig.sim.bench import SimBenchDescription, prepare_part, resolve_description
from sweeprig.sim.instruments.source import (
    no_level_error_db,
    nominal_power_dbm,
    scaled_level_error,
)
from sweeprig.sim.mixer.part import MixerPart
from sweeprig.sim.mixer.reference import ReferenceFigures, reference_figures
from sweeprig.sim.mixer.types import MixerResponse, OperatingPoint, ToneInput
from sweeprig.sim.world import CableLoss, SimWorld, SwitchChannel

Port = Literal["if", "rf", "lo"]
PORTS: tuple[Port, ...] = ("if", "rf", "lo")
_CHANNEL = {"if": SwitchChannel.IF, "rf": SwitchChannel.RF, "lo": SwitchChannel.LO}
_KEY_PER_HZ = 1e3  # lines within 1 mHz are one line (as in the mixer model)
Description = SimBenchDescription | str | os.PathLike[str] | None


@dataclass(frozen=True)
class Drive:
    """What the bench is set to: each source's frequency (Hz; None: output off) and set
    level (dBm at the source's connector; the simulated source's level error, when the
    description has it, is added as the served source does), the supply (V; 0: off) and the
    chamber probe temperature (degC; None: the description's ambient)."""

    lo_freq_hz: float | None = None
    lo_power_dbm: float = 0.0
    rf_freq_hz: float | None = None
    rf_power_dbm: float = -30.0
    rf2_freq_hz: float | None = None
    rf2_power_dbm: float = -30.0
    supply_v: float = 3.3
    temperature_c: float | None = None


@dataclass(frozen=True)
class TruthLine:
    """One line at a port, by origin (dBm at the analyzer input; see the module docstring).

    ``orders``: the (LO, RF1, RF2) multipliers of the part's line there (None for a line
    only the analyzer or a source spur makes).
    """

    freq_hz: float
    part_dbm: float
    source_harmonic_dbm: float
    leakage_dbm: float
    analyzer_dbm: float
    total_dbm: float
    port_dbm: float
    cable_loss_db: float
    orders: tuple[int, ...] | None = None


@dataclass(frozen=True)
class TruthNoise:
    """Mean displayed noise at one frequency, dBm in the RBW's noise bandwidth: the
    analyzer's own (``danl_dbm``), the part's (and cable's) noise above kT0 arriving at the
    input (``input_dbm``), reciprocal mixing (``reciprocal_dbm``) and their sum."""

    freq_hz: float
    danl_dbm: float
    input_dbm: float
    reciprocal_dbm: float
    total_dbm: float


# --- the public questions -------------------------------------------------------------------
def port_lines(
    description: Description, drive: Drive, port: Port,
    analyzer: SweepSettings | None = None,
) -> tuple[TruthLine, ...]:
    """Every line at ``port`` (``"if"``, ``"rf"``, ``"lo"``) for ``drive``, sorted by
    frequency; with ``analyzer`` settings (attenuation matters, span does not) also the
    analyzer's own products and its display (compression, amplitude error)."""
    desc = resolve_description(description)
    world = _static_world(desc, drive, port)
    return world_port_lines(world, port, analyzer, desc.analyzer_params())


def line_at(
    description: Description, drive: Drive, port: Port, freq_hz: float,
    analyzer: SweepSettings | None = None, tol_hz: float = 1.0,
) -> TruthLine | None:
    """The line within ``tol_hz`` of ``freq_hz`` (the nearest), or None."""
    return nearest_line(port_lines(description, drive, port, analyzer), freq_hz, tol_hz)


def noise(
    description: Description, drive: Drive, port: Port, freq_hz: float,
    analyzer: SweepSettings,
) -> TruthNoise:
    """Mean displayed noise at ``freq_hz`` with ``analyzer`` settings (RBW, attenuation and
    span: a sweep counts the reciprocal mixing of the lines that can show in its span)."""
    desc = resolve_description(description)
    world = _static_world(desc, drive, port)
    return world_noise(world, port, freq_hz, analyzer, desc.analyzer_params())


def noise_dbm(
    description: Description, drive: Drive, port: Port, freq_hz: float,
    analyzer: SweepSettings,
) -> float:
    """:func:`noise`'s total, dBm."""
    return noise(description, drive, port, freq_hz, analyzer).total_dbm


def part_figures(description: Description, drive: Drive) -> ReferenceFigures:
    """The part's datasheet-style figures (:func:`~sweeprig.sim.mixer.reference_figures`) at
    the drive's LO and RF frequencies and the LO level reaching the part, its supply and die
    temperature; the two-tone figures at the drive's tone spacing when it sets a second tone
    (else the reference's default)."""
    desc = resolve_description(description)
    if drive.lo_freq_hz is None or drive.rf_freq_hz is None:
        raise InputError("the part's figures need an LO and an RF frequency",
                         where="truth.part_figures", fix="set lo_freq_hz and rf_freq_hz")
    part = _prepared_part(desc)
    if not isinstance(part, MixerPart):
        raise InputError("the description's part is not a mixer model",
                         where="truth.part_figures", fix="use a part file")
    world = _static_world(desc, drive, "if")
    response = world.response()
    inputs = world.evaluation_inputs(response)
    lo = world.lo_input()
    assert inputs is not None and lo is not None
    op = OperatingPoint(inputs.temperature_c, inputs.supply_v)
    spacing = abs(drive.rf2_freq_hz - drive.rf_freq_hz) if drive.rf2_freq_hz is not None else 0.0
    return reference_figures(part, op, lo.freq_hz, lo.power_dbm, drive.rf_freq_hz,
                             **({"tone_spacing_hz": spacing} if spacing > 0 else {}))


# --- on a live world (the served bench's simctl uses these) ---------------------------------
def world_port_lines(
    world: SimWorld, port: Port, analyzer: SweepSettings | None,
    params: AnalyzerParams,
) -> tuple[TruthLine, ...]:
    """:func:`port_lines` for a world's present state."""
    channel = _channel(port)
    response = world.response()
    spectrum = world.spectrum_for(response, channel)
    cable = _port_cable(world, port)
    served = {_key(f): (f, p) for f, p in spectrum.lines}
    parts = _components(world, response, port)

    displayed: dict[int, float] = {}
    products: dict[int, tuple[float, complex]] = {}
    error_db = params.amplitude_error_db
    if analyzer is not None:
        mixer = first_mixer(spectrum.lines, analyzer, params)
        f_disp, p_disp = combine_displayed(mixer, params.coherent_products)
        displayed = {_key(f): p + error_db for f, p in zip(
            f_disp.tolist(), p_disp.tolist(), strict=True)}
        for f, a in zip(mixer.product_freq_hz.tolist(), mixer.product_amp.tolist(),
                        strict=True):
            k = _key(f)
            f0, a0 = products.get(k, (f, 0j))
            products[k] = (f0, a0 + a)

    out = []
    for k in sorted(set(served) | set(products)):
        freq = served[k][0] if k in served else products[k][0]
        loss = cable.at(freq)
        comp = parts.get(k)
        at_input = served[k][1] if k in served else -math.inf
        if analyzer is not None:
            total = displayed.get(k, -math.inf)
            made = _dbm(abs(products[k][1]) ** 2) + error_db if k in products else -math.inf
        else:
            total, made = at_input, -math.inf
        out.append(TruthLine(
            freq_hz=freq,
            part_dbm=_dbm(abs(comp.part) ** 2) - loss if comp else -math.inf,
            source_harmonic_dbm=_dbm(abs(comp.harmonic) ** 2) - loss if comp else -math.inf,
            leakage_dbm=_dbm(abs(comp.leakage) ** 2) - loss if comp else -math.inf,
            analyzer_dbm=made,
            total_dbm=total,
            port_dbm=at_input + loss,
            cable_loss_db=loss,
            orders=comp.orders if comp else None,
        ))
    return tuple(out)


def world_noise(
    world: SimWorld, port: Port, freq_hz: float, analyzer: SweepSettings,
    params: AnalyzerParams,
) -> TruthNoise:
    """:func:`noise` for a world's present state."""
    spectrum = world.spectrum_for(world.response(), _channel(port))
    danl, excess, reciprocal = noise_breakdown_mw(freq_hz, spectrum, analyzer, params)
    return TruthNoise(freq_hz, _dbm(danl), _dbm(excess), _dbm(reciprocal),
                      _dbm(danl + excess + reciprocal))


# --- the split by origin --------------------------------------------------------------------
@dataclass
class _Parts:
    part: complex = 0j
    harmonic: complex = 0j
    leakage: complex = 0j
    orders: tuple[int, ...] | None = None


def _components(world: SimWorld, response: MixerResponse, port: Port) -> dict[int, _Parts]:
    """Complex amplitudes (sqrt(mW) at the DUT port) of each origin, by frequency key."""
    inputs = world.evaluation_inputs(response)
    parts: dict[int, _Parts] = {}
    model = world.part
    lines = {"if": response.if_port, "rf": response.rf_port, "lo": response.lo_port}[port]
    if inputs is None or inputs.supply_v < world.dead_below_v() or not isinstance(
            model, MixerPart):
        # an unpowered part only leaks; a stand-in model is all "part"
        dead = inputs is None or inputs.supply_v < world.dead_below_v()
        for p in lines:
            amp = complex(10.0 ** (p.power_dbm / 20.0))
            entry = _Parts(orders=tuple(p.orders))
            if dead:
                entry.leakage = amp
            else:
                entry.part = amp
            parts[_key(p.freq_hz)] = entry
    else:
        op = OperatingPoint(inputs.temperature_c, inputs.supply_v)
        lo, rf = inputs.lo, inputs.rf
        full = _port_amplitudes(model.evaluate_lines(op, lo, rf), port)
        bare = _port_amplitudes(model.evaluate_lines(op, lo, rf, leakage=False), port)
        clean = _port_amplitudes(model.evaluate_lines(
            op, _clean(lo), tuple(_clean(t) for t in rf), leakage=False), port)
        for k in set(full) | set(bare) | set(clean):
            a_full, a_bare, a_clean = full.get(k), bare.get(k), clean.get(k)
            entry = _Parts(
                part=a_clean[0] if a_clean else 0j,
                harmonic=(a_bare[0] if a_bare else 0j) - (a_clean[0] if a_clean else 0j),
                leakage=(a_full[0] if a_full else 0j) - (a_bare[0] if a_bare else 0j),
                orders=(a_full or a_bare or a_clean)[1],  # type: ignore[index]
            )
            parts[k] = entry
    if port == "if":
        # the sources' spurious lines add with their seeded phase relative to the port's
        # line (as the world adds them): rotate them onto that line's phase
        turns: dict[int, complex] = {}
        for spur in world.spur_lines(response):
            k = _key(spur.freq_hz)
            entry = parts.setdefault(k, _Parts())
            if k not in turns:
                base = entry.part + entry.harmonic + entry.leakage
                turns[k] = base / abs(base) if abs(base) > 0 else 1.0 + 0j
            entry.harmonic += spur.amplitude * turns[k]
    return parts


def _port_amplitudes(lines: object, port: Port) -> dict[int, tuple[complex, tuple[int, ...]]]:
    chosen = {"if": lines.output, "rf": lines.input, "lo": lines.lo}[port]  # type: ignore[attr-defined]
    root_mw = math.sqrt(1e3)
    return {
        _key(f): (complex(a) * root_mw, tuple(o))
        for f, a, o in zip(chosen.freq_hz.tolist(), chosen.amp.tolist(),
                           chosen.orders.tolist(), strict=True)
        if f > 0
    }


def _clean(tone: ToneInput | None) -> ToneInput | None:
    return None if tone is None else replace(tone, harmonics_dbc=())


# --- a world from a description and a drive -------------------------------------------------
def pin_powers(world: SimWorld) -> dict[str, tuple[tuple[float, float], ...]]:
    """The true power at each DUT input pin of a live world now: ``{"rf": ((Hz, dBm), ...),
    "lo": ...}``, each tone's fundamental as it arrives (the sources' level errors, filters,
    cables, combiner and its imbalance included); empty for a port with nothing on."""
    lo = world.lo_input()
    return {"rf": tuple((t.freq_hz, t.power_dbm) for t in world.rf_inputs()),
            "lo": ((lo.freq_hz, lo.power_dbm),) if lo is not None else ()}


def pin_drive_powers(description: Description, drive: Drive) -> dict[
        str, tuple[tuple[float, float], ...]]:
    """:func:`pin_powers` for a drive (source settings, not the DUT-plane levels a sequence
    states) on a description's bench."""
    return pin_powers(_static_world(resolve_description(description), drive, "if"))


@dataclass(frozen=True)
class _Source:
    freq_hz: float
    delivered_power_dbm: float
    output_on: bool
    harmonics_dbc: tuple[float, ...]
    spurious: tuple[tuple[float, float], ...]


@dataclass(frozen=True)
class _Supply:
    output_voltage_v: float
    output_on: bool


@dataclass(frozen=True)
class _Chamber:
    temperature_c: float

    def probe_temperature_c(self) -> float:
        return self.temperature_c


@dataclass(frozen=True)
class _Switch:
    channel: int


def _static_world(desc: SimBenchDescription, drive: Drive, port: Port) -> SimWorld:
    world = SimWorld(_prepared_part(desc), desc.world_config())
    error = (scaled_level_error(desc.sources.level_ripple) if desc.sources.level_error
             else no_level_error_db)
    linearity = desc.sources.level_linearity if desc.sources.level_error else 0.0
    harmonics = tuple(float(h) for h in desc.sources.harmonics)
    spurious = tuple((s.offset, s.level) for s in desc.sources.spurious)

    def source(freq: float | None, power: float, role: str) -> _Source | None:
        if freq is None:
            return None
        delivered = nominal_power_dbm(float(power), float(freq), error, linearity)
        leveled_max = getattr(desc.sources.leveled_max, role)
        if leveled_max is not None:  # as the simulated source: no more than it can level
            delivered = min(delivered, float(leveled_max))
        return _Source(float(freq), delivered, True, harmonics, spurious)

    temperature = desc.chamber.ambient if drive.temperature_c is None else drive.temperature_c
    numbers = (drive.lo_freq_hz, drive.lo_power_dbm, drive.rf_freq_hz, drive.rf_power_dbm,
               drive.rf2_freq_hz, drive.rf2_power_dbm, drive.supply_v, temperature)
    if not all(math.isfinite(v) for v in numbers if v is not None):
        raise InputError(f"the drive has a value that is not a finite number: {drive}",
                         where="truth.Drive",
                         fix="give finite numbers (None for a source that is off)")
    world.connect(
        rf=source(drive.rf_freq_hz, drive.rf_power_dbm, "rf"),
        rf2=source(drive.rf2_freq_hz, drive.rf2_power_dbm, "rf2"),
        lo=source(drive.lo_freq_hz, drive.lo_power_dbm, "lo"),
        supply=_Supply(float(drive.supply_v), drive.supply_v > 0),
        chamber=_Chamber(float(temperature)),
        switch=_Switch(int(_channel(port))),
    )
    return world


@lru_cache(maxsize=16)
def _prepared_part_cached(desc: SimBenchDescription) -> object:
    return prepare_part(desc)


def _prepared_part(desc: SimBenchDescription) -> object:
    try:
        return _prepared_part_cached(desc)
    except TypeError:  # an unhashable description: no cache
        return prepare_part(desc)


# --- helpers --------------------------------------------------------------------------------
def _channel(port: str) -> SwitchChannel:
    try:
        return _CHANNEL[port]
    except KeyError:
        raise InputError(f"no port {port!r}", where="truth",
                         fix=f"name one of {', '.join(PORTS)}") from None


def _port_cable(world: SimWorld, port: Port) -> CableLoss:
    cabling = world.config.cabling
    return {"if": cabling.if_, "rf": cabling.rf_port, "lo": cabling.lo_port}[port]


def _key(freq_hz: float) -> int:
    return round(freq_hz * _KEY_PER_HZ)


def _dbm(power_mw: float) -> float:
    return 10.0 * math.log10(power_mw) if power_mw > 0 else -math.inf


def nearest_line(
    lines: tuple[TruthLine, ...], freq_hz: float, tol_hz: float = 1.0
) -> TruthLine | None:
    """The line within ``tol_hz`` of ``freq_hz`` (the nearest), or None."""
    if not lines:
        return None
    freqs = np.array([line.freq_hz for line in lines])
    k = int(np.argmin(np.abs(freqs - freq_hz)))
    return lines[k] if abs(freqs[k] - freq_hz) <= tol_hz else None


__all__ = [
    "PORTS",
    "Drive",
    "TruthLine",
    "TruthNoise",
    "line_at",
    "nearest_line",
    "noise",
    "noise_dbm",
    "part_figures",
    "port_lines",
    "world_noise",
    "world_port_lines",
]
