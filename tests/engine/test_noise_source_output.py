"""A noise source switched by the analyzer's own noise-source output (profile operation
``noise_source``) instead of a supply: through real pyvisa on the simulated bench, read back
after each switch, measured against the model's truth, and switched off by the safe state,
which reads it back."""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

import pytest

from sweeprig.clock import VirtualClock
from sweeprig.engine.connect import BenchDrivers
from sweeprig.engine.noise_figure import NoiseBench
from sweeprig.engine.safe import make_bench_safe, make_safe
from sweeprig.errors import InputError
from sweeprig.formats.bench import Bench, load_bench
from sweeprig.formats.sequence import load_sequence, required_roles
from sweeprig.plan.noise_check import check_noise_figure
from sweeprig.sim.bench import SimBench, resolve_description, start_sim_bench
from tests.engine.noise_support import (
    IF_HZ,
    SIM_BENCH,
    measure,
    noise_sequence,
    open_noise_bench,
)

ROLES = ("sa", "lo", "rf", "rf2", "dc", "switch", "chamber")


def analyzer_driven_bench_text(profile: str = "scpi-analyzer-ns") -> str:
    """The shipped simulated bench with the analyzer driving the noise source: no nsdc."""
    text = SIM_BENCH.read_text(encoding="utf-8")
    text = text.replace('profile = "scpi-analyzer",', f'profile = "{profile}",')
    text = "\n".join(ln for ln in text.splitlines() if not ln.startswith("nsdc "))
    return text.replace("[noise_source]\n", '[noise_source]\ndrive = "sa"\n')


def write_bench(tmp: Path, profile: str = "scpi-analyzer-ns") -> Bench:
    path = tmp / "bench.toml"
    path.write_text(analyzer_driven_bench_text(profile), encoding="utf-8")
    return load_bench(path)


@pytest.fixture(scope="module")
def served(tmp_path_factory: pytest.TempPathFactory
           ) -> Iterator[tuple[SimBench, Bench, NoiseBench, BenchDrivers]]:
    desc = resolve_description(None)
    assert desc.noise_source is not None
    wired = desc.model_copy(update={
        "noise_source": desc.noise_source.model_copy(update={"drive": "sa"})})
    bench = write_bench(tmp_path_factory.mktemp("ns-output"))
    with start_sim_bench(wired, clock=VirtualClock()) as sim:
        nb, drivers = open_noise_bench(sim, bench=bench, roles=ROLES)
        try:
            nb.system_calibration([IF_HZ])
            yield sim, bench, nb, drivers
        finally:
            drivers.close()


def test_the_analyzer_output_switches_the_source_and_is_read_back(
    served: tuple[SimBench, Bench, NoiseBench, BenchDrivers],
) -> None:
    sim, _, nb, _ = served
    nb.source(True)
    assert sim.world.noise_source_on()
    assert sim.instruments["sa"].handle("OUTP:NOIS?").strip() in ("1", "ON")
    nb.source(False)
    assert not sim.world.noise_source_on()
    assert sim.instruments["sa"].handle("OUTP:NOIS?").strip() in ("0", "OFF")


def test_the_figure_matches_the_model_as_with_a_supply_drive(
    served: tuple[SimBench, Bench, NoiseBench, BenchDrivers],
) -> None:
    sim, _, nb, drivers = served
    outcome = measure(sim, nb, drivers, 2.2e9, 0.0)
    assert abs(outcome.error_db) <= 0.2 and outcome.result.flags == ()
    assert not sim.world.noise_source_on()  # left cold after the reading


def test_the_safe_state_switches_the_output_off_and_reads_it_back(
    served: tuple[SimBench, Bench, NoiseBench, BenchDrivers],
) -> None:
    sim, _, nb, drivers = served
    nb.source(True)
    outcome = make_safe(drivers, supply_safe_v=None, chamber_idle_c=None)
    check = next(c for c in outcome.checks if c.role == "sa")
    assert check.step == "noise-source output off" and check.verified
    assert check.reported == "noise-source output off"
    assert not sim.world.noise_source_on()
    nb._hot = None  # the safe state switched it behind the noise bench's back


def test_the_safe_command_opens_the_analyzer_when_it_drives_the_source(
    served: tuple[SimBench, Bench, NoiseBench, BenchDrivers], tmp_path: Path,
) -> None:
    sim, bench, nb, _ = served
    nb.source(True)
    nb._hot = None
    outcome = make_bench_safe(bench, resources=sim.resources)
    assert "sa noise-source output off" in outcome.done
    assert not sim.world.noise_source_on()


def test_no_supply_role_is_needed_and_a_profile_without_the_operation_is_refused(
    tmp_path: Path,
) -> None:
    sequence = load_sequence(Path(__file__).resolve().parents[2] / "sequences" / "demo"
                             / "kx2417-characterisation.toml")
    roles = required_roles(sequence, "sa")
    assert "nsdc" not in roles and "sa" in roles
    plain = write_bench(tmp_path, profile="scpi-analyzer")
    with pytest.raises(InputError, match="no noise_source operation") as info:
        check_noise_figure(sequence, plain)
    assert "roles.sa" in str(info.value.where) and "scpi-analyzer-ns" in (info.value.fix or "")




def test_a_run_drives_the_source_from_the_analyzer_and_ends_with_it_off(tmp_path: Path
                                                                          ) -> None:
    from sweeprig.analysis.reduce import reduce_run
    from sweeprig.engine.session import run_sequence
    from sweeprig.sim.bench import prepare_part
    from sweeprig.sim.noise_truth import part_noise_figure
    from sweeprig.store.sqlite import SqliteRunStore

    default = Path(__file__).resolve().parents[2] / "sweeprig" / "sim" / "benches" / "default.toml"
    sim_bench = tmp_path / "sim-bench.toml"
    sim_bench.write_text(default.read_text(encoding="utf-8").replace(
        "[noise_source]\n", '[noise_source]\ndrive = "sa"\n'), encoding="utf-8")
    bench_path = tmp_path / "bench.toml"
    bench_path.write_text(analyzer_driven_bench_text(), encoding="utf-8")
    sequence = tmp_path / "noise.toml"
    sequence.write_text(noise_sequence(), encoding="utf-8")
    store_path = tmp_path / "runs.sqlite"
    outcome = run_sequence(sequence, bench_path=bench_path, sim=True,
                           sim_description=sim_bench, store_path=store_path)
    assert outcome.status == "complete", outcome.reason
    assert outcome.safe is not None and "sa noise-source output off" in outcome.safe.done
    with SqliteRunStore(store_path, create=False) as store:
        run = reduce_run(store, outcome.run_id)
    (figure,) = run.figures_named("noise_figure")
    truth = part_noise_figure(prepare_part(resolve_description(sim_bench)), temperature_c=23.0,
                              supply_v=3.3, lo_freq_hz=2.1e9, lo_power_dbm=0.0,
                              rf_freq_hz=2.2e9)
    assert abs(figure.value - truth.dsb_db) <= 0.2 and figure.flags == ()
