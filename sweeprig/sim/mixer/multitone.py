"""Exact multi-tone response of the Gilbert-cell core by separable phase grids.

The cell's output current is a sum of products of an LO-only factor and an RF-only factor
(see :mod:`sweeprig.sim.mixer.core`)::

    out(t) = (I_EE/2)·D(θ_lo) + (I_EE/2)·X(θ_1, …, θ_K)·S(θ_lo)

with ``D = t1 − t2``, ``S = t1 + t2`` (quad) and ``X = x(Σ_k v_k(θ_k) + v_os_rf)``
(transconductor). Every input tone (with its harmonics) lives on its own phase axis
``θ = 2π·f·t + φ``, so each factor is periodic in its phases whatever the frequencies are.
Sampling a factor on a uniform phase grid and taking its FFT gives its Fourier coefficients
exactly (up to aliasing, which the adaptive grid keeps below ``tol`` of the largest
coefficient); the output line with orders ``(m, n_1, …, n_K)`` sits at
``m·f_lo + Σ n_k·f_k`` with complex amplitude ``(I_EE/2)·(D_m·[n = 0] + S_m·X_n)·
exp(i·(m·φ_lo + Σ n_k·φ_k))``. The cost depends on the tone amplitudes only, never on how
close the tones are.

Grid sizes: the LO axis doubles from 32 points; RF axes grow by about 1.25× through fast FFT
sizes from 2·max_order + 2; each stops when the coefficients in the top half of its order
range (|n| ≥ N/4) are below ``ALIAS_TOL`` (1e-8, −160 dB) of the largest. The FFTs are
``scipy.fft.rfft``/``rfftn`` (the same transform as ``numpy.fft``, with less call overhead).

Conventions: amplitudes are peak volts at the core (differential), currents are peak amperes,
phases radians, frequencies Hz. Coefficients are those of the complex exponential series
(``f(θ) = Σ c_m·exp(i·m·θ)``); a real line at f > 0 has peak amplitude ``2·|c|``.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from functools import lru_cache
from typing import NamedTuple

import numpy as np
import scipy.fft
from numpy.typing import NDArray

from sweeprig.sim.mixer.core import pair_fraction, switching_functions

ALIAS_TOL = 1e-8  # top of each axis' spectrum below this fraction of the largest (−160 dB)
PRUNE_REL = 1e-13  # below this fraction of the largest a coefficient is rounding noise
MERGE_TOL_HZ = 1e-3  # lines closer than this are one line
_MAX_LO_GRID = 1 << 16
_MAX_RF_POINTS = 1 << 20


@dataclass(frozen=True)
class CellState:
    """The core at one operating point: VT (V), tail current (A), R_E per emitter (ohm),
    quad pair offsets and RF pair offset (V)."""

    vt_v: float
    i_ee_a: float
    r_e_ohm: float = 0.0
    v_os1_v: float = 0.0
    v_os2_v: float = 0.0
    v_os_rf_v: float = 0.0


@dataclass(frozen=True)
class LoFactor:
    """Fourier coefficients of the quad's LO-only factors D and S at LO phase 0.

    ``orders[l]`` is the LO multiplier m of ``d[l]`` and ``s[l]``; ``grid_n`` the phase-grid
    size used; ``converged`` whether the aliasing tolerance was met within the size cap.
    """

    orders: NDArray[np.int64]
    d: NDArray[np.complex128]
    s: NDArray[np.complex128]
    grid_n: int
    converged: bool = True
    abs_s: NDArray[np.float64] = field(init=False, repr=False, compare=False)
    abs_d: NDArray[np.float64] = field(init=False, repr=False, compare=False)
    has_d: bool = field(init=False, repr=False, compare=False)
    max_s: float = field(init=False, repr=False, compare=False)
    max_d: float = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        abs_s, abs_d = np.abs(self.s), np.abs(self.d)
        object.__setattr__(self, "abs_s", abs_s)
        object.__setattr__(self, "abs_d", abs_d)
        object.__setattr__(self, "has_d", bool(np.any(self.d != 0)))
        object.__setattr__(self, "max_s", float(abs_s.max()))
        object.__setattr__(self, "max_d", float(abs_d.max()))


@dataclass(frozen=True)
class RfFactor:
    """Fourier coefficients of the transconductor factor X at zero RF phases.

    ``orders[p]`` (shape (P, K)) are the RF multipliers of ``x[p]``; row 0 is always the
    all-zero order (the DC of X). ``index[p]`` is the row of ``orders[p]`` in the full order
    table of :func:`order_table` (for the cached order tuples). ``grid_shape`` is the
    phase-grid size per RF axis.
    """

    orders: NDArray[np.int64]
    x: NDArray[np.complex128]
    index: NDArray[np.intp]
    grid_shape: tuple[int, ...]
    converged: bool = True
    abs_x: NDArray[np.float64] = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        object.__setattr__(self, "abs_x", np.abs(self.x))


def _start_size(max_order: int) -> int:
    """Smallest power of two that holds orders −max_order..max_order without wrapping."""
    return max(8, 1 << math.ceil(math.log2(2 * max_order + 2)))


@lru_cache(maxsize=64)
def _cos_table(n: int, harmonics: int) -> NDArray[np.float64]:
    """cos(h·θ_j) for h = 1..harmonics on the grid θ_j = 2π·j/n, shape (harmonics, n)."""
    theta = 2.0 * np.pi * np.arange(n) / n
    table = np.cos(np.outer(np.arange(1, harmonics + 1), theta))
    table.flags.writeable = False
    return table


def _axis_wave(amps_v: Sequence[float], n: int) -> NDArray[np.float64]:
    """Σ_h A_h·cos(h·θ) on an n-point phase grid (``amps_v[h-1]`` = harmonic h, peak V)."""
    amps = np.asarray(amps_v, dtype=float)
    return amps @ _cos_table(n, len(amps))


# --- LO factor ---------------------------------------------------------------------------
def lo_factor(
    lo_amps_v: Sequence[float],
    cell: CellState,
    max_order: int,
    tol: float = ALIAS_TOL,
    grid_guess: int | None = None,
) -> LoFactor:
    """Fourier coefficients of D(θ) and S(θ) for an LO wave ``Σ_h A_h·cos(h·θ)``.

    ``lo_amps_v[h-1]`` is the peak differential voltage of LO harmonic h at the quad.
    An empty or all-zero drive gives the DC values only (no LO). The grid size doubles until
    the top quarter of the spectrum is below ``tol`` of the largest coefficient.

    ``grid_guess`` (the grid that converged for a similar drive, cached by the caller) saves
    the doubling when it is right: a guess that meets ``tol`` while half of it does not is
    the grid the doubling stops at (the top of the spectrum falls as the grid grows), found
    from one set of samples (see :func:`_lo_spectra_from_guess`); a wrong guess falls back
    to the doubling. The grid, hence the coefficients, are the same either way.
    """
    if len(lo_amps_v) == 0 or not any(lo_amps_v):
        d0, s0 = switching_functions(0.0, cell.vt_v, cell.v_os1_v, cell.v_os2_v)
        return LoFactor(
            orders=np.zeros(1, dtype=np.int64),
            d=np.array([complex(d0)]),
            s=np.array([complex(s0)]),
            grid_n=1,
        )
    start = max(_start_size(max_order), _start_size(2 * len(lo_amps_v)))
    if grid_guess is not None and start < grid_guess <= _MAX_LO_GRID:
        found = _lo_spectra_from_guess(lo_amps_v, cell, start, grid_guess, tol)
        if found is not None:
            n, d_k, s_k = found
            return _lo_factor_from_spectra(n, d_k, s_k, max_order, True)
    n = start
    converged = False
    while True:
        d_k, s_k = _lo_spectra(lo_amps_v, cell, n)
        if _lo_converged(d_k, s_k, n, tol):
            converged = True
            break
        if n >= _MAX_LO_GRID:
            break
        n *= 2
    return _lo_factor_from_spectra(n, d_k, s_k, max_order, converged)


def _lo_spectra(
    lo_amps_v: Sequence[float], cell: CellState, n: int
) -> tuple[NDArray[np.complex128], NDArray[np.complex128]]:
    """rfft/n of D and S on an n-point LO phase grid."""
    wave = _axis_wave(lo_amps_v, n)
    d_t, s_t = switching_functions(wave, cell.vt_v, cell.v_os1_v, cell.v_os2_v)
    return scipy.fft.rfft(d_t) / n, scipy.fft.rfft(s_t) / n


def _lo_converged(
    d_k: NDArray[np.complex128], s_k: NDArray[np.complex128], n: int, tol: float
) -> bool:
    """The doubling's stopping rule: the top quarter of the spectrum below ``tol`` of the
    largest coefficient."""
    mag = np.maximum(np.abs(d_k), np.abs(s_k))
    return float(mag[n // 4 :].max()) <= tol * float(mag.max())


def _lo_spectra_from_guess(
    lo_amps_v: Sequence[float], cell: CellState, start: int, guess: int, tol: float
) -> tuple[int, NDArray[np.complex128], NDArray[np.complex128]] | None:
    """The doubling's answer found from a guessed grid: the grid ``guess`` (a power-of-two
    multiple of ``start``) meets ``tol`` and half of it does not. The half grid is every
    other point of the guessed one (θ_j = 2π·j/n), so its spectra come from the same
    samples. When half the guess meets ``tol`` too the guess is walked down (each smaller
    grid again from the same samples) to the first grid whose half does not; when the guess
    does not meet it, None (the caller doubles from the start)."""
    if guess % start or (guess // start) & (guess // start - 1):
        return None
    wave = _axis_wave(lo_amps_v, guess)
    d_t, s_t = switching_functions(wave, cell.vt_v, cell.v_os1_v, cell.v_os2_v)
    n = guess
    d_k, s_k = scipy.fft.rfft(d_t) / n, scipy.fft.rfft(s_t) / n
    if not _lo_converged(d_k, s_k, n, tol):
        return None
    while n > start:
        half = n // 2
        d_h, s_h = _fold_half(d_k, n), _fold_half(s_k, n)
        if not _lo_converged(d_h, s_h, half, tol):
            break
        n, d_k, s_k = half, d_h, s_h
    return n, d_k, s_k


def _fold_half(spectrum: NDArray[np.complex128], n: int) -> NDArray[np.complex128]:
    """rfft/(n/2) of every other sample of a real n-point signal, from its rfft/n: sampling
    at θ_{2j} folds the coefficient of order k + n/2 onto k (aliasing), and for a real signal
    c[k + n/2] = conj(c[n/2 − k]); so c_half[k] = c[k] + conj(c[n/2 − k]), k = 0 … n/4.
    Equals the transform of the subsampled signal within rounding, without transforming it
    again (``tests/sim/test_mixer_fastpath.py``)."""
    quarter = n // 4
    return spectrum[: quarter + 1] + np.conj(spectrum[n // 2 - quarter :][::-1])


def _lo_factor_from_spectra(
    n: int, d_k: NDArray[np.complex128], s_k: NDArray[np.complex128], max_order: int,
    converged: bool,
) -> LoFactor:
    orders = _lo_orders(max_order)
    # orders −max … −1 are the conjugates of max … 1 (a real signal), then 0 … max
    d = np.concatenate([np.conj(d_k[max_order:0:-1]), d_k[: max_order + 1]])
    s = np.concatenate([np.conj(s_k[max_order:0:-1]), s_k[: max_order + 1]])
    mag = np.maximum(np.abs(d), np.abs(s))
    keep = mag > PRUNE_REL * float(mag.max())
    if keep.all():
        return LoFactor(orders=orders, d=d, s=s, grid_n=n, converged=converged)
    return LoFactor(orders=orders[keep], d=d[keep], s=s[keep], grid_n=n, converged=converged)


@lru_cache(maxsize=16)
def _lo_orders(max_order: int) -> NDArray[np.int64]:
    """LO orders −max_order … max_order (read-only, shared)."""
    m_pos = np.arange(max_order + 1)
    orders = np.concatenate([-m_pos[:0:-1], m_pos])
    orders.flags.writeable = False
    return orders


# --- RF factor ---------------------------------------------------------------------------
@lru_cache(maxsize=16)
def order_table(n_tones: int, max_order: int) -> NDArray[np.int64]:
    """All RF orders (n_1, …, n_K) with Σ|n_k| ≤ max_order, the zero order first."""
    if n_tones == 0:
        empty = np.zeros((1, 0), dtype=np.int64)
        empty.flags.writeable = False
        return empty
    axes = [np.arange(-max_order, max_order + 1)] * n_tones
    grid = np.stack(np.meshgrid(*axes, indexing="ij"), axis=-1).reshape(-1, n_tones)
    grid = grid[np.abs(grid).sum(axis=1) <= max_order]
    zero = np.all(grid == 0, axis=1)
    grid = np.ascontiguousarray(np.concatenate([grid[zero], grid[~zero]]), dtype=np.int64)
    grid.flags.writeable = False
    return grid


@lru_cache(maxsize=16)
def combo_tuples(max_lo_order: int, n_tones: int, max_rf_order: int) -> NDArray[np.object_]:
    """Order tuples ``(m, n_1, …, n_K)`` as an object array indexed by
    ``[m + max_lo_order, row of order_table]`` (built once; lines reference them)."""
    rf = [tuple(row) for row in order_table(n_tones, max_rf_order).tolist()]
    table = np.empty((2 * max_lo_order + 1, len(rf)), dtype=object)
    for i, m in enumerate(range(-max_lo_order, max_lo_order + 1)):
        for j, n in enumerate(rf):
            table[i, j] = (m, *n)
    table.flags.writeable = False
    return table


@lru_cache(maxsize=128)
def _fft_index(
    shape: tuple[int, ...], max_order: int
) -> tuple[NDArray[np.intp], NDArray[np.intp]]:
    """Flat indices of :func:`order_table`'s orders in the rfftn output of a grid of
    ``shape``, and the positions of those read as the conjugate of the negated order (the last
    axis of rfftn holds n ≥ 0 only)."""
    k = len(shape)
    grid = order_table(k, max_order)
    conj = grid[:, -1] < 0
    read = np.where(conj[:, None], -grid, grid)
    rshape = (*shape[:-1], shape[-1] // 2 + 1)
    idx = np.ravel_multi_index(
        tuple((read[:, a] % shape[a]) if a < k - 1 else read[:, a] for a in range(k)), rshape
    )
    conj_at = conj.nonzero()[0]
    for arr in (idx, conj_at):
        arr.flags.writeable = False
    return idx, conj_at


def _rf_grid_values(
    tone_amps_v: Sequence[Sequence[float]], shape: tuple[int, ...], cell: CellState
) -> NDArray[np.float64]:
    """X = x(Σ_k v_k(θ_k) + v_os_rf) on the K-D phase grid.

    Every tone's wave is a sum of cosines at zero phase (the phases turn the lines later, in
    :func:`combine`), so X is even in each θ_k: X(…, θ_j, …) = X(…, θ_{n−j}, …). The pair
    equation is solved on the points θ_0 … θ_{n/2} of each axis only (about 1/2^K of the
    grid) and the rest is their mirror image; the values differ from solving every point
    only by the rounding of cos(2π·j/n) against cos(2π·(n−j)/n).
    """
    k = len(shape)
    total: NDArray[np.float64] | float = cell.v_os_rf_v
    for axis, (amps, n) in enumerate(zip(tone_amps_v, shape, strict=True)):
        view = [1] * k
        view[axis] = n // 2 + 1
        total = total + _axis_wave(amps, n)[: n // 2 + 1].reshape(view)
    half = pair_fraction(total, cell.vt_v, cell.i_ee_a, cell.r_e_ohm)
    return _mirrored(half[None], shape)[0]


def _smooth_even(n: int) -> int:
    """Smallest even 5-smooth number (2^a·3^b·5^c) ≥ n: a fast FFT size."""
    m = max(2, n + (n % 2))
    while True:
        r = m
        for p in (2, 3, 5):
            while r % p == 0:
                r //= p
        if r == 1:
            return m
        m += 2


def _rf_start_size(max_order: int, harmonics: int) -> int:
    """First RF grid size: holds orders −max_order..max_order (and the harmonics) unwrapped."""
    return _smooth_even(2 * max(max_order, 2 * harmonics) + 2)


def _rf_next_size(n: int) -> int:
    """Next RF grid size: about 1.25× (finer steps than doubling waste fewer points)."""
    return _smooth_even(math.ceil(1.25 * n))


def _axis_tops(spectrum_mag: NDArray[np.float64], shape: Sequence[int]) -> list[float]:
    """Largest coefficient in the top half of each axis' range (|n_k| ≥ N_k/4; rfftn
    layout: the last axis holds n ≥ 0 only)."""
    k = spectrum_mag.ndim
    tops = []
    for axis in range(k):
        other = tuple(a for a in range(k) if a != axis)
        profile = spectrum_mag.max(axis=other) if other else spectrum_mag
        if axis == k - 1:
            tops.append(float(profile[shape[axis] // 4 :].max()))
        else:
            n_full = profile.size
            idx = np.arange(n_full)
            fold = np.minimum(idx, n_full - idx)
            tops.append(float(profile[fold >= n_full // 4].max()))
    return tops


def rf_grid_shape(
    tone_amps_v: Sequence[Sequence[float]],
    cell: CellState,
    max_order: int,
    tol: float = ALIAS_TOL,
) -> tuple[tuple[int, ...], bool]:
    """Phase-grid size per RF axis so that aliasing stays below ``tol`` of the largest
    coefficient: each axis grows (by ~1.25×, through fast FFT sizes) until the top half of
    its order range (|n| ≥ N/4) is below ``tol``.

    Depends on the amplitudes only (not on the frequencies). Returns the shape and whether
    the tolerance was met within the size cap.
    """
    k = len(tone_amps_v)
    if k == 0:
        return (), True
    shape = [_rf_start_size(max_order, len(a)) for a in tone_amps_v]
    while True:
        values = _rf_grid_values(tone_amps_v, tuple(shape), cell)
        mag = np.abs(scipy.fft.rfftn(values))
        largest = float(mag.max())
        if largest == 0.0:
            return tuple(shape), True
        grow = [top > tol * largest for top in _axis_tops(mag, shape)]
        if not any(grow):
            return tuple(shape), True
        new_shape = [_rf_next_size(n) if g else n for n, g in zip(shape, grow, strict=True)]
        if math.prod(new_shape) > _MAX_RF_POINTS:
            return tuple(shape), False
        shape = new_shape


def rf_factor(
    tone_amps_v: Sequence[Sequence[float]],
    cell: CellState,
    max_order: int,
    grid_shape: tuple[int, ...] | None = None,
) -> RfFactor:
    """Fourier coefficients of X for RF tones with peak amplitudes ``tone_amps_v[k][h-1]``.

    ``grid_shape`` (from :func:`rf_grid_shape`, possibly cached by the caller) skips the
    grid search. Orders are capped at ``Σ|n_k| ≤ max_order``.
    """
    k = len(tone_amps_v)
    if k == 0:
        x0 = pair_fraction(cell.v_os_rf_v, cell.vt_v, cell.i_ee_a, cell.r_e_ohm)
        return RfFactor(
            np.zeros((1, 0), dtype=np.int64), np.array([complex(x0)]), np.zeros(1, np.intp), ()
        )
    converged = True
    if grid_shape is None:
        grid_shape, converged = rf_grid_shape(tone_amps_v, cell, max_order)
    values = _rf_grid_values(tone_amps_v, grid_shape, cell)
    spectrum = scipy.fft.rfftn(values).ravel()
    idx, conj = _fft_index(tuple(grid_shape), max_order)
    x = spectrum[idx]
    if conj.size:
        x[conj] = np.conj(x[conj])
    x *= 1.0 / math.prod(grid_shape)
    table = order_table(k, max_order)
    return RfFactor(table, x, _all_rows(len(table)), tuple(grid_shape), converged)


#: Most grid points solved in one call of :func:`rf_factor_rows` (about 1.6 MB per array).
_BATCH_POINTS = 200_000


def _mirrored(half: NDArray[np.float64], shape: tuple[int, ...]) -> NDArray[np.float64]:
    """The full grid of values given on θ_0 … θ_{n/2} of each axis (``half``: a leading
    axis of points, then one axis of n // 2 + 1 per grid axis): point j of an axis holds
    the value at min(j, n − j), the point with the same cosines. The same array as
    indexing ``half`` with ``np.ix_`` of those indices, made by slice copies (each axis' upper
    part is its lower part reversed), several times cheaper than the fancy indexing."""
    k = len(shape)
    halves = [n // 2 + 1 for n in shape]
    out = np.empty((half.shape[0], *shape))
    out[(slice(None), *(slice(0, h) for h in halves))] = half
    for axis, (n, h) in enumerate(zip(shape, halves, strict=True)):
        if n <= h:
            continue
        # axes before this one are full already, those after it still half
        dst: list[slice] = [slice(None)]
        dst += [slice(None) if b < axis else slice(0, halves[b]) for b in range(k)]
        src = list(dst)
        dst[1 + axis] = slice(h, n)
        src[1 + axis] = slice(n - h, 0, -1)  # j = h … n − 1 reads n − j = n − h … 1
        out[tuple(dst)] = out[tuple(src)]
    return out


def rf_factor_rows(
    tone_amps: Sequence[NDArray[np.float64]],
    cell: CellState,
    max_order: int,
    grid_shape: tuple[int, ...],
) -> NDArray[np.complex128]:
    """:func:`rf_factor`'s coefficients for several points on one grid shape (the points of
    a sweep), solved together: one pair solution and one FFT per batch instead of one per
    point, so the cost per point is the arithmetic, not the calls.

    ``tone_amps[k]``: peak volts at the core of tone k and its harmonics, shape (points,
    harmonics); ``grid_shape`` has one axis per tone (at least one). Row i of the result
    holds ``x`` of point i, columns in the order of :func:`order_table`; each row equals
    :func:`rf_factor` for its point alone within rounding (a batch takes as many Newton
    steps as its slowest point, each past the root by less than rounding)."""
    k = len(grid_shape)
    n_pts = tone_amps[0].shape[0]
    halves = [n // 2 + 1 for n in grid_shape]
    chunk = max(1, _BATCH_POINTS // math.prod(halves))
    idx, conj = _fft_index(tuple(grid_shape), max_order)
    out = np.empty((n_pts, idx.size), dtype=complex)
    for start in range(0, n_pts, chunk):
        stop = min(n_pts, start + chunk)
        total: NDArray[np.float64] | float = cell.v_os_rf_v
        for axis, (n, h) in enumerate(zip(grid_shape, halves, strict=True)):
            amps = tone_amps[axis][start:stop]
            view = [stop - start] + [1] * k
            view[1 + axis] = h
            total = total + (amps @ _cos_table(n, amps.shape[1])[:, :h]).reshape(view)
        half = pair_fraction(total, cell.vt_v, cell.i_ee_a, cell.r_e_ohm)
        values = _mirrored(half, grid_shape)
        spectrum = scipy.fft.rfftn(values, axes=tuple(range(1, k + 1))).reshape(stop - start,
                                                                                 -1)
        x = spectrum[:, idx]
        if conj.size:
            x[:, conj] = np.conj(x[:, conj])
        x *= 1.0 / math.prod(grid_shape)
        out[start:stop] = x
    return out


@lru_cache(maxsize=16)
def _all_rows(count: int) -> NDArray[np.intp]:
    rows = np.arange(count)
    rows.flags.writeable = False
    return rows


# --- combination -------------------------------------------------------------------------
class Lines(NamedTuple):
    """Spectral lines: frequency (Hz, > 0), complex amplitude, and the orders
    ``(m_LO, n_1, …, n_K)`` of each as an object array of tuples. A named tuple
    (immutable; several times cheaper to make than a frozen dataclass, and an evaluation
    makes a dozen)."""

    freq_hz: NDArray[np.float64]
    amp: NDArray[np.complex128]
    orders: NDArray[np.object_]


class LineTable:
    """The frequency of every (LO order, RF order) entry of a combination, Hz, row by row
    (``freq``, flat; ``positive``: which are above ``MERGE_TOL_HZ``), and what depends on
    those frequencies only, made when first asked for: the entries' order codes and the
    output port's band-edge magnitudes. Points that share their LO and tone frequencies
    (a power sweep) share one (the caller keeps it); the frequencies are those
    :func:`combine` computes on its own, and each entry's band magnitude is the one the
    port gives for that line (element-wise operations)."""

    __slots__ = ("_codes", "_gain", "freq", "positive", "shape", "uses")

    def __init__(self, lo_orders: NDArray[np.int64], lo_freq_hz: float,
                 rf_orders: NDArray[np.int64], rf_freqs_hz: Sequence[float]) -> None:
        lo_f = lo_orders * lo_freq_hz
        if rf_orders.shape[1]:
            freq = np.add.outer(lo_f, rf_orders @ np.asarray(rf_freqs_hz, dtype=float))
        else:
            freq = lo_f[:, None]
        self.shape: tuple[int, int] = freq.shape
        self.positive: NDArray[np.bool_] = freq > MERGE_TOL_HZ
        self.freq: NDArray[np.float64] = freq.ravel()
        self.uses = 0  # combinations made on this table
        self._codes: NDArray[np.intp] | None = None
        self._gain: NDArray[np.float64] | None = None

    def codes(self, lo: LoFactor, rf: RfFactor, max_lo_order: int,
              width: int) -> NDArray[np.intp]:
        """Each entry's code in :func:`combo_tuples` (``width``: its row length)."""
        if self._codes is None:
            self._codes = np.add.outer((lo.orders + max_lo_order) * width, rf.index).ravel()
        return self._codes

    def gain(self, magnitude: Callable[[NDArray[np.float64]], NDArray[np.float64]]
             ) -> NDArray[np.float64]:
        """``magnitude`` (a port's band-edge magnitude) of every entry's frequency."""
        if self._gain is None:
            self._gain = magnitude(self.freq)
        return self._gain


@lru_cache(maxsize=64)
def _entry_rows_columns(rows: int, columns: int) -> tuple[NDArray[np.intp], NDArray[np.intp]]:
    """The row and the column of every entry of a (rows, columns) table read row by row
    (``np.divmod`` of the flat index, looked up; read-only, shared)."""
    row = np.repeat(np.arange(rows), columns)
    column = np.tile(np.arange(columns), rows)
    for arr in (row, column):
        arr.flags.writeable = False
    return row, column


def combine(
    lo: LoFactor,
    lo_freq_hz: float,
    lo_phase_rad: float,
    rf: RfFactor,
    rf_freqs_hz: Sequence[float],
    rf_phases_rad: Sequence[float],
    i_ee_a: float,
    max_lo_order: int,
    max_rf_order: int,
    min_abs_a: float | None = None,
) -> Lines:
    """Output lines of the cell, peak differential current (A) of each real line at f > 0.

    Each (m, n) pair is one entry (not yet merged: see :func:`merge_coincident`). Entries
    whose magnitude ``I_EE·|S_m·X_n + D_m·[n = 0]|`` is bounded by at most ``min_abs_a``
    are dropped first (default: ``PRUNE_REL`` of the largest, i.e. rounding noise).
    ``max_lo_order``/``max_rf_order`` must be those the factors were made with (they index
    the cached order tuples).
    """
    table = LineTable(lo.orders, lo_freq_hz, rf.orders, rf_freqs_hz)
    return combine_on(table, lo, lo_phase_rad, rf, rf_phases_rad, i_ee_a, max_lo_order,
                      max_rf_order, min_abs_a)[0]


def combine_on(
    table: LineTable,
    lo: LoFactor,
    lo_phase_rad: float,
    rf: RfFactor,
    rf_phases_rad: Sequence[float],
    i_ee_a: float,
    max_lo_order: int,
    max_rf_order: int,
    min_abs_a: float | None = None,
    *,
    coded: bool = False,
) -> tuple[Lines, NDArray[np.intp]]:
    """:func:`combine` on a :class:`LineTable` of these factors' orders (made for their
    LO and tone frequencies, possibly kept from an earlier point), and the entry of the
    table each line is (its flat index). ``coded``: the lines' orders are given as their
    codes in ``combo_tuples(max_lo_order, K, max_rf_order).ravel()`` (integers, cheaper
    to carry through a merge than tuples).

    Every entry of the table is weighed; an RF order that cannot reach the limit with any
    LO order (``|X_n|·max|S_m| ≤ limit``) has no entry above it (rounding is monotone), so
    the lines are those of weighing the reachable orders only, in the same order."""
    k = rf.orders.shape[1]
    if i_ee_a <= 0.0:
        none = np.zeros(0, dtype=np.intp)
        return (Lines(np.zeros(0), np.zeros(0, dtype=complex),
                      none if coded else np.empty(0, dtype=object)), none)
    if min_abs_a is None:
        limit = PRUNE_REL * (lo.max_s * float(rf.abs_x.max()) + lo.max_d)
    else:
        limit = min_abs_a / i_ee_a
    table.uses += 1
    x = rf.x
    bound = np.multiply.outer(lo.abs_s, rf.abs_x)
    if lo.has_d:
        bound[:, 0] += lo.abs_d
    mask = bound > limit
    mask &= table.positive
    flat = mask.ravel().nonzero()[0]
    rows_of, columns_of = _entry_rows_columns(*table.shape)
    li, pi = rows_of[flat], columns_of[flat]
    s = lo.s * i_ee_a  # 2·(I_EE/2): a real line is 2·its coefficient
    if lo_phase_rad:
        s = s * np.exp(1j * lo_phase_rad * lo.orders)
    if k and any(rf_phases_rad):
        # the phases turn the reachable orders (the only ones read below)
        reach = rf.abs_x * lo.max_s > limit
        reach[0] = True
        rows = reach.nonzero()[0]
        turned = x[rows] * np.exp(1j * (rf.orders[rows] @ np.asarray(rf_phases_rad,
                                                                      dtype=float)))
        x = np.zeros_like(x)
        x[rows] = turned
    amp = s[li] * x[pi]
    if lo.has_d:
        at_zero = (pi == 0).nonzero()[0]
        if at_zero.size:
            d = lo.d * i_ee_a
            if lo_phase_rad:
                d = d * np.exp(1j * lo_phase_rad * lo.orders)
            amp[at_zero] += d[li[at_zero]]
    tuples = combo_tuples(max_lo_order, k, max_rf_order)
    if table.uses > 1:  # kept for another point: the codes of all its entries, once
        codes = table.codes(lo, rf, max_lo_order, tuples.shape[1])[flat]
    else:
        codes = (lo.orders + max_lo_order)[li] * tuples.shape[1] + rf.index[pi]
    return Lines(table.freq[flat], amp, codes if coded else tuples.ravel()[codes]), flat


def merge_coincident(lines: Lines, tol_hz: float = MERGE_TOL_HZ) -> Lines:
    """Sort lines by frequency and add those at the same frequency as complex amplitudes.

    A merged line keeps the orders of its strongest contributor.
    """
    if lines.freq_hz.size == 0:
        return lines
    order = lines.freq_hz.argsort()
    freq = lines.freq_hz[order]
    gaps = freq[1:] - freq[:-1]  # np.diff's values, without its wrapper
    apart = gaps > tol_hz
    if apart.all():
        return Lines(freq, lines.amp[order], lines.orders[order])
    new_group = np.empty(freq.size, dtype=bool)
    new_group[0] = True
    new_group[1:] = apart
    amp = lines.amp[order]
    orders = lines.orders[order]
    starts = new_group.nonzero()[0]
    ends = np.empty_like(starts)
    ends[:-1] = starts[1:]
    ends[-1] = freq.size
    merged_amp = amp[starts]
    merged_orders = orders[starts]
    for g in ((ends - starts) > 1).nonzero()[0].tolist():
        seg = amp[starts[g] : ends[g]]
        merged_amp[g] = seg.sum()
        merged_orders[g] = orders[starts[g] + int(np.abs(seg).argmax())]
    return Lines(freq[starts], merged_amp, merged_orders)


def add_lines(base: Lines, extra: Lines, tol_hz: float = MERGE_TOL_HZ) -> Lines:
    """Add ``extra`` lines to merged, sorted ``base`` lines: one within ``tol_hz`` of a base
    line adds to it as a complex amplitude (the stronger of the two names the orders); the
    others are inserted (sorted, merged where they meet)."""
    if extra.freq_hz.size == 0:
        return base
    freq = base.freq_hz
    if freq.size == 0:
        return extra
    ef = extra.freq_hz
    at = freq.searchsorted(ef)
    right = np.minimum(at, freq.size - 1)
    at -= 1
    left = np.maximum(at, 0, out=at)
    off_left = np.abs(freq[left] - ef)
    off_right = np.abs(freq[right] - ef)
    use_left = off_left < off_right
    near = np.where(use_left, left, right)
    # the offset from the nearer line (of the two, the one ``near`` picks)
    hit = np.where(use_left, off_left, off_right) <= tol_hz
    amp = base.amp.copy()
    orders = base.orders
    hits = hit.nonzero()[0]
    if hits.size:
        idx = near[hits]
        extra_amp = extra.amp[hits]
        before = np.abs(amp[idx])
        np.add.at(amp, idx, extra_amp)  # extra lines need not be merged among themselves
        stronger = np.abs(extra_amp) > before
        if stronger.any():
            orders = orders.copy()
            orders[idx[stronger]] = extra.orders[hits[stronger]]
    merged = Lines(freq, amp, orders)
    if hits.size == ef.size:
        return merged
    rest = (~hit).nonzero()[0]
    joined = concat_lines([merged, Lines(ef[rest], extra.amp[rest], extra.orders[rest])])
    order = joined.freq_hz.argsort(kind="stable")
    freq = joined.freq_hz[order]
    joined = Lines(freq, joined.amp[order], joined.orders[order])
    if ((freq[1:] - freq[:-1]) <= tol_hz).any():
        return merge_coincident(joined, tol_hz)
    return joined


def concat_lines(parts: Sequence[Lines]) -> Lines:
    """Join several line sets (same number of order columns)."""
    return Lines(
        np.concatenate([p.freq_hz for p in parts]),
        np.concatenate([p.amp for p in parts]),
        np.concatenate([p.orders for p in parts]),
    )


def cell_lines(
    cell: CellState,
    lo_amps_v: Sequence[float],
    lo_freq_hz: float,
    lo_phase_rad: float,
    rf_amps_v: Sequence[Sequence[float]],
    rf_freqs_hz: Sequence[float],
    rf_phases_rad: Sequence[float],
    max_lo_order: int = 15,
    max_rf_order: int = 9,
) -> Lines:
    """The core's output lines (peak differential current, A), merged and sorted.

    ``lo_amps_v``/``rf_amps_v[k]``: peak voltages of the fundamental and harmonics at the
    core. This is the bare cell: no port networks, no leakage paths.
    """
    lo = lo_factor(lo_amps_v, cell, max_lo_order)
    rf = rf_factor(rf_amps_v, cell, max_rf_order)
    lines = combine(lo, lo_freq_hz, lo_phase_rad, rf, rf_freqs_hz, rf_phases_rad, cell.i_ee_a,
                    max_lo_order, max_rf_order)
    return merge_coincident(lines)
