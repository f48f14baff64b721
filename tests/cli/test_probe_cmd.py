"""``sweeprig probe``: the table, the JSON file, exit codes, cautions; a broken profile is
refused before anything is sent."""

from __future__ import annotations

import json
from pathlib import Path

from typer.testing import CliRunner

from sweeprig.cli.main import app
from sweeprig.clock import VirtualClock
from sweeprig.sim.bench import start_sim_bench

CORPUS = Path(__file__).parents[1] / "corpus" / "profiles"


def test_probe_prints_writes_json_and_cautions(tmp_path: Path) -> None:
    out = tmp_path / "probe.json"
    with start_sim_bench(clock=VirtualClock()) as sim:
        result = CliRunner().invoke(app, ["probe", sim.resources["rf"], "--profile",
                                          "scpi-source", "--out", str(out), "--timeout", "2"],
                                    terminal_width=200)
    assert result.exit_code == 0, result.output
    assert "caution:" in result.output and "verified by read-back" in result.output
    data = json.loads(out.read_text(encoding="utf-8"))
    assert data["profile"] == "scpi-source" and data["outputs_off_verified"] is True


def test_failed_operation_exits_non_zero(tmp_path: Path) -> None:
    profile = tmp_path / "lab-src.toml"
    profile.write_text('[profile]\nname = "lab-src"\nextends = "scpi-source"\n'
                       "idn_pattern = '^Tarnwick Labs,TW-SG6,'\n[ops.frequency]\n"
                       'command = "SOUR:FREQ:CWW {value}"\n', encoding="utf-8")
    with start_sim_bench(clock=VirtualClock()) as sim:
        result = CliRunner().invoke(app, ["probe", sim.resources["rf"], "--profile",
                                          str(profile), "--out", str(tmp_path / "p.json"),
                                          "--timeout", "2"], terminal_width=200)
    assert result.exit_code == 1
    data = json.loads((tmp_path / "p.json").read_text(encoding="utf-8"))
    (bad,) = [s for s in data["steps"] if s["result"] == "fail"]
    assert bad["op"] == "frequency" and "ops.frequency.command" in bad["fix"]


def test_bench_limits_bound_the_probe_levels(tmp_path: Path) -> None:
    with start_sim_bench(clock=VirtualClock()) as sim:
        bench = tmp_path / "bench.toml"
        bench.write_text(
            '[bench]\nname = "probe bench"\n\n[roles]\n'
            f'rf = {{ resource = "{sim.resources["rf"]}", profile = "scpi-source" }}\n\n'
            "[limits]\nsource_max_power = { rf = \"-40 dBm\" }\n", encoding="utf-8")
        result = CliRunner().invoke(app, ["probe", sim.resources["rf"], "--profile",
                                          "scpi-source", "--bench", str(bench), "--out",
                                          str(tmp_path / "p.json"), "--timeout", "2"],
                                    terminal_width=200)
    assert result.exit_code == 0, result.output
    data = json.loads((tmp_path / "p.json").read_text(encoding="utf-8"))
    (power,) = [s for s in data["steps"] if s["op"] == "power"]
    assert power["value"] == "-40"  # the bench's limit, below the probe's own -30 dBm


def test_broken_profile_is_refused_before_anything_is_sent(tmp_path: Path) -> None:
    # a port nobody listens on: had the probe opened a connection, it would fail there
    # (exit 4, a transport error) instead of at the profile's line
    result = CliRunner().invoke(app, ["probe", "TCPIP0::127.0.0.1::9::SOCKET", "--profile",
                                      str(CORPUS / "serial-impossible-stop-bits.toml"),
                                      "--out", str(tmp_path / "p.json")])
    assert result.exit_code == 2
    assert "serial-impossible-stop-bits.toml:11" in result.output
    assert "Traceback" not in result.output
    assert not (tmp_path / "p.json").exists()
