"""What makes the behavioural Gilbert cell behave like a real part on a real bench.

Three small, pure pieces the part's evaluation uses (units in names, SI inside):

* :class:`LeakPhase` / :class:`LeakagePhases`: the phase of each linear leakage path
  (LO→IF, RF→IF, LO→RF, RF→LO, the input and LO reflections). A path of electrical length τ
  and offset φ0 turns a line at f by ``φ0 − 2π·f·τ``, so a leakage line adds to the core's
  line at the same frequency as a voltage whose relative phase changes with frequency:
  isolation ripples with frequency, as on hardware. :func:`seeded_leakage_phases` draws them
  reproducibly from a seed.
* :func:`common_mode_im2_lines`: second-order lines from the transconductor's common-mode
  current. A real input stage's common-mode current moves with the square of the signal;
  that current reaches the differential output through the load-resistor mismatch ε and
  through the quad's DC imbalance D_0 (offsets): ``out += (i_cm/2)·(ε + D_0)`` (derived in
  the docstring). This is the dominant finite-IIP2 mechanism of a real Gilbert cell (load and
  switch mismatch with even-order common-mode current; Manstretta, Brandolini, Svelto,
  "Second-order intermodulation mechanisms in CMOS downconverters", IEEE JSSC 38(3), 2003,
  from memory).
* :func:`lo_drive_noise_factor`: the noise factor versus LO drive of a switching quad. The
  switching pairs add noise only while both transistors of a pair conduct, a fraction of
  the LO period ``Δ/T`` that grows as the LO amplitude falls (Darabi & Abidi, "Noise in
  RF-CMOS mixers: a simple physical model", IEEE JSSC 35(1), 2000; Terrovitis & Meyer,
  "Noise in current-commutating CMOS mixers", IEEE JSSC 34(6), 1999; both from memory).
"""

from __future__ import annotations

import cmath
import math
from dataclasses import dataclass
from functools import lru_cache
from typing import Any

import numpy as np
from numpy.typing import NDArray

#: Both transistors of a bipolar pair count as conducting while |v_LO| < 4·VT
#: (tanh(2) = 0.96: each carries more than 2 % of the current; a chosen threshold, common
#: practice, no source).
SWITCH_OVERLAP_VT = 4.0


@dataclass(frozen=True)
class LeakPhase:
    """One linear path's phase: ``phase_rad − 2π·f·delay_s`` at frequency f (Hz)."""

    phase_rad: float = 0.0
    delay_s: float = 0.0

    def rotation(self, freq_hz: float) -> complex:
        """exp(i·(φ0 − 2π·f·τ)); exactly 1 for the zero path."""
        if not self.phase_rad and not self.delay_s:
            return complex(1.0)
        return cmath.exp(1j * (self.phase_rad - 2.0 * math.pi * freq_hz * self.delay_s))


@dataclass(frozen=True)
class LeakagePhases:
    """The phase of every linear path of a part (default: all in phase with the source)."""

    lo_to_rf: LeakPhase = LeakPhase()
    lo_to_if: LeakPhase = LeakPhase()
    rf_to_if: LeakPhase = LeakPhase()
    rf_to_lo: LeakPhase = LeakPhase()
    input_reflection: LeakPhase = LeakPhase()
    lo_reflection: LeakPhase = LeakPhase()


_PATHS = ("lo_to_rf", "lo_to_if", "rf_to_if", "rf_to_lo", "input_reflection", "lo_reflection")


def seeded_leakage_phases(seed: int, max_delay_s: float) -> LeakagePhases:
    """Reproducible path phases: φ0 uniform in [0, 2π), τ uniform in [0.2, 1]·max_delay_s,
    one independent draw per path from ``numpy.random.default_rng([seed, 9, k])``."""
    paths = {}
    for k, name in enumerate(_PATHS):
        rng = np.random.default_rng([int(seed), 9, k])
        phase, frac = rng.uniform(0.0, 2.0 * math.pi), rng.uniform(0.2, 1.0)
        paths[name] = LeakPhase(float(phase), float(frac * max_delay_s))
    return LeakagePhases(**paths)


@lru_cache(maxsize=64)
def _cm_layout(harmonics_per_tone: tuple[int, ...], n_axes: int) -> tuple[Any, ...]:
    """Index arrays and order tuples of the common-mode lines for a layout of input
    components (tone k carries harmonics 1..harmonics_per_tone[k] on axis 1 + k)."""
    rows = []
    for k, count in enumerate(harmonics_per_tone):
        for h in range(1, count + 1):
            row = [0] * n_axes
            row[1 + k] = h
            rows.append(row)
    orders = np.array(rows, dtype=np.int64).reshape(-1, n_axes)
    iu, ju = np.triu_indices(len(rows), 1)

    def tuples(block: NDArray[np.int64]) -> NDArray[np.object_]:
        out = np.empty(len(block), dtype=object)
        out[:] = [tuple(r) for r in block.tolist()]
        return out

    return (iu, ju, tuples(2 * orders), tuples(orders[iu] + orders[ju]),
            tuples(orders[iu] - orders[ju]), tuples(orders[ju] - orders[iu]))


def common_mode_im2_lines(
    freq_hz: NDArray[np.float64],
    amp_v: NDArray[np.float64],
    phase_rad: NDArray[np.float64],
    harmonics_per_tone: tuple[int, ...],
    n_axes: int,
    i_ee_a: float,
    a_v: float,
    cm_second_order: float,
    imbalance: float,
) -> tuple[NDArray[np.float64], NDArray[np.complex128], NDArray[np.object_]] | None:
    """Second-order lines of the common-mode path: (freq Hz, peak differential output
    current A as complex, orders), or None when there are none.

    The inputs are every input line at the core (freq, peak V, phase), tone by tone, in the
    layout ``harmonics_per_tone``. The transconductor's common-mode current is
    ``i_cm = c2·I_EE·u²`` with the pair's normalised input ``u = v/a`` (a = 2·VT + I_EE·R_E,
    small-signal inversion of the pair equation). With the branch currents
    ``(I_EE + i_cm ± ΔI)/2`` the quad's differential output gains ``(i_cm/2)·D`` and the load
    mismatch ε turns the common-mode current into ``ε·i_cm/2`` (derived:
    ``R(1+ε/2)·I₊ − R(1−ε/2)·I₋``), so ``out += (c2·I_EE/(2·a²))·(ε + D_0)·v²``,
    v = Σ A_c·cos θ_c. Squaring gives ``K·A_c·A_d`` at f_c ± f_d and ``K·A_c²/2`` at 2·f_c
    (K = c2·I_EE·(ε + D_0)/(2·a²)). The quad's LO-frequency parts of D move these lines next
    to the LO harmonics, far from the output band; they are left out.
    """
    layout = CommonModeLayout(freq_hz, harmonics_per_tone, n_axes)
    amp = common_mode_im2_amplitudes(layout, amp_v, phase_rad, i_ee_a, a_v, cm_second_order,
                                     imbalance)
    return None if amp is None else (layout.freq_hz, amp, layout.orders)


class CommonModeLayout:
    """Where the common-mode lines of a set of input lines sit, which depends on the input
    frequencies only (the points of a power sweep share it): each line's frequency (Hz),
    its orders (as ``codes`` into ``names``, :func:`common_mode_names`, and as tuples,
    :attr:`orders`), and which input lines make it (see :func:`common_mode_im2_lines`)."""

    __slots__ = ("codes", "far", "freq_hz", "iu", "ju", "names", "sign")

    def __init__(self, freq_hz: NDArray[np.float64], harmonics_per_tone: tuple[int, ...],
                 n_axes: int) -> None:
        iu, ju = _cm_layout(harmonics_per_tone, n_axes)[:2]
        names, sq_c, sum_c, dpos_c, dneg_c = _cm_codes(harmonics_per_tone, n_axes)
        diff = freq_hz[iu] - freq_hz[ju]
        pos = diff >= 0.0
        far = np.abs(diff) > 1e-3
        self.iu, self.ju, self.far, self.names = iu, ju, far, names
        self.freq_hz: NDArray[np.float64] = np.concatenate(
            [2.0 * freq_hz, freq_hz[iu] + freq_hz[ju], np.abs(diff[far])])
        self.codes: NDArray[np.intp] = np.concatenate(
            [sq_c, sum_c, np.where(pos, dpos_c, dneg_c)[far]])
        self.sign: NDArray[np.float64] = np.where(pos, 1.0, -1.0)[far]

    @property
    def orders(self) -> NDArray[np.object_]:
        """Each line's orders ``(0, n_1, …, n_K)``, tuples."""
        return self.names[self.codes]  # type: ignore[no-any-return]


def common_mode_im2_amplitudes(
    layout: CommonModeLayout,
    amp_v: NDArray[np.float64],
    phase_rad: NDArray[np.float64],
    i_ee_a: float,
    a_v: float,
    cm_second_order: float,
    imbalance: float,
) -> NDArray[np.complex128] | None:
    """The peak differential output current (A, complex) of each line of ``layout`` for
    input lines of peak volts ``amp_v`` and phases ``phase_rad`` (its layout), or None when
    there are none (see :func:`common_mode_im2_lines`)."""
    k = cm_second_order * i_ee_a * imbalance / (2.0 * a_v * a_v)
    if k == 0.0 or amp_v.size == 0:
        return None
    iu, ju, far = layout.iu, layout.ju, layout.far
    pair = k * amp_v[iu] * amp_v[ju]
    mag = np.concatenate([0.5 * k * amp_v * amp_v, pair, pair[far]])
    phase = np.concatenate([
        2.0 * phase_rad, phase_rad[iu] + phase_rad[ju],
        layout.sign * (phase_rad[iu] - phase_rad[ju])[far]])
    return mag * np.exp(1j * phase)


def common_mode_names(harmonics_per_tone: tuple[int, ...], n_axes: int) -> NDArray[np.object_]:
    """Every order tuple a common-mode line of this layout of input lines can have, in the
    order :attr:`CommonModeLayout.codes` index (read-only, shared)."""
    return _cm_codes(harmonics_per_tone, n_axes)[0]  # type: ignore[no-any-return]


@lru_cache(maxsize=64)
def _cm_codes(harmonics_per_tone: tuple[int, ...], n_axes: int) -> tuple[Any, ...]:
    """The order tuples of :func:`_cm_layout` in one object array (squares, sums, positive
    and negative differences) and each block's indices into it."""
    _, _, sq_o, sum_o, dpos_o, dneg_o = _cm_layout(harmonics_per_tone, n_axes)
    table = np.concatenate([sq_o, sum_o, dpos_o, dneg_o])
    table.flags.writeable = False
    n, p = sq_o.size, sum_o.size
    codes = np.arange(table.size)
    return table, codes[:n], codes[n : n + p], codes[n + p : n + 2 * p], codes[n + 2 * p :]


def common_mode_im2_rows(
    freq_hz: NDArray[np.float64],
    amp_v: NDArray[np.float64],
    phase_rad: NDArray[np.float64],
    harmonics_per_tone: tuple[int, ...],
    n_axes: int,
    i_ee_a: float,
    a_v: float,
    cm_second_order: float,
    imbalance: float,
) -> tuple[NDArray[np.intp], NDArray[np.float64], NDArray[np.complex128],
           NDArray[np.intp], NDArray[np.object_]] | None:
    """:func:`common_mode_im2_lines` for several points at once: the inputs are arrays of
    shape (points, input lines), one row per point in the same layout; the lines of all
    points come out concatenated, point after point, each point's in the order
    :func:`common_mode_im2_lines` gives them, with the point's row index first
    (``(seg, freq Hz, amp A complex, codes, orders)``: each line's orders are
    ``orders[code]``), or None when there are none."""
    k = cm_second_order * i_ee_a * imbalance / (2.0 * a_v * a_v)
    if k == 0.0 or freq_hz.size == 0:
        return None
    n_pts = freq_hz.shape[0]
    iu, ju = _cm_layout(harmonics_per_tone, n_axes)[:2]
    table, sq_c, sum_c, dpos_c, dneg_c = _cm_codes(harmonics_per_tone, n_axes)
    pair = k * amp_v[:, iu] * amp_v[:, ju]
    diff = freq_hz[:, iu] - freq_hz[:, ju]
    pos = diff >= 0.0
    far = np.abs(diff) > 1e-3
    freq = np.concatenate([2.0 * freq_hz, freq_hz[:, iu] + freq_hz[:, ju], np.abs(diff)],
                          axis=1)
    mag = np.concatenate([0.5 * k * amp_v * amp_v, pair, pair], axis=1)
    phase = np.concatenate([
        2.0 * phase_rad, phase_rad[:, iu] + phase_rad[:, ju],
        np.where(pos, 1.0, -1.0) * (phase_rad[:, iu] - phase_rad[:, ju])], axis=1)
    keep = np.ones(freq.shape, dtype=bool)
    keep[:, freq_hz.shape[1] + iu.size :] = far
    codes = np.empty(freq.shape, dtype=np.intp)
    codes[:, : sq_c.size] = sq_c
    codes[:, sq_c.size : sq_c.size + sum_c.size] = sum_c
    codes[:, sq_c.size + sum_c.size :] = np.where(pos, dpos_c, dneg_c)
    seg = np.broadcast_to(np.arange(n_pts)[:, None], freq.shape)
    amp = mag[keep] * np.exp(1j * phase[keep])
    return seg[keep], freq[keep], amp, codes[keep], table


def switch_overlap_fraction(lo_amplitude_v: float, vt_v: float) -> float:
    """Fraction of the LO period Δ/T during which both transistors of a pair conduct.

    A sine LO of peak A crosses ``|v| < V_x`` (V_x = 4·VT) at slope A·ω, twice a period:
    ``Δ/T = 2·(2·V_x/(A·ω))/T = 2·V_x/(π·A)``, independent of the LO frequency; at most 1
    (no LO: the pair never switches)."""
    if lo_amplitude_v <= 0.0:
        return 1.0
    return min(1.0, 2.0 * SWITCH_OVERLAP_VT * vt_v / (math.pi * lo_amplitude_v))


def lo_drive_noise_factor(
    nominal_factor: float,
    switch_share: float,
    overlap: float,
    nominal_overlap: float,
    gain_ratio: float,
) -> float:
    """Noise factor F at an LO drive, from F at the nominal drive.

    The excess noise ``F_nom − 1`` splits into the switching quad's share s and the rest
    (transconductor, degeneration, load: held constant referred to the input). The quad's
    output noise grows with the overlap fraction Δ/T (Darabi & Abidi 2000, from memory);
    referred to the input it is divided by the conversion gain, so
    ``F − 1 = (F_nom − 1)·[(1 − s) + s·(Δ/Δ_nom)/(G/G_nom)]``. Equal to F_nom at the nominal
    drive; rises as the LO drive falls.
    """
    if gain_ratio <= 0.0 or not math.isfinite(gain_ratio):
        return math.inf
    excess = (nominal_factor - 1.0) * (
        (1.0 - switch_share) + switch_share * (overlap / nominal_overlap) / gain_ratio
    )
    return 1.0 + excess
