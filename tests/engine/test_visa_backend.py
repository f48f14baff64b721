"""A bench file cannot make sweeprig load code: ``bench.visa_library`` naming a library file
is refused by ``check``, ``run`` and ``safe`` with a located message, and pyvisa is never
asked to open anything. A path given by the person at the keyboard (``--visa-library``,
``SWEEPRIG_VISA_LIBRARY``) is used, the option first."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import pytest
import pyvisa
from typer.testing import CliRunner

import sweeprig.transport.visa as visa_module
from sweeprig.cli.main import app
from sweeprig.engine.session import served_bench_text, shipped_sequences_dir
from sweeprig.sim.bench import SimBench
from sweeprig.transport.backend import VISA_LIBRARY_ENV

QUICK = shipped_sequences_dir() / "demo" / "quick.toml"


@pytest.fixture
def opened(monkeypatch: pytest.MonkeyPatch) -> list[str]:
    """Every VISA library pyvisa is asked to open (then opened as usual)."""
    calls: list[str] = []
    real = pyvisa.ResourceManager

    def recording(library: str = "", *args: Any, **kwargs: Any) -> Any:
        calls.append(library)
        return real(library, *args, **kwargs)

    monkeypatch.setattr(visa_module.pyvisa, "ResourceManager", recording)
    return calls


def _bench(sim: SimBench, tmp_path: Path, library: str = "@py") -> Path:
    text = served_bench_text(sim.resources)
    if 'visa_library = "@py"' in text:
        text = text.replace('visa_library = "@py"', f"visa_library = '{library}'")
    else:
        text = text.replace("[bench]\n", f"[bench]\nvisa_library = '{library}'\n", 1)
    path = tmp_path / "bench.toml"
    path.write_text(text, encoding="utf-8")
    return path


def _line_of(path: Path, key: str) -> int:
    lines = path.read_text(encoding="utf-8").splitlines()
    return next(i for i, line in enumerate(lines, start=1) if line.startswith(key))


@pytest.mark.parametrize("command", ["check", "run", "safe"])
def test_a_bench_file_naming_a_library_is_refused_and_nothing_is_loaded(
        command: str, sim_bench: SimBench, tmp_path: Path, opened: list[str]) -> None:
    library = tmp_path / "libvisa-helper.so"
    library.write_bytes(b"\x7fELF not really")
    bench = _bench(sim_bench, tmp_path, str(library))
    args = {"check": ["check", str(QUICK), "--bench", str(bench)],
            "run": ["run", str(QUICK), "--bench", str(bench), "--store",
                    str(tmp_path / "s.sqlite"), "--quiet"],
            "safe": ["safe", "--bench", str(bench)]}[command]
    before = {role: sim_bench.faults.for_role(role).command_count for role in sim_bench.resources}
    result = CliRunner().invoke(app, args, env={"COLUMNS": "200"})
    assert result.exit_code == 2, result.output
    assert f"bench.toml:{_line_of(bench, 'visa_library')}: bench.visa_library" in result.output
    assert "named backend" in result.output and "--visa-library" in result.output
    assert opened == []  # pyvisa was never asked to load anything
    after = {role: sim_bench.faults.for_role(role).command_count for role in sim_bench.resources}
    assert after == before


def test_the_environment_variable_chooses_the_library(
        sim_bench: SimBench, tmp_path: Path, opened: list[str],
        monkeypatch: pytest.MonkeyPatch) -> None:
    missing = str(tmp_path / "no-such-libvisa.so")
    monkeypatch.setenv(VISA_LIBRARY_ENV, missing)
    result = CliRunner().invoke(app, ["safe", "--bench", str(_bench(sim_bench, tmp_path))],
                                env={"COLUMNS": "200"})
    assert result.exit_code != 0
    assert "cannot load the VISA library" in result.output and missing in result.output
    assert set(opened) == {missing}


def test_the_option_wins_over_the_environment(
        sim_bench: SimBench, tmp_path: Path, opened: list[str],
        monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv(VISA_LIBRARY_ENV, str(tmp_path / "no-such-libvisa.so"))
    result = CliRunner().invoke(app, ["safe", "--bench", str(_bench(sim_bench, tmp_path)),
                                      "--visa-library", "@py"], env={"COLUMNS": "200"})
    assert result.exit_code == 0, result.output
    assert opened and set(opened) == {"@py"}
