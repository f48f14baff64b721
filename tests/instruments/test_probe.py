"""The conformance probe against the simulated instruments (real pyvisa over loopback) and
against deliberately broken profiles."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from sweeprig.cli.probe_cmd import run_probe
from sweeprig.clock import VirtualClock
from sweeprig.instruments.profile import load_profile
from sweeprig.sim.bench import start_sim_bench

SHIPPED = [("rf", "scpi-source"), ("sa", "scpi-analyzer"), ("sa", "scpi-analyzer-ns"),
           ("pm", "scpi-powermeter"),
           ("dc", "scpi-supply"), ("chamber", "thermal-chamber"), ("switch", "scpi-switch"),
           ("simctl", "sim-control")]


@pytest.fixture(scope="module")
def sim():
    with start_sim_bench(clock=VirtualClock()) as bench:
        yield bench


@pytest.mark.parametrize(("role", "profile"), SHIPPED)
def test_every_operation_of_the_shipped_profiles_works(sim, role: str, profile: str) -> None:
    report = run_probe(sim.resources[role], profile, timeout_s=2.0)
    assert report.counts()["fail"] == 0, [s for s in report.steps if s.result != "ok"]
    probed = {s.op for s in report.steps}
    assert probed == set(load_profile(profile).ops) - {"next_error"}
    # every step read the error queue: the SCPI-99 SYSTem:ERRor? query follows each step
    assert all(s.round_trip_ms is not None for s in report.steps)


def test_outputs_stay_off_and_levels_low(sim) -> None:
    report = run_probe(sim.resources["rf"], "scpi-source", timeout_s=2.0)
    assert report.outputs_off_verified is True
    sent = [cmd for step in report.steps for cmd in step.sent]
    assert "OUTP:STAT ON" not in sent
    assert "SOUR:POW:LEV:IMM:AMPL -30" in sent
    assert not sim.instruments["rf"].value("output_on")  # the simulator's own state
    supply = run_probe(sim.resources["dc"], "scpi-supply", timeout_s=2.0)
    assert supply.outputs_off_verified is True
    assert "SOUR:VOLT:LEV:IMM:AMPL 0" in [c for s in supply.steps for c in s.sent]


def test_the_noise_source_output_is_probed_off(sim) -> None:
    report = run_probe(sim.resources["sa"], "scpi-analyzer-ns", timeout_s=2.0)
    sent = [cmd for step in report.steps for cmd in step.sent]
    assert "OUTP:NOIS:STAT OFF" in sent and "OUTP:NOIS:STAT ON" not in sent
    assert not sim.instruments["sa"].noise_output_on  # the simulator's own state


def _broken(tmp_path: Path, name: str, body: str) -> Path:
    path = tmp_path / f"{name}.toml"
    path.write_text(f'[profile]\nname = "{name}"\nextends = "scpi-analyzer"\n'
                    f"idn_pattern = '^Tarnwick Labs,TW-SA13,'\n\n{body}", encoding="utf-8")
    return path


def test_misspelt_command_is_named_with_the_instruments_error(sim, tmp_path: Path) -> None:
    path = _broken(tmp_path, "lab-sa-typo",
                   '[ops.rbw_auto]\ncommand = "SENS:BAND:RES:AUT {value}"\n')
    report = run_probe(sim.resources["sa"], str(path), timeout_s=2.0)
    (bad,) = report.failed
    assert bad.op == "rbw_auto" and bad.sent == ("SENS:BAND:RES:AUT ON",)
    assert bad.errors and bad.errors[0].startswith("-113")  # SCPI-99: -113 undefined header
    assert "SENS:BAND:RES:AUT ON" in bad.detail
    assert "spells it differently" in bad.fix and "ops.rbw_auto.command" in bad.fix
    assert str(path) in bad.fix


def test_wrong_reply_format_is_reported(sim, tmp_path: Path) -> None:
    path = _broken(tmp_path, "lab-sa-reply", '[ops.sweep_time]\nquery = "SENS:SWE:TIME?"\n'
                   'reply = "int"\n')
    report = run_probe(sim.resources["sa"], str(path), timeout_s=2.0)
    (bad,) = report.failed
    assert bad.op == "sweep_time" and "ops.sweep_time.reply" in bad.fix


def test_unknown_query_times_out_and_later_answers_stay_in_step(sim, tmp_path: Path) -> None:
    path = _broken(tmp_path, "lab-sa-query", '[ops.sweep_time]\nquery = "SENS:SWE:TIMER?"\n')
    report = run_probe(sim.resources["sa"], str(path), timeout_s=0.5)
    (bad,) = report.failed
    assert bad.op == "sweep_time" and "ops.sweep_time.query" in bad.fix
    after = [s for s in report.steps if s.op in ("marker_level", "overload")]
    assert all(s.result == "ok" for s in after)


def test_wrong_identity_pattern_stops_after_identify(sim, tmp_path: Path) -> None:
    path = tmp_path / "lab-sa-idn.toml"
    path.write_text('[profile]\nname = "lab-sa-idn"\nextends = "scpi-analyzer"\n'
                    "idn_pattern = '^Someone Else,'\n", encoding="utf-8")
    report = run_probe(sim.resources["sa"], str(path), timeout_s=2.0)
    assert [s.op for s in report.steps] == ["identify"]
    assert report.steps[0].result == "fail"
    assert "pattern" in report.steps[0].detail and "profile" in report.steps[0].fix


def test_report_is_json(sim) -> None:
    report = run_probe(sim.resources["pm"], "scpi-powermeter", timeout_s=2.0)
    data = json.loads(json.dumps(report.as_json()))
    assert data["format"] == "sweeprig-probe/1" and data["counts"]["fail"] == 0
    assert data["idn"].startswith("Tarnwick Labs,TW-PM18") and data["cautions"]


def test_an_instrument_in_use_is_not_probed(sim) -> None:
    from sweeprig.engine.locks import BenchBusy, BenchLock

    with BenchLock([sim.resources["pm"]], "run 7"), pytest.raises(BenchBusy) as info:
        run_probe(sim.resources["pm"], "scpi-powermeter", timeout_s=2.0)
    assert "run 7" in str(info.value)
