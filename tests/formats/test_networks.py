"""Networks of a connection: cascade, de-embedding and interpolation against scikit-rf's
own, and a bench path loss from a cascade of Touchstone files."""

from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np
import pytest

from sweeprig.errors import InputError
from sweeprig.formats.bench import load_bench
from sweeprig.formats.networks import (
    cascade,
    chain_network,
    deembed,
    interpolate,
    port_match,
    s_to_t,
    t_to_s,
)

F = np.linspace(1e9, 3e9, 11)


def skrf_network(s: np.ndarray, freq_hz: np.ndarray = F):
    import skrf

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return skrf.Network(frequency=skrf.Frequency.from_f(freq_hz, unit="Hz"), s=s)


def random_two_port(seed: int, freq_hz: np.ndarray = F) -> np.ndarray:
    """A lossy, mismatched, reciprocal two-port whose response varies with frequency."""
    rng = np.random.default_rng(seed)
    n = freq_hz.size
    phase = np.exp(-2j * np.pi * freq_hz / 1.3e9)
    s = np.empty((n, 2, 2), dtype=complex)
    s[:, 0, 0] = (0.05 + 0.1 * rng.random()) * np.exp(1j * rng.uniform(0, 6.28, n))
    s[:, 1, 1] = (0.05 + 0.1 * rng.random()) * np.exp(1j * rng.uniform(0, 6.28, n))
    s[:, 1, 0] = s[:, 0, 1] = (0.6 + 0.3 * rng.random()) * phase
    return s


def test_t_parameters_round_trip():
    s = random_two_port(1)
    np.testing.assert_allclose(t_to_s(s_to_t(s)), s, rtol=1e-12, atol=1e-14)


def test_cascade_agrees_with_scikit_rf():
    # scikit-rf's cascade (Network ** Network) of the same two-ports.
    a, b, c = (random_two_port(seed) for seed in (2, 3, 4))
    ours = cascade(a, b, c)
    theirs = (skrf_network(a) ** skrf_network(b) ** skrf_network(c)).s
    np.testing.assert_allclose(ours, theirs, rtol=1e-10, atol=1e-12)


def test_deembedding_agrees_with_scikit_rf_and_undoes_the_cascade():
    adapter, cable, board = (random_two_port(seed) for seed in (5, 6, 7))
    measured = cascade(adapter, cable, board)
    # scikit-rf de-embeds with the inverse network: adapter.inv ** measured ** board.inv.
    theirs = (skrf_network(adapter).inv ** skrf_network(measured) ** skrf_network(board).inv).s
    ours = deembed(measured, start=[adapter], end=[board])
    np.testing.assert_allclose(ours, theirs, rtol=1e-9, atol=1e-11)
    np.testing.assert_allclose(ours, cable, rtol=1e-9, atol=1e-11)


def test_interpolation_agrees_with_scikit_rf():
    s = random_two_port(8)
    new = np.linspace(1.1e9, 2.9e9, 7)
    import skrf

    theirs = skrf_network(s).interpolate(skrf.Frequency.from_f(new, unit="Hz")).s
    np.testing.assert_allclose(interpolate(F, s, new), theirs, rtol=1e-10, atol=1e-12)
    with pytest.raises(ValueError, match="outside"):
        interpolate(F, s, [4e9])


def test_matched_attenuators_add_their_losses():
    # A matched attenuator of L dB: S21 = S12 = 10^(−L/20), S11 = S22 = 0; in a chain of
    # matched parts the losses add (definition of insertion loss).
    def pad(loss_db: float) -> np.ndarray:
        s = np.zeros((F.size, 2, 2), dtype=complex)
        s[:, 0, 1] = s[:, 1, 0] = 10 ** (-loss_db / 20)
        return s

    chain = cascade(pad(3.0), pad(6.0))
    np.testing.assert_allclose(-20 * np.log10(np.abs(chain[:, 1, 0])), 9.0)
    s11, s22 = port_match(chain)
    assert np.all(s11 == 0) and np.all(s22 == 0)


def write_s2p(path: Path, freq_hz: np.ndarray, s: np.ndarray) -> Path:
    rows = ["# Hz S RI R 50"]
    for f, m in zip(freq_hz, s, strict=True):
        values = [m[0, 0], m[1, 0], m[0, 1], m[1, 1]]  # Touchstone 2-port order: 11 21 12 22
        rows.append(f"{f:.6f} " + " ".join(f"{v.real:.12g} {v.imag:.12g}" for v in values))
    path.write_text("\n".join(rows) + "\n", encoding="utf-8")
    return path


BENCH = """\
[bench]
name = "Bench 7 (fictional)"

[roles]
rf = { resource = "TCPIP0::192.0.2.10::5025::SOCKET", profile = "scpi-source" }

[path_loss]
rf = { cascade = ["cable.s2p", "board.s2p"], deembed_end = ["adapter.s2p"] }
"""


def test_a_bench_path_loss_from_a_cascade_of_touchstone_files(tmp_path: Path) -> None:
    cable, board, adapter = random_two_port(9), random_two_port(10), random_two_port(11)
    write_s2p(tmp_path / "cable.s2p", F, cable)
    write_s2p(tmp_path / "board.s2p", F, cascade(board, adapter))  # measured with the adapter
    write_s2p(tmp_path / "adapter.s2p", F, adapter)
    (tmp_path / "bench.toml").write_text(BENCH, encoding="utf-8")
    bench = load_bench(tmp_path / "bench.toml")
    expected = -20 * np.log10(np.abs(cascade(cable, board)[:, 1, 0]))
    np.testing.assert_allclose(bench.loss("rf").loss_db(F), expected, rtol=1e-6)
    freq, s = chain_network([tmp_path / "cable.s2p", tmp_path / "board.s2p"],
                            deembed_end=[tmp_path / "adapter.s2p"], where="w")
    np.testing.assert_allclose(freq, F)
    np.testing.assert_allclose(s, cascade(cable, board), rtol=1e-6, atol=1e-8)


def test_networks_that_share_no_frequencies_are_refused(tmp_path: Path) -> None:
    write_s2p(tmp_path / "cable.s2p", F, random_two_port(12))
    high = np.linspace(4e9, 5e9, 3)
    write_s2p(tmp_path / "board.s2p", high, random_two_port(13, high))
    write_s2p(tmp_path / "adapter.s2p", F, random_two_port(14))
    (tmp_path / "bench.toml").write_text(BENCH, encoding="utf-8")
    with pytest.raises(InputError) as info:
        load_bench(tmp_path / "bench.toml")
    message = str(info.value)
    assert "bench.toml:8: path_loss.rf" in message and "share no frequency range" in message
    assert "board.s2p 4 GHz to 5 GHz" in message


def test_deembedding_needs_a_cascade(tmp_path: Path) -> None:
    text = BENCH.replace('cascade = ["cable.s2p", "board.s2p"], ', 'touchstone = "c.s2p", ')
    (tmp_path / "bench.toml").write_text(text, encoding="utf-8")
    with pytest.raises(InputError, match="go with cascade"):
        load_bench(tmp_path / "bench.toml")
