"""The hardware test path: `pytest -m hardware` with SWEEPRIG_HARDWARE_BENCH naming a bench
file probes every instrument of that bench and runs a short sequence with RF at safe levels.
Without the variable the tests are skipped, saying why. The same checks run in the default
suite against the simulated bench served on loopback (real pyvisa), so the path itself is
known to work before anyone has the hardware."""

from __future__ import annotations

import json
import os
from pathlib import Path

import pytest

from sweeprig.cli.probe_cmd import run_probe
from sweeprig.clock import VirtualClock
from sweeprig.engine.session import run_sequence, served_bench_text
from sweeprig.formats.bench import load_bench
from sweeprig.sim.bench import start_sim_bench

BENCH_ENV = "SWEEPRIG_HARDWARE_BENCH"
"""Names the bench file of the hardware under test."""
SMOKE = Path(__file__).parent / "data" / "safe-smoke.toml"
KEEPS_OUTPUT_OFF = ("rf", "rf2", "lo", "dc")


def bench_from_env() -> Path:
    """The bench file named by the environment; skips the test (with the reason) if none."""
    name = os.environ.get(BENCH_ENV, "").strip()
    if not name:
        pytest.skip(f"no hardware bench named: set {BENCH_ENV}=path/to/bench.toml to probe "
                    "its instruments and run a short sequence at safe levels")
    path = Path(name)
    if not path.is_file():
        pytest.fail(f"{BENCH_ENV}={name!r} is not a bench file")
    return path


def probe_bench(bench_path: Path, out_dir: Path) -> dict[str, dict]:
    """Probe every instrument of the bench (levels inside its limits); return role → JSON
    report, each also written to ``out_dir`` for a bug report."""
    bench = load_bench(bench_path)
    results: dict[str, dict] = {}
    for role in type(bench.roles).model_fields:
        spec = bench.role(role)
        if spec is None or role == "simctl":
            continue
        report = run_probe(spec.resource, spec.profile, bench_path=bench_path, role=role,
                           timeout_s=float(bench.bench.timeout))
        data = report.as_json()
        (out_dir / f"probe-{role}.json").write_text(json.dumps(data, indent=2) + "\n",
                                                    encoding="utf-8")
        results[role] = data
    return results


def assert_probe_clean(results: dict[str, dict]) -> None:
    assert results, "the bench names no instruments"
    for role, data in results.items():
        failed = [s for s in data["steps"] if s["result"] == "fail"]
        assert not failed, f"{role}: {failed}"
        if role in KEEPS_OUTPUT_OFF:
            assert data["outputs_off_verified"] is True, role


def run_smoke(bench_path: Path, store: Path) -> None:
    outcome = run_sequence(SMOKE, bench_path, store_path=store)
    assert outcome.status == "complete", outcome.reason


@pytest.mark.hardware
def test_probe_every_instrument_of_the_bench(tmp_path: Path) -> None:
    out_dir = Path(os.environ.get("SWEEPRIG_HARDWARE_OUT", tmp_path))
    assert_probe_clean(probe_bench(bench_from_env(), out_dir))


@pytest.mark.hardware
def test_short_sequence_at_safe_levels(tmp_path: Path) -> None:
    run_smoke(bench_from_env(), tmp_path / "hardware.sqlite")


def test_skipped_with_the_reason_without_a_bench(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.delenv(BENCH_ENV, raising=False)
    with pytest.raises(pytest.skip.Exception) as info:
        bench_from_env()
    assert BENCH_ENV in str(info.value)


def test_hardware_path_on_the_simulated_bench(tmp_path: Path) -> None:
    with start_sim_bench(clock=VirtualClock()) as sim:
        bench = tmp_path / "bench.toml"
        bench.write_text(served_bench_text(sim.resources), encoding="utf-8")
        assert_probe_clean(probe_bench(bench, tmp_path))
        run_smoke(bench, tmp_path / "s.sqlite")
        for role in ("rf", "rf2", "lo"):
            assert not sim.instruments[role].value("output_on")
