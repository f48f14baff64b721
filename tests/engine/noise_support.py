"""A noise-figure study on a served simulated bench, for the engine tests and benchmarks:
the Y-factor readings through real pyvisa, reduced, beside the model's own truth."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from sweeprig.analysis.bench_specs import specs_from_table
from sweeprig.analysis.noise_figure import NoiseFigureResult, reduce_noise_figure
from sweeprig.engine.connect import BenchDrivers, open_bench
from sweeprig.engine.noise_figure import NoiseBench, NoiseSettings
from sweeprig.formats.bench import Bench, load_bench
from sweeprig.sim.bench import SimBench, prepare_part
from sweeprig.sim.noise_truth import part_noise_figure

ROOT = Path(__file__).resolve().parents[2]


def noise_sequence(rf_frequency: str = '["2.2 GHz"]') -> str:
    """A small sequence of one double-sideband noise-figure study (the demo part, low-side LO
    100 MHz below the RF, 0 dBm, 3.3 V) at ``rf_frequency`` (its TOML value)."""
    return f"""format = 1
[part]
id = "KX-2417"
expected_gain = "12 dB"
expected_lo_if_isolation = "30 dB"
[mixing]
conversion = "down"
lo_side = "low"
if_frequency = "100 MHz"
[conditions]
supply = "3.3 V"
settle = "20 ms"
[[study]]
name = "noise"
rf_frequency = {rf_frequency}
rf_power = "-25 dBm"
lo_power = "0 dBm"
read = ["noise_figure"]
"""
SIM_BENCH = ROOT / "sequences" / "benches" / "sim.toml"
ROLES = ("sa", "nsdc", "lo", "rf", "rf2", "dc", "switch", "chamber")
IF_HZ = 100e6
SUPPLY_V = 3.3


@dataclass(frozen=True)
class NoisePointOutcome:
    rf_hz: float
    lo_dbm: float
    result: NoiseFigureResult
    truth_dsb_db: float
    truth_ssb_db: float

    @property
    def error_db(self) -> float:
        return self.result.nf_dsb_db - self.truth_dsb_db


def open_noise_bench(sim: SimBench, settings: NoiseSettings | None = None, *,
                     bench: Bench | None = None, roles: tuple[str, ...] = ROLES
                     ) -> tuple[NoiseBench, BenchDrivers]:
    """Open ``roles`` of ``bench`` (default: the shipped simulated bench) on ``sim``, prepare
    them and switch the part's supply on."""
    bench = bench if bench is not None else load_bench(SIM_BENCH)
    drivers = open_bench(bench, {r: "noise figure" for r in roles}, resources=sim.resources,
                         clock=sim.clock)
    for _, driver in drivers.items():
        driver.prepare()
    dc = drivers.dc
    assert dc is not None
    dc.set_current_limit(0.2)
    dc.set_voltage(SUPPLY_V)
    dc.set_output(True)
    return NoiseBench(bench, drivers, sim.clock, settings), drivers


def measure(sim: SimBench, nb: NoiseBench, drivers: BenchDrivers, rf_hz: float, lo_dbm: float,
            *, check_compression: bool = False) -> NoisePointOutcome:
    """One point: LO at the DUT port set, hot/cold read, reduced beside the truth."""
    lo = drivers.lo
    assert lo is not None
    lo_hz = rf_hz - IF_HZ
    lo.set_frequency(lo_hz)
    lo.set_power(lo_dbm + nb.bench.loss("lo").at(lo_hz))
    lo.set_output(True)
    lo.check_errors()
    point = nb.hot_cold(IF_HZ, check_compression=check_compression)
    part = nb.part_readings(point, rf_hz, lo_hz - IF_HZ)
    assert nb.cold_k is not None
    result = reduce_noise_figure(
        part, nb.calibration[IF_HZ], cold_k=nb.cold_k,
        specs=specs_from_table(nb.bench.uncertainty).specs,
        compression_step_db=point.compression_step_db,
        compression_jitter_db=point.compression_jitter_db,
        interferer_excess_db=max(point.hot.peak_excess_db, point.cold.peak_excess_db),
        interferer_sigma_db=max(point.hot.point_sigma_db, point.cold.point_sigma_db))
    truth = part_noise_figure(prepare_part(sim.description),
                              temperature_c=sim.world.probe_temperature_c(), supply_v=SUPPLY_V,
                              lo_freq_hz=lo_hz, lo_power_dbm=lo_dbm, rf_freq_hz=rf_hz)
    return NoisePointOutcome(rf_hz, lo_dbm, result, truth.dsb_db, truth.ssb_db)
