"""Runs with a calibration file: its measured losses replace the bench file's typed ones, it
is stored with the run and gives the figures calibrated uncertainty budgets; one made with
other instruments is refused before any output is on."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta
from pathlib import Path

import pytest

from sweeprig.analysis.reduce import reduce_run
from sweeprig.engine.session import run_sequence, served_bench_text, shipped_sequences_dir
from sweeprig.errors import InputError
from sweeprig.formats.calibration import calibration_text
from sweeprig.sim.bench import start_sim_bench
from sweeprig.store.sqlite import SqliteRunStore

QUICK = shipped_sequences_dir() / "demo" / "quick.toml"
#: The simulated bench's instruments (their *IDN? replies).
SIM_IDNS = {
    "rf": "Tarnwick Labs,TW-SG6,SG6-10001,1.0",
    "rf2": "Tarnwick Labs,TW-SG6,SG6-10002,1.0",
    "lo": "Tarnwick Labs,TW-SG6,SG6-10003,1.0",
    "sa": "Tarnwick Labs,TW-SA13,SA13-0001,1.0",
}
#: The built-in bench file's losses (sequences/benches/sim.toml).
BENCH_LOSS = {"rf": 3.0, "rf2": 9.0, "lo": 2.0, "if": 1.5, "rf_port": 2.5, "lo_port": 2.5}


def write_calibration(path: Path, *, rf_offset_db: float = 0.0,
                      idns: dict[str, str] = SIM_IDNS) -> Path:
    now = datetime.now(UTC)
    band = [1e6, 6e9]
    tables = {c: (band, [loss, loss]) for c, loss in BENCH_LOSS.items()}
    tables["rf"] = (band, [3.0 + rf_offset_db] * 2)
    path.write_text(calibration_text(
        created=now - timedelta(hours=1), expires=now + timedelta(days=7), temperature_c=23.0,
        bench="Simulated bench", method="test tables", instruments=idns, tables=tables,
        repeatability_db=0.01), encoding="utf-8")
    return path


def _gains(store_path: Path, run_id: int) -> list[float]:
    with SqliteRunStore(store_path, create=False) as store:
        run = reduce_run(store, run_id)
    return [f.value for f in run.figures_named("conversion_gain")]


def test_a_calibration_replaces_the_typed_losses_and_is_stored_with_the_run(tmp_path):
    store_path = tmp_path / "runs.sqlite"
    plain = run_sequence(QUICK, sim=True, store_path=store_path)
    # A calibration saying the RF path loses 0.5 dB more: the source is set 0.5 dB higher,
    # so the part gets 0.5 dB more than the stated input and the gain reads 0.5 dB high.
    cal = write_calibration(tmp_path / "cal.toml", rf_offset_db=0.5)
    calibrated = run_sequence(QUICK, sim=True, store_path=store_path, calibration=cal)
    assert plain.status == calibrated.status == "complete"
    for before, after in zip(_gains(store_path, plain.run_id),
                             _gains(store_path, calibrated.run_id), strict=True):
        assert after - before == pytest.approx(0.5, abs=0.02)
    with SqliteRunStore(store_path, create=False) as store:
        events = [e for e in store.events(calibrated.run_id) if e.kind == "calibration"]
        assert events and events[0].details["text"] == cal.read_text(encoding="utf-8")
        run = reduce_run(store, calibrated.run_id)
        uncalibrated = reduce_run(store, plain.run_id)
    assert any("figures corrected by the calibration" in n for n in run.notes)
    gain = run.figures_named("conversion_gain")[0]
    terms = {c.name for c in gain.budget.contributions}
    assert {"input_power_meter", "output_power_meter", "calibration_repeatability"} <= terms
    assert "input_level" not in terms
    # The figure: with the default specifications a calibrated gain's U ≤ 0.5 dB.
    assert gain.uncertainty_db <= 0.5
    assert uncalibrated.figures_named("conversion_gain")[0].uncertainty_db > 0.5


def test_a_calibration_made_with_another_source_is_refused_before_any_output(tmp_path):
    other = dict(SIM_IDNS, rf="Tarnwick Labs,TW-SG6,SG6-19999,1.0")
    cal = write_calibration(tmp_path / "cal.toml", idns=other)
    store_path = tmp_path / "runs.sqlite"
    with start_sim_bench() as sim:
        bench = tmp_path / "bench.toml"
        bench.write_text(served_bench_text(sim.resources), encoding="utf-8")
        with pytest.raises(InputError) as info:
            run_sequence(QUICK, bench, store_path=store_path, calibration=cal)
        for role in ("rf", "rf2", "lo", "dc"):
            assert sim.instruments[role].output_on is False
        assert "SG6-19999" in info.value.what and "cal.toml:" in str(info.value)
        outcome = run_sequence(QUICK, bench, store_path=store_path, calibration=cal,
                               accept_calibration=True)
    assert outcome.status == "complete"
    with SqliteRunStore(store_path, create=False) as store:
        assert [r.id for r in store.runs()] == [outcome.run_id]  # the refusal stored nothing
        warnings = [e for e in store.events(outcome.run_id)
                    if e.kind == "calibration" and e.severity == "warning"]
        assert warnings and "accepted by --accept-calibration" in warnings[0].message


def test_a_resumed_run_keeps_its_calibration_and_refuses_a_changed_one(tmp_path):
    from sweeprig.clock import VirtualClock
    from sweeprig.engine.session import resume_run
    from sweeprig.sim.bench import resolve_description
    from sweeprig.sim.faults import FaultSpec

    fault = FaultSpec(role="sa", kind="error", at_command=30, code=-222,
                      text="Data out of range")
    description = resolve_description(None).model_copy(update={"faults": (fault,)})
    sequence = tmp_path / "seq.toml"
    sequence.write_text(QUICK.read_text(encoding="utf-8")
                        + '\n[recovery]\non_error = "stop"\npoint_attempts = 1\n')
    cal = write_calibration(tmp_path / "cal.toml", rf_offset_db=0.5)
    store_path = tmp_path / "runs.sqlite"
    with start_sim_bench(description, clock=VirtualClock()) as sim:
        bench = tmp_path / "bench.toml"
        bench.write_text(served_bench_text(sim.resources), encoding="utf-8")
        first = run_sequence(sequence, bench, store_path=store_path, calibration=cal)
        assert first.status == "aborted"
        text = cal.read_text(encoding="utf-8")
        cal.write_text(text + "\n", encoding="utf-8")  # any change at all
        with pytest.raises(InputError) as info:
            resume_run(first.run_id, store_path=store_path)
        assert "used the calibration" in info.value.what and "cal.toml" in info.value.what
        cal.write_text(text, encoding="utf-8")
        resumed = resume_run(first.run_id, store_path=store_path)
    assert resumed.status == "complete"
    with SqliteRunStore(store_path, create=False) as store:
        kinds = [e.kind for e in store.events(first.run_id)]
        gains = [f.value for f in reduce_run(store, first.run_id).figures_named(
            "conversion_gain")]
    assert kinds.count("calibration") == 2  # once per start: both used the same file
    plain = run_sequence(QUICK, sim=True, store_path=tmp_path / "plain.sqlite")
    for after, before in zip(gains, _gains(tmp_path / "plain.sqlite", plain.run_id),
                             strict=True):
        assert after - before == pytest.approx(0.5, abs=0.02)  # every point corrected
