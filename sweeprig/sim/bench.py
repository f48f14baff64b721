"""The simulated bench: a description → instruments around one world → SCPI sockets.

The description (a TOML file: which mixer part sits on the bench, the losses of every
connection, the sources' and the analyzer's own figures, faults...) is read by
:mod:`sweeprig.sim.description`, which documents every key; this module builds the
instruments around one :class:`~sweeprig.sim.world.SimWorld` and serves them.

Realism and the roles served: :mod:`sweeprig.sim.description`; what is truly at each port:
:mod:`sweeprig.sim.truth`.
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from types import TracebackType
from typing import TYPE_CHECKING, Any

from sweeprig.clock import Clock, VirtualClock
from sweeprig.errors import InputError
from sweeprig.sim.description import (  # the description's names, as they were here
    BENCHES_DIR,
    DEFAULT_BENCH_NAME,
    ROLES,
    AnalyzerSpec,
    InterfererSpec,
    SimBenchDescription,
    load_sim_bench_description,
    resolve_description,
)
from sweeprig.sim.names import DEFAULT_MAX_CONNECTIONS
from sweeprig.sim.names import shipped_benches as shipped_benches

if TYPE_CHECKING:
    from sweeprig.sim.instruments.analyzer import SpectrumAnalyzer
    from sweeprig.sim.scpi import ScpiInstrument
    from sweeprig.sim.server import ServedBench
    from sweeprig.sim.world import MixerModel, SimWorld

__all__ = [
    "BENCHES_DIR", "DEFAULT_BENCH_NAME", "ROLES", "AnalyzerSpec", "InterfererSpec", "SimBench",
    "SimBenchDescription", "SimInstruments", "build_sim_instruments",
    "load_sim_bench_description", "prepare_part", "resolve_description", "shipped_benches",
    "start_sim_bench",
]


@dataclass(frozen=True)
class SimInstruments:
    """The instruments of a simulated bench around their world, not yet served."""

    world: SimWorld
    instruments: dict[str, ScpiInstrument]
    clock: Clock
    description: SimBenchDescription


def build_sim_instruments(
    description: SimBenchDescription | str | os.PathLike[str] | None = None,
    *,
    clock: Clock | None = None,
    part: MixerModel | None = None,
) -> SimInstruments:
    """Build the world and every instrument (no sockets), wired together.

    ``part`` replaces the description's part (tests use a stand-in mixer).
    """
    from sweeprig.sim.instruments.analyzer import SpectrumAnalyzer
    from sweeprig.sim.instruments.analyzer_fr import FarrowmereAnalyzer
    from sweeprig.sim.instruments.chamber import ThermalChamber
    from sweeprig.sim.instruments.powermeter import DISPLAY_OFFSET_INDEX, PowerMeter
    from sweeprig.sim.instruments.powermeter_fr import FarrowmerePowerMeter
    from sweeprig.sim.instruments.simctl import SimControl
    from sweeprig.sim.instruments.source import SignalSource, no_level_error_db, scaled_level_error
    from sweeprig.sim.instruments.source_fr import CRYSTAL_PPM as FR_CRYSTAL_PPM
    from sweeprig.sim.instruments.source_fr import FarrowmereSource
    from sweeprig.sim.instruments.supply import DcSupply
    from sweeprig.sim.instruments.switch import RfSwitch
    from sweeprig.sim.world import SimWorld

    desc = resolve_description(description)
    clock = clock if clock is not None else VirtualClock()
    model = part if part is not None else prepare_part(desc)
    world = SimWorld(model, desc.world_config())
    level_error = (scaled_level_error(desc.sources.level_ripple) if desc.sources.level_error
                   else no_level_error_db)
    linearity = desc.sources.level_linearity if desc.sources.level_error else 0.0
    harmonics = desc.sources.harmonics
    oscillators = desc.references.oscillators()
    source_class: type[SignalSource] = SignalSource
    serial = "SG6-1000"
    if desc.sources.family == "farrowmere":
        source_class, serial = FarrowmereSource, "SG8-3000"
        for role, ppm in FR_CRYSTAL_PPM.items():  # its own crystal unless the file gives one
            if role not in desc.references.crystal:
                oscillators[role].crystal_ppm = ppm
    sources = {
        role: source_class(clock, f"{serial}{k + 1}", level_error_db=level_error,
                           harmonics_dbc=harmonics,
                           spurious=[(s.offset, s.level) for s in desc.sources.spurious],
                           level_linearity_db=linearity, reference=oscillators[role],
                           leveled_max_dbm=getattr(desc.sources.leveled_max, role))
        for k, role in enumerate(("rf", "rf2", "lo"))
    }
    for role, source in sources.items():  # what a previous user left set (a planted fault)
        left = getattr(desc.sources.left_set, role)
        if left is not None:
            source.put_value("power_offset_db", float(left.power_offset))
            source.put_value("freq_offset_hz", float(left.frequency_offset))
            source.put_value("modulation_on", bool(left.modulation))
    supply = DcSupply(clock, load=world.supply_current_a)
    ns_supply = DcSupply(clock, "PS30-30002", load=world.noise_source_current_a)
    chamber = ThermalChamber(clock, ambient_c=desc.chamber.ambient,
                             probe_tau_s=desc.chamber.probe_lag, drift_tau_s=desc.chamber.drift)
    switch = RfSwitch(clock)
    analyzer_class = (FarrowmereAnalyzer if desc.analyzer.family == "farrowmere"
                      else SpectrumAnalyzer)
    analyzer = analyzer_class(clock, world.analyzer_input, params=desc.analyzer_params(),
                              seed=desc.seed, reference=oscillators["sa"])
    left = desc.analyzer.left_set  # what a previous user left set (a planted fault)
    analyzer.put_value("ref_offset_db", float(left.ref_level_offset))
    analyzer.put_value("corrections_on", bool(left.corrections))
    analyzer.put_value("trace_mode", {"write": "WRITE", "view": "VIEW", "maxhold": "MAXHOLD",
                                      "minhold": "MINHOLD"}[left.trace_mode])
    if left.detector == "rms":
        analyzer.put_value("detector", analyzer.dialect.power_detector.upper())
    meter_class = (FarrowmerePowerMeter if desc.power_meter.family == "farrowmere"
                   else PowerMeter)
    meter = meter_class(clock, sense=world.sensed_power_dbm, seed=desc.seed + 1,
                       cal_factor_error_db=desc.power_meter.cal_factor_error,
                       relative_noise=desc.power_meter.noise,
                       zero_offset_dbm=desc.power_meter.zero_offset,
                       zero_holds=desc.power_meter.zero_holds,
                       range_max_dbm=desc.power_meter.range_max)
    if desc.power_meter.offset:  # what a previous user left set (a planted fault)
        meter.put_value("offset_db", float(desc.power_meter.offset), DISPLAY_OFFSET_INDEX)
        meter.put_value("offset_on", True, DISPLAY_OFFSET_INDEX)
    if desc.power_meter.duty_cycle is not None:
        meter.put_value("duty_cycle_percent", float(desc.power_meter.duty_cycle))
        meter.put_value("duty_cycle_on", True)
    world.connect(rf=sources["rf"], rf2=sources["rf2"], lo=sources["lo"], supply=supply,
                  chamber=chamber, switch=switch, ns_supply=ns_supply,
                  ns_output=lambda: analyzer.noise_output_on)
    truth_line, truth_noise = _truth_hooks(world, analyzer)
    instruments: dict[str, ScpiInstrument] = {
        **sources, "sa": analyzer, "pm": meter, "dc": supply, "chamber": chamber,
        "switch": switch, "nsdc": ns_supply,
        "simctl": SimControl(clock, truth_line=truth_line, truth_noise=truth_noise),
    }
    return SimInstruments(world, {r: instruments[r] for r in ROLES}, clock, desc)


def _truth_hooks(world: SimWorld, analyzer: SpectrumAnalyzer) -> tuple[Any, Any]:
    """The simulation controller's truth queries on this world and analyzer's settings."""
    from sweeprig.sim import truth  # the truth module builds on this one

    def line(port: str, freq_hz: float) -> tuple[float, ...] | None:
        lines = truth.world_port_lines(world, port, analyzer.sweep_settings(),  # type: ignore[arg-type]
                                       analyzer.params)
        hit = truth.nearest_line(lines, freq_hz, 1.0)
        if hit is None:
            return None
        return (hit.total_dbm, hit.part_dbm, hit.source_harmonic_dbm, hit.leakage_dbm,
                hit.analyzer_dbm)

    def noise(port: str, freq_hz: float) -> tuple[float, ...]:
        got = truth.world_noise(world, port, freq_hz, analyzer.sweep_settings(),  # type: ignore[arg-type]
                                analyzer.params)
        return (got.total_dbm, got.danl_dbm, got.input_dbm, got.reciprocal_dbm)

    return line, noise


class SimBench:
    """A running simulated bench: instruments behind raw SCPI sockets.

    ``resources``: role → VISA resource string; ``ports``: role → TCP port; ``world``,
    ``clock``, ``instruments`` (role → instrument), ``description``, ``faults`` (the fault
    injector, whose ``log`` lists every injected fault). Close it, or use it as a context
    manager.
    """

    def __init__(self, parts: SimInstruments, served: ServedBench) -> None:
        self.description = parts.description
        self.world = parts.world
        self.clock = parts.clock
        self.instruments = parts.instruments
        self.served = served
        self.host = served.host
        self.resources: dict[str, str] = dict(served.resources)
        self.ports: dict[str, int] = dict(served.ports)
        self.faults = served.faults

    def close(self) -> None:
        """Stop every server (idempotent)."""
        self.served.close()

    def __enter__(self) -> SimBench:
        return self

    def __exit__(self, exc_type: type[BaseException] | None, exc: BaseException | None,
                 tb: TracebackType | None) -> None:
        self.close()


def start_sim_bench(
    description: SimBenchDescription | str | os.PathLike[str] | None = None,
    *,
    clock: Clock | None = None,
    host: str = "127.0.0.1",
    ports: dict[str, int] | None = None,
    allow_remote: bool = False,
    part: MixerModel | None = None,
    max_connections: int = DEFAULT_MAX_CONNECTIONS,
) -> SimBench:
    """Build the simulated bench and serve it in this process (server threads).

    ``description``: a model, a file path, a shipped bench name, or None for the default.
    ``ports``: role → TCP port (missing or 0: ephemeral). ``allow_remote``: needed to bind a
    non-loopback ``host`` (the simulator has no authentication). ``max_connections``:
    clients each instrument serves at once (one more is refused).
    """
    from sweeprig.sim.server import serve

    parts = build_sim_instruments(description, clock=clock, part=part)
    served = serve(parts.instruments, host=host, ports=ports,
                   faults=parts.description.fault_plan(), allow_remote=allow_remote,
                   max_connections=max_connections)
    return SimBench(parts, served)


def prepare_part(desc: SimBenchDescription) -> Any:
    """The description's part as it sits on this bench (its leakage phases seeded)."""
    from sweeprig.sim.mixer import MixerPart

    model = _load_part(desc.part)
    if isinstance(model, MixerPart):
        model = model.with_changes(leakage_phases=desc.leakage_phases())
    return model


def _load_part(name_or_path: str) -> Any:
    from sweeprig.sim.mixer import load_part

    try:
        return load_part(name_or_path)
    except InputError as exc:
        if exc.where == "part":
            raise InputError(exc.what, where="sim-bench description: part", fix=exc.fix) from None
        raise
