"""``sweeprig sim serve``: starts, prints resources, answers, stops cleanly; clear errors."""

from __future__ import annotations

import os
import queue
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path
from typing import Any

import pytest
import pyvisa
from typer.testing import CliRunner

from sweeprig.cli import sim_cmd
from sweeprig.errors import InputError
from sweeprig.sim.bench import ROLES

_LAUNCH = "from sweeprig.cli.sim_cmd import app; app(prog_name='sweeprig sim')"


def _read_until_ready(proc: subprocess.Popen[str], timeout_s: float = 30.0) -> list[str]:
    lines: queue.Queue[str | None] = queue.Queue()

    def pump() -> None:
        assert proc.stdout is not None
        for line in proc.stdout:
            lines.put(line.rstrip("\n"))
        lines.put(None)

    threading.Thread(target=pump, daemon=True).start()
    seen: list[str] = []
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        try:
            line = lines.get(timeout=0.5)
        except queue.Empty:
            continue
        if line is None:
            break
        seen.append(line)
        if line.startswith("ready"):
            return seen
    raise AssertionError(f"the server did not become ready; output so far: {seen}")


def test_serve_prints_resources_answers_and_stops_on_sigint() -> None:
    env = {**os.environ, "PYTHONUNBUFFERED": "1", "COLUMNS": "200"}
    proc = subprocess.Popen(
        [sys.executable, "-c", _LAUNCH, "serve"], stdout=subprocess.PIPE,
        stderr=subprocess.PIPE, text=True, env=env,
    )
    try:
        lines = _read_until_ready(proc)
        rows = {line.split()[0]: line.split()[1] for line in lines
                if line.split() and line.split()[0] in ROLES}
        assert set(rows) == set(ROLES)
        assert all(r.startswith("TCPIP0::127.0.0.1::") for r in rows.values())
        sa_row = next(line for line in lines if line.startswith("sa "))
        assert "Tarnwick Labs,TW-SA13" in sa_row
        rm = pyvisa.ResourceManager("@py")
        clients = [rm.open_resource(rows["sa"], read_termination="\n",
                                    write_termination="\n", timeout=5000) for _ in range(2)]
        assert all(c.query("*IDN?").startswith("Tarnwick Labs,TW-SA13") for c in clients)
        for client in clients:
            client.close()
        rm.close()
        proc.send_signal(signal.SIGINT)
        _, err = proc.communicate(timeout=20)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.communicate()
    assert proc.returncode == 0, err
    assert "Traceback" not in err


def test_bad_description_gives_one_message_and_no_traceback(tmp_path: Path) -> None:
    bad = tmp_path / "bench.toml"
    bad.write_text('part = "ideal"\n[cables]\nrf = "3 GHz"\n', encoding="utf-8")
    result = subprocess.run(
        [sys.executable, "-c", _LAUNCH, "serve", str(bad)], capture_output=True, text=True,
        timeout=60, env={**os.environ, "COLUMNS": "200"},
    )
    assert result.returncode != 0
    assert "Traceback" not in result.stderr + result.stdout
    assert result.stderr.startswith("error: ")
    assert "bench.toml:3" in result.stderr and "fix:" in result.stderr


class _FakeBench:
    def __init__(self, **kwargs: Any) -> None:
        self.kwargs = kwargs
        self.closed = False
        self.description = type("D", (), {"part": "ideal", "seed": 1})()
        self.resources = {r: f"TCPIP0::10.0.0.1::{5025 + k}::SOCKET" for k, r in enumerate(ROLES)}
        self.instruments = {r: type("I", (), {"handle": staticmethod(lambda m: "X,Y,1,1")})()
                            for r in ROLES}

    def close(self) -> None:
        self.closed = True


def test_remote_host_is_warned_and_ports_follow_the_base(monkeypatch: pytest.MonkeyPatch) -> None:
    started: list[_FakeBench] = []

    def fake_start(description: Any, **kwargs: Any) -> _FakeBench:
        started.append(_FakeBench(description=description, **kwargs))
        return started[-1]

    monkeypatch.setattr(sim_cmd, "start_sim_bench", fake_start)
    monkeypatch.setattr(sim_cmd, "_wait_for_interrupt", lambda: None)
    result = CliRunner().invoke(
        sim_cmd.app, ["serve", "--host", "10.0.0.1", "--port-base", "5025"]
    )
    assert result.exit_code == 0, result.output
    assert "reachable from the network" in result.output
    bench = started[0]
    assert bench.closed
    assert bench.kwargs["allow_remote"] is True
    assert bench.kwargs["ports"]["rf"] == 5025 and bench.kwargs["ports"]["simctl"] == 5033


def test_loopback_host_is_not_warned(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(sim_cmd, "start_sim_bench", lambda d, **kw: _FakeBench(**kw))
    monkeypatch.setattr(sim_cmd, "_wait_for_interrupt", lambda: None)
    result = CliRunner().invoke(sim_cmd.app, ["serve", "--realtime"])
    assert result.exit_code == 0, result.output
    assert "reachable" not in result.output
    assert "wall-clock time" in result.output


def test_port_base_out_of_range() -> None:
    with pytest.raises(InputError):
        sim_cmd._ports(65530)
    assert sim_cmd._ports(0) is None


def test_help_has_an_example() -> None:
    result = CliRunner().invoke(sim_cmd.app, ["serve", "--help"], env={"COLUMNS": "120"})
    assert result.exit_code == 0
    assert "sweeprig sim serve" in result.output and "*IDN?" in result.output


def test_write_bench_fills_in_the_resources(monkeypatch: pytest.MonkeyPatch,
                                            tmp_path: Path) -> None:
    monkeypatch.setattr(sim_cmd, "start_sim_bench", lambda d, **kw: _FakeBench(**kw))
    monkeypatch.setattr(sim_cmd, "_wait_for_interrupt", lambda: None)
    target = tmp_path / "served.toml"
    result = CliRunner().invoke(sim_cmd.app, ["serve", "--write-bench", str(target)])
    assert result.exit_code == 0, result.output
    assert "TCPIP0::10.0.0.1::5028::SOCKET" in target.read_text(encoding="utf-8")
