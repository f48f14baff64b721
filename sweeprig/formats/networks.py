"""Two-port networks of a bench connection: cascade, de-embed, interpolate, loss and match.

A connection may be a chain of parts each measured as a Touchstone two-port (a cable, an
adapter, a test board's input trace). Listed in signal order, they are cascaded into one
network; parts that a measurement included but the bench does not have (an adapter used only
while measuring) are de-embedded from the start or the end of the chain. The loss is
−20·log10|S21| of the result, and |S22| (the chain's match at its far end, the DUT's plane
for a source connection) feeds the mismatch uncertainty with the part's own |Γ|.

The maths (numpy, frequencies × 2 × 2 complex arrays):

* cascade through scattering-transfer (T) parameters, T = [[−Δ/S21, S11/S21],
  [−S22/S21, 1/S21]] with Δ = S11·S22 − S12·S21, so that T of a chain is the matrix product
  of the parts' T (Pozar, *Microwave Engineering*, and scikit-rf's ``cascade`` compute the
  same network; checked in the tests against scikit-rf);
* de-embedding multiplies by the inverse T of the part removed;
* interpolation is linear in the real and imaginary parts, on the frequencies every part
  covers (never extrapolated).
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

import numpy as np

from sweeprig.errors import InputError
from sweeprig.formats.pathloss import (
    TableLoss,
    loss_table_from_s,
    read_touchstone_network,
)
from sweeprig.units import format_frequency


def s_to_t(s: np.ndarray) -> np.ndarray:
    """S-parameters (… × 2 × 2) to scattering-transfer parameters (same shape)."""
    s = np.asarray(s, dtype=complex)
    s11, s12, s21, s22 = s[..., 0, 0], s[..., 0, 1], s[..., 1, 0], s[..., 1, 1]
    if np.any(s21 == 0):
        raise ValueError("S21 is zero: the two-port passes nothing, it has no T-parameters")
    delta = s11 * s22 - s12 * s21
    t = np.empty_like(s)
    t[..., 0, 0] = -delta / s21
    t[..., 0, 1] = s11 / s21
    t[..., 1, 0] = -s22 / s21
    t[..., 1, 1] = 1.0 / s21
    return t


def t_to_s(t: np.ndarray) -> np.ndarray:
    """Scattering-transfer parameters back to S-parameters."""
    t = np.asarray(t, dtype=complex)
    t11, t12, t21, t22 = t[..., 0, 0], t[..., 0, 1], t[..., 1, 0], t[..., 1, 1]
    s = np.empty_like(t)
    s[..., 0, 0] = t12 / t22
    s[..., 0, 1] = (t11 * t22 - t12 * t21) / t22
    s[..., 1, 0] = 1.0 / t22
    s[..., 1, 1] = -t21 / t22
    return s


def cascade(*networks: np.ndarray) -> np.ndarray:
    """The chain of two-ports in the order given (port 2 of each to port 1 of the next)."""
    if not networks:
        raise ValueError("nothing to cascade")
    total = s_to_t(networks[0])
    for network in networks[1:]:
        total = total @ s_to_t(network)
    return t_to_s(total)


def deembed(network: np.ndarray, *, start: Sequence[np.ndarray] = (),
            end: Sequence[np.ndarray] = ()) -> np.ndarray:
    """``network`` with the parts ``start`` (at its port 1, in signal order) and ``end`` (at
    its port 2, in signal order) removed: T_start⁻¹ · T · T_end⁻¹."""
    t = s_to_t(network)
    if start:
        t = np.linalg.inv(s_to_t(cascade(*start))) @ t
    if end:
        t = t @ np.linalg.inv(s_to_t(cascade(*end)))
    return t_to_s(t)


def interpolate(freq_hz: np.ndarray, s: np.ndarray, new_freq_hz: np.ndarray) -> np.ndarray:
    """S-parameters at ``new_freq_hz``, linear in real and imaginary parts (inside the
    given frequencies only: a frequency outside raises ValueError)."""
    freq = np.asarray(freq_hz, dtype=float)
    new = np.asarray(new_freq_hz, dtype=float)
    if new.size and (new.min() < freq[0] * (1 - 1e-9) or new.max() > freq[-1] * (1 + 1e-9)):
        raise ValueError("interpolation outside the network's frequencies")
    out = np.empty((new.size, 2, 2), dtype=complex)
    for i in range(2):
        for j in range(2):
            out[:, i, j] = (np.interp(new, freq, s[:, i, j].real)
                            + 1j * np.interp(new, freq, s[:, i, j].imag))
    return out


def common_frequencies(freqs: Sequence[np.ndarray]) -> np.ndarray:
    """Every frequency of any network inside the range all of them cover (empty when they
    share none)."""
    low = max(float(f[0]) for f in freqs)
    high = min(float(f[-1]) for f in freqs)
    every = np.unique(np.concatenate([np.asarray(f, dtype=float) for f in freqs]))
    return every[(every >= low) & (every <= high)]


def chain_network(files: Sequence[Path], *, deembed_start: Sequence[Path] = (),
                  deembed_end: Sequence[Path] = (), where: str,
                  display: str | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Read the Touchstone two-ports, cascade ``files`` in order, de-embed the others, on
    the frequencies they all cover. Returns (frequencies, S-parameters). Raises a located
    InputError when a file is bad or the files share no frequency range."""
    read = [(p, *read_touchstone_network(p, display=p.name, where=where))
            for p in (*files, *deembed_start, *deembed_end)]
    grid = common_frequencies([f for _, f, _ in read])
    if grid.size < 2:
        ranges = "; ".join(f"{p.name} {format_frequency(float(f[0]))} to "
                           f"{format_frequency(float(f[-1]))}" for p, f, _ in read)
        raise InputError(f"the networks of {display or 'this connection'} share no frequency "
                         f"range ({ranges})", where=where,
                         fix="give networks measured over the frequencies the sequence uses")
    nets = [interpolate(f, s, grid) for _, f, s in read]
    n_files, n_start = len(files), len(deembed_start)
    try:
        chain = cascade(*nets[:n_files])
        out = deembed(chain, start=nets[n_files:n_files + n_start],
                      end=nets[n_files + n_start:])
    except (ValueError, np.linalg.LinAlgError) as exc:
        raise InputError(f"the networks of {display or 'this connection'} cannot be "
                         f"cascaded or de-embedded: {exc}", where=where,
                         fix="check that each file is the two-port it should be") from None
    return grid, out


def chain_loss(files: Sequence[Path], *, deembed_start: Sequence[Path] = (),
               deembed_end: Sequence[Path] = (), where: str, display: str,
               allow_gain: bool = False) -> TableLoss:
    """The loss −20·log10|S21| of :func:`chain_network` as a path-loss table."""
    grid, s = chain_network(files, deembed_start=deembed_start, deembed_end=deembed_end,
                            where=where, display=display)
    return loss_table_from_s(grid, s, display=display, where=where, allow_gain=allow_gain)


def port_match(s: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(|S11|, |S22|) per frequency: the match of the network at each port."""
    return np.abs(s[:, 0, 0]), np.abs(s[:, 1, 1])
