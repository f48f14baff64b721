"""Loss is never negative unless the bench says the path holds an amplifier; Touchstone files
must have the port count their name gives."""

from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np
import pytest
import skrf

from sweeprig.errors import InputError
from sweeprig.formats.bench import load_bench
from sweeprig.formats.pathloss import GAIN_TOLERANCE_DB, read_csv_loss, read_touchstone_loss

ROOT = Path(__file__).resolve().parents[2]
SIM_BENCH = (ROOT / "sequences" / "benches" / "sim.toml").read_text(encoding="utf-8")


def bench_with(tmp_path: Path, rf: str) -> Path:
    path = tmp_path / "bench.toml"
    text = SIM_BENCH.replace('rf = "3.0 dB"', f"rf = {rf}")
    assert text != SIM_BENCH
    path.write_text(text, encoding="utf-8")
    return path


def network(tmp_path: Path, name: str, s21_db: float, ports: int = 2) -> Path:
    """A Touchstone file written by scikit-rf (the reference writer)."""
    freq = skrf.Frequency(1, 3, 3, unit="GHz")
    s = np.full((3, ports, ports), 0.1 + 0j)
    if ports > 1:
        s[:, 1, 0] = s[:, 0, 1] = 10 ** (s21_db / 20)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        skrf.Network(frequency=freq, s=s).write_touchstone(str(tmp_path / name))
    return tmp_path / f"{name}.s{ports}p"


def test_a_negative_constant_loss_is_refused_with_the_gain_spelling(tmp_path: Path) -> None:
    with pytest.raises(InputError) as caught:
        load_bench(bench_with(tmp_path, '"-20 dB"'))
    assert caught.value.where.endswith("path_loss.rf")
    assert 'rf = { gain = "20 dB" }' in (caught.value.fix or "")


def test_a_stated_gain_is_a_negative_loss(tmp_path: Path) -> None:
    bench = load_bench(bench_with(tmp_path, '{ gain = "20 dB" }'))
    assert bench.loss("rf").at(2.4e9) == -20.0


def test_a_csv_table_showing_gain_needs_the_amplifier_flag(tmp_path: Path) -> None:
    table = tmp_path / "amp.csv"
    table.write_text("freq_hz, loss_db\n1e9, -20.0\n3e9, -19.0\n", encoding="utf-8")
    with pytest.raises(InputError, match="gain of 20 dB at 1 GHz") as caught:
        read_csv_loss(table, display="amp.csv", where="w")
    assert caught.value.where == "amp.csv:2" and "amplifier = true" in (caught.value.fix or "")
    loaded = read_csv_loss(table, display="amp.csv", where="w", allow_gain=True)
    assert loaded.at(2e9) == pytest.approx(-19.5)
    bench = load_bench(bench_with(tmp_path, f"{{ csv = '{table.as_posix()}', amplifier = true }}"))
    assert bench.loss("rf").at(1e9) == -20.0


def test_measurement_noise_on_a_short_cable_is_not_gain(tmp_path: Path) -> None:
    table = tmp_path / "thru.csv"
    table.write_text(f"1e9, {-GAIN_TOLERANCE_DB / 2}\n3e9, 0.2\n", encoding="utf-8")
    assert read_csv_loss(table, display="thru.csv", where="w").at(1e9) < 0
    assert read_touchstone_loss(network(tmp_path, "thru", 0.05), display="thru.s2p",
                                where="w").at(2e9) == pytest.approx(-0.05)


def test_a_touchstone_amplifier_needs_the_flag(tmp_path: Path) -> None:
    path = network(tmp_path, "amp", 40.0)
    with pytest.raises(InputError, match=r"\|S21\| above 0 dB"):
        read_touchstone_loss(path, display="amp.s2p", where="w")
    loss = read_touchstone_loss(path, display="amp.s2p", where="w", allow_gain=True)
    assert loss.at(2e9) == pytest.approx(-40.0)  # scikit-rf wrote |S21| = +40 dB


@pytest.mark.parametrize("ports", [1, 3, 4])
def test_a_network_named_for_another_port_count_is_refused(tmp_path: Path, ports: int) -> None:
    written = network(tmp_path, "net", -3.0, ports=ports)
    misnamed = written.rename(tmp_path / "net.s2p")
    with pytest.raises(InputError) as caught:
        read_touchstone_loss(misnamed, display="net.s2p", where="w")
    assert "net.s2p:" in caught.value.what and f"fits a {ports}-port file" in caught.value.what
    assert "numpy" not in caught.value.message().lower()
