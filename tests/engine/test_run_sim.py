"""End-to-end runs of the engine against the simulated bench over real pyvisa/TCP:
every point stored once, readings intact, pre-flight refusals touch nothing, and the bench
is left safe (RF off, supply off) after a normal end, an instrument error, and SIGINT or
SIGTERM sent to a running ``sweeprig`` process."""

from __future__ import annotations

import json
import math
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import pytest

from sweeprig.analysis import validity
from sweeprig.clock import VirtualClock
from sweeprig.engine.session import run_sequence, served_bench_text, shipped_sequences_dir
from sweeprig.errors import SafetyLimitError
from sweeprig.formats.sequence import load_sequence
from sweeprig.plan.expand import count_points, iter_points
from sweeprig.sim import truth
from sweeprig.sim.analyzer_display import SweepSettings
from sweeprig.sim.bench import resolve_description, start_sim_bench
from sweeprig.sim.faults import FaultSpec
from sweeprig.store.sqlite import SqliteRunStore
from tests.support import points_stored

SEQUENCES = shipped_sequences_dir()


def bench_file_for(sim, folder: Path) -> Path:
    path = folder / "bench.toml"
    path.write_text(served_bench_text(sim.resources), encoding="utf-8")
    return path

QUICK = SEQUENCES / "demo" / "quick.toml"
SLOW = Path(__file__).parent / "data" / "slow.toml"


def _assert_bench_safe(sim) -> None:
    for role in ("rf", "rf2", "lo"):
        assert sim.instruments[role].output_on is False, f"{role} RF still on"
    assert sim.instruments["dc"].output_on is False, "supply still on"


def test_quick_sequence_on_the_simulated_bench_stores_every_point_once(tmp_path):
    store_path = tmp_path / "runs.sqlite"
    outcome = run_sequence(QUICK, sim=True, store_path=store_path)
    assert outcome.status == "complete", outcome.reason
    sequence = load_sequence(QUICK)
    total = count_points(sequence)
    assert outcome.points_done == total
    store = SqliteRunStore(store_path)
    try:
        points = store.points_frame(outcome.run_id)
        readings = store.readings_frame(outcome.run_id)
        info = store.run(outcome.run_id)
    finally:
        store.close()
    assert sorted(points["point_index"]) == list(range(total))
    planned = {p.index: [r.name for r in p.readings] for p in iter_points(sequence)}
    for index, names in planned.items():
        got = readings[readings["point_index"] == index]["name"].tolist()
        assert got == names
    analyzer = readings[readings["port"].isin(["if", "rf", "lo"])]
    assert analyzer["level_dbm"].notna().all()
    assert info.status == "complete"
    assert {i.role for i in info.instruments} >= {"rf", "lo", "sa", "dc", "chamber"}
    assert all("Tarnwick" in i.idn or "Kelderhall" in i.idn for i in info.instruments)
    assert outcome.safe is not None and outcome.safe.ok
    # the chamber soak passed in simulated time only (wall time: tests/perf/test_perf_run_sim.py)
    assert outcome.sim_elapsed_s > 60.0


def test_run_on_a_served_bench_leaves_rf_and_supply_off(tmp_path, sim_bench):
    bench = bench_file_for(sim_bench, tmp_path)
    outcome = run_sequence(QUICK, bench, store_path=tmp_path / "s.sqlite")
    assert outcome.status == "complete", outcome.reason
    _assert_bench_safe(sim_bench)


def test_preflight_refusal_touches_no_instrument_and_records_no_run(tmp_path, sim_bench):
    hot = tmp_path / "hot.toml"
    hot.write_text(QUICK.read_text(encoding="utf-8").replace('rf_power = "-20 dBm"',
                                                             'rf_power = "14 dBm"'))
    bench = bench_file_for(sim_bench, tmp_path)
    store_path = tmp_path / "s.sqlite"
    before = {role: inst.settings() for role, inst in sim_bench.instruments.items()}
    with pytest.raises(SafetyLimitError) as err:
        run_sequence(hot, bench, store_path=store_path)
    assert "point" in str(err.value)
    after = {role: inst.settings() for role, inst in sim_bench.instruments.items()}
    assert after == before
    if store_path.exists():
        with sqlite3.connect(store_path) as db:
            assert db.execute("SELECT COUNT(*) FROM runs").fetchone()[0] == 0


def test_one_instrument_error_is_retried_and_recorded(tmp_path):
    fault = FaultSpec(role="sa", kind="error", at_command=60, code=-222,
                      text="Data out of range")
    description = resolve_description(None).model_copy(update={"faults": (fault,)})
    with start_sim_bench(description, clock=VirtualClock()) as sim:
        bench = bench_file_for(sim, tmp_path)
        outcome = run_sequence(QUICK, bench, store_path=tmp_path / "s.sqlite")
        assert outcome.status == "complete", outcome.reason
        _assert_bench_safe(sim)
        assert len(sim.faults.log.events()) == 1
    store = SqliteRunStore(tmp_path / "s.sqlite")
    try:
        events = store.events(outcome.run_id)
        assert sorted(store.points_frame(outcome.run_id)["point_index"]) == list(range(5))
    finally:
        store.close()
    errors = [e for e in events if e.kind == "error"]
    assert len(errors) == 1 and "-222" in errors[0].message and "'sa'" in errors[0].message


@pytest.mark.parametrize(("policy", "status", "stored"), [("stop", "aborted", 0),
                                                          ("skip", "complete", 4)])
def test_error_policy_stop_aborts_safely_and_skip_records_the_point(tmp_path, policy, status,
                                                                   stored):
    sequence = tmp_path / "seq.toml"
    sequence.write_text(QUICK.read_text(encoding="utf-8")
                        + f'\n[recovery]\non_error = "{policy}"\npoint_attempts = 1\n')
    # the analyzer's 10th message falls in point 0 (the engine joins its settings and
    # queries into fewer messages than it did: the 30th now falls in point 1)
    fault = FaultSpec(role="sa", kind="error", at_command=10, code=-222,
                      text="Data out of range")
    description = resolve_description(None).model_copy(update={"faults": (fault,)})
    with start_sim_bench(description, clock=VirtualClock()) as sim:
        bench = bench_file_for(sim, tmp_path)
        outcome = run_sequence(sequence, bench, store_path=tmp_path / "s.sqlite")
        assert outcome.status == status
        _assert_bench_safe(sim)
        assert outcome.safe is not None and outcome.safe.ok
    if policy == "stop":
        assert "'sa'" in (outcome.reason or "") and "-222" in (outcome.reason or "")
    store = SqliteRunStore(tmp_path / "s.sqlite")
    try:
        assert store.run(outcome.run_id).status == status
        assert len(store.points_frame(outcome.run_id)) == stored
        kinds = [e.kind for e in store.events(outcome.run_id)]
    finally:
        store.close()
    assert ("skip" in kinds) == (policy == "skip")


@pytest.mark.parametrize("sig", [signal.SIGINT, signal.SIGTERM, signal.SIGHUP])
def test_signal_to_a_running_process_leaves_rf_off(tmp_path, realtime_sim_bench, sig):
    sim_bench = realtime_sim_bench
    bench = bench_file_for(sim_bench, tmp_path)
    store_path = tmp_path / "s.sqlite"
    proc = subprocess.Popen(
        [sys.executable, "-m", "sweeprig", "run", str(SLOW), "--bench", str(bench),
         "--store", str(store_path), "--quiet"],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
    )
    try:
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline:
            if any(sim_bench.instruments[r].output_on for r in ("rf", "lo")) and \
                    points_stored(store_path) >= 2:
                break
            assert proc.poll() is None, proc.communicate()
            time.sleep(0.05)
        else:
            pytest.fail("the run never got going")
        proc.send_signal(sig)
        out, err = proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
    assert proc.returncode != 0
    assert "Traceback" not in err
    assert "aborted" in out
    _assert_bench_safe(sim_bench)
    store = SqliteRunStore(store_path)
    try:
        run = store.runs()[0]
        assert run.status == "aborted"
        assert signal.Signals(sig).name in (store.run(run.id).reason or "")
    finally:
        store.close()




TWO_TONE_WIDE = Path(__file__).parent / "data" / "two_tone_wide_span.toml"


def test_im3_beside_strong_tones_in_the_span_is_not_read_as_in_noise(tmp_path):
    # Each IM3 product shares a 6 MHz trace with both wanted tones (~45 dB above it). The
    # floor must be the displayed noise there (the analyzer's own, the part's output noise,
    # and the tones' reciprocal mixing by the analyzer's LO phase noise: real noise that a
    # real analyzer shows too), not the tones' filter skirts.
    store_path = tmp_path / "runs.sqlite"
    # the clean bench: its sources' levels are the ones set (the default's are up to 1 dB off)
    outcome = run_sequence(TWO_TONE_WIDE, sim=True, store_path=store_path,
                           sim_description="clean")
    assert outcome.status == "complete", outcome.reason
    store = SqliteRunStore(store_path)
    try:
        readings = store.readings_frame(outcome.run_id)
        points = store.points_frame(outcome.run_id)
    finally:
        store.close()
    im3 = readings[readings["name"].str.startswith("im3.")]
    assert len(im3) == 2
    for _, row in im3.iterrows():
        extra = json.loads(row["extra_json"])
        point = points[points["point_index"] == row["point_index"]].iloc[0]
        # the simulator's own answer for the displayed noise at this frequency and these
        # settings (sources set to the DUT-plane level plus the bench file's path losses:
        # rf 3.0, rf2 9.0, lo 2.0 dB), referred to the DUT plane by the path loss
        drive = truth.Drive(
            lo_freq_hz=point["lo_freq_hz"], lo_power_dbm=point["lo_power_dbm"] + 2.0,
            rf_freq_hz=point["rf_freq_hz"], rf_power_dbm=point["rf_power_dbm"] + 3.0,
            rf2_freq_hz=point["rf2_freq_hz"], rf2_power_dbm=point["rf2_power_dbm"] + 9.0,
            supply_v=point["supply_v"])  # no chamber here: the bench's ambient
        settings = SweepSettings.centered(row["freq_hz"], row["span_hz"], rbw_hz=row["rbw_hz"],
                                          attenuation_db=row["attenuation_db"])
        noise = truth.noise("clean", drive, "if", row["freq_hz"], settings)
        expected = noise.total_dbm + extra["path_loss_db"]
        # DANL = kT0 + NF + attenuation + 10·log10(RBW) (kT0 = -173.98 dBm/Hz, Pozar), NF 14 dB
        assert noise.danl_dbm == pytest.approx(
            -173.975 + 14.0 + row["attenuation_db"] + 10.0 * math.log10(row["rbw_hz"]),
            abs=0.01)
        floor = row["noise_floor_dbm"]
        assert expected - 1.0 <= floor <= expected + 3.0, (row["name"], floor, expected)
        # well above the floor: neither flagged in noise nor kept out of a fit
        assert row["level_dbm"] - floor > 30.0
        assert not validity.in_noise(row["level_dbm"], floor)
        assert validity.clear_of_noise(row["level_dbm"], floor)
