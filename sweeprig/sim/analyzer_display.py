"""What a swept spectrum analyzer displays for a given input: a pure numpy model, no I/O.

Conventions: frequencies in Hz, powers in dBm at the analyzer's input connector, noise
densities in dBm/Hz, attenuation in dB, times in s. Every level the model returns is referred
to the input connector (the attenuation is added back), as an analyzer displays it.

The chain modelled, per sweep:

1. Input lines (frequency, power) pass the input attenuator and reach the first mixer.
2. The first mixer compresses on its total input power (a soft ``1/(1 + P/Pc)`` power law) and
   adds its own 2nd- and 3rd-order products of the strongest lines, with levels from its
   intercepts; all of it is referred back to the input by adding the attenuation. A product
   that falls on an input line adds to it as a voltage, with a phase of its own
   (``φ_kind − 2π·f·τ_kind``, seeded by ``product_phase_seed``): it can raise the line by up
   to 6.02 dB or cancel it, as on a real analyzer (``coherent_products=False``: as powers).
3. Each line is shaped by a Gaussian resolution filter (−3 dB at ±RBW/2).
4. Noise: the analyzer's own displayed average noise level (DANL) plus the input noise density
   integrated over the filter's noise bandwidth, plus reciprocal mixing: the analyzer's LO
   phase noise L(Δf) (``phase_noise``, log-interpolated) moves every strong line's power
   onto its neighbourhood, ``P_line + L(Δf) + 10·log10(ENBW)``; the trace fluctuates like a
   log-detected noise trace and averaging (and video filtering) smooths it.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from functools import lru_cache
from typing import Protocol

import numpy as np
from numpy.typing import ArrayLike, NDArray

from sweeprig.sim.description import DEFAULT_PHASE_NOISE  # the default, stated with the file format

FloatArray = NDArray[np.float64]
NoiseDensity = float | Callable[[FloatArray], FloatArray]

BOLTZMANN_J_PER_K = 1.380649e-23  # exact since the 2019 SI redefinition (CODATA)
T0_K = 290.0  # IEEE reference temperature of the noise figure
# kT0 in dBm/Hz: 10·log10(1.380649e-23 · 290 / 1e-3) = -173.975 (Pozar, noise chapter).
KT0_DBM_PER_HZ = 10.0 * math.log10(BOLTZMANN_J_PER_K * T0_K / 1e-3)

# Gaussian power response H(df) = 2^-(2·df/RBW)^2 is -3 dB (one half) at df = ±RBW/2. Its
# equivalent noise bandwidth is the integral of H over df: with H = exp(-a·df²),
# a = 4·ln2/RBW², the integral is sqrt(pi/a) = RBW·sqrt(pi/(4·ln2)) = 1.0645·RBW (derived).
GAUSSIAN_ENBW_PER_RBW = math.sqrt(math.pi / (4.0 * math.log(2.0)))

# A log-detected noise trace: the power of a Rayleigh envelope is exponentially distributed;
# for E ~ Exp(1), E[ln E] = -gamma (Euler's constant) and std[ln E] = pi/sqrt(6) (standard
# results for the log of an exponential variate, derived). In dB: the mean reads
# 10·gamma/ln10 = 2.507 dB below the power mean, and one sweep fluctuates by 5.57 dB rms.
LOG_DETECTOR_BIAS_DB = 10.0 * 0.5772156649015329 / math.log(10.0)
LOG_NOISE_STD_DB = 10.0 / math.log(10.0) * math.pi / math.sqrt(6.0)

# Harmonic versus intermodulation levels for the same tone levels, from the power-series
# expansion of a2·x² and a3·x³ with x = A1·cos(w1 t) + A2·cos(w2 t) (derived):
# 2nd harmonic a2·A²/2 versus f1±f2 a2·A1·A2 → the IM2 lines sit 20·log10(2) = 6.02 dB above
# the 2nd harmonic, so the two-tone 2nd-order intercept is SHI - 6.02 dB;
# 3rd harmonic a3·A³/4 versus 2f1±f2 (3/4)·a3·A1²·A2 → H3 sits 20·log10(3) = 9.54 dB below IM3.
IM2_ABOVE_H2_DB = 20.0 * math.log10(2.0)
H3_BELOW_IM3_DB = 20.0 * math.log10(3.0)

# Reciprocal mixing is summed over at most this many of the strongest lines, and only over
# lines whose close-in noise could reach within 30 dB of the DANL.
_PHASE_NOISE_LINES = 8
_PHASE_NOISE_REACH_DB = 30.0
# First-mixer products within this of an input line add to it (same as the mixer model).
_COINCIDENT_HZ = 1e-3
_LN2 = math.log(2.0)
_LN10_OVER_10 = math.log(10.0) / 10.0
# Product kinds, each with its own seeded phase law.
_KINDS = ("h2", "h3", "im2", "im3")

# Above this many averages the mean of the log-detected samples is drawn from its normal
# limit (central limit theorem) instead of being summed sample by sample.
_EXACT_AVERAGE_LIMIT = 32
# Lines more than this many RBWs from a frequency contribute nothing visible:
# H(5·RBW) = 2^-100 = -301 dB, below any floor even for a +30 dBm line.
_FILTER_REACH_RBW = 5.0
# Only the strongest lines make first-mixer products (their products dominate by far).
_DISTORTION_LINES = 8
# Products below this level at the first mixer are dropped (far under any noise floor).
_PRODUCT_FLOOR_DBM = -250.0
SWEEP_TIME_FACTOR = 2.5  # k in k·span/RBW² (common practice, no source: k ≈ 2-3, Gaussian)
MIN_SWEEP_TIME_S = 1e-3
#: How far above the reference level the simulated analyzer's IF still shows a level, dB:
#: above it the IF clips and the display shows this much (the reading is then flagged
#: uncalibrated already: anything above the reference level is). An invented figure of the
#: fictional analyzer; real analyzers state their own headroom, often a few dB.
IF_HEADROOM_DB = 10.0
ZERO_SPAN_TIME_PER_POINT_S = 1e-6


@dataclass(frozen=True)
class AnalyzerParams:
    """The analyzer's own properties (fixed by the simulated bench, not by SCPI).

    ``noise_figure_db``: noise figure at 0 dB input attenuation, defined so that
    DANL = kT0 + NF + attenuation + 10·log10(RBW).
    ``toi_dbm``: third-order intercept at the first mixer (input-referred at 0 dB attenuation).
    ``shi_dbm``: second-harmonic intercept at the first mixer.
    ``p1db_dbm``: first-mixer input 1 dB compression point.
    ``overload_dbm``: total first-mixer power above which the overload flag is raised.
    ``amplitude_error_db``: fixed error added to every displayed level (0: ideal).
    ``phase_noise``: the analyzer's LO phase noise as (offset Hz, dBc/Hz) pairs, offsets
    rising (empty: none; default :data:`DEFAULT_PHASE_NOISE`, an assumption).
    ``coherent_products``: first-mixer products add to input lines at their frequency as
    voltages with a seeded phase (False: as powers). ``product_phase_seed``: that seed.
    ``product_delay_s``: the largest delay of the seeded phase laws (φ0 − 2π·f·τ, τ drawn
    in [0.2, 1]·product_delay_s).
    """

    noise_figure_db: float = 14.0
    toi_dbm: float = 15.0
    shi_dbm: float = 45.0
    p1db_dbm: float = 3.0
    overload_dbm: float = 0.0
    amplitude_error_db: float = 0.0
    phase_noise: tuple[tuple[float, float], ...] = DEFAULT_PHASE_NOISE
    coherent_products: bool = True
    product_phase_seed: int = 0
    product_delay_s: float = 2e-9

    def phase_noise_dbc_per_hz(self, offset_hz: ArrayLike) -> FloatArray:
        """L(offset) in dBc/Hz, log-interpolated (−inf everywhere without a profile)."""
        off = np.abs(np.asarray(offset_hz, dtype=float))
        if not self.phase_noise:
            return np.full(off.shape, -math.inf)
        xs, ys = _phase_noise_table(self.phase_noise)
        return np.interp(np.log10(np.maximum(off, 1e-6)), xs, ys)

    def product_rotation(self, kind: str, freq_hz: float) -> complex:
        """The seeded phase factor of a first-mixer product of ``kind`` at ``freq_hz``."""
        phase0, delay = _product_phase_law(self.product_phase_seed, self.product_delay_s)[kind]
        return complex(np.exp(1j * (phase0 - 2.0 * math.pi * freq_hz * delay)))


@dataclass(frozen=True)
class SweepSettings:
    """One sweep's settings. ``start_hz == stop_hz`` is zero span at that frequency.

    ``averages`` is the number of sweeps averaged (1: no averaging). ``vbw_hz`` below
    ``rbw_hz`` smooths the noise (and slows the sweep). ``detector``: ``"sample"`` (the
    log-detected envelope, log-averaged; the simulator shows its mean with the log bias
    removed, see :func:`_noise_offsets_db`) or ``"rms"`` (the power detector: each point is
    the mean power of the samples it spans, and averaging is in power).
    """

    start_hz: float
    stop_hz: float
    points: int = 1001
    rbw_hz: float = 1e6
    vbw_hz: float = 1e6
    attenuation_db: float = 10.0
    ref_level_dbm: float = 0.0
    averages: int = 1
    detector: str = "sample"

    @classmethod
    def centered(cls, center_hz: float, span_hz: float, **kwargs: float | int) -> SweepSettings:
        """Settings from centre and span (Hz)."""
        return cls(center_hz - span_hz / 2.0, center_hz + span_hz / 2.0, **kwargs)  # type: ignore[arg-type]

    @property
    def span_hz(self) -> float:
        return self.stop_hz - self.start_hz

    @property
    def center_hz(self) -> float:
        return 0.5 * (self.start_hz + self.stop_hz)

    def freqs_hz(self) -> FloatArray:
        """Frequency of every trace point, Hz (all equal in zero span; read-only: the grid
        of one start, stop and point count is made once and shared by its sweeps)."""
        return _trace_grid(self.start_hz, self.stop_hz, self.points)


@lru_cache(maxsize=32)
def _trace_grid(start_hz: float, stop_hz: float, points: int) -> FloatArray:
    """``np.linspace(start_hz, stop_hz, points)``, read-only (an analyzer sweeps the same
    settings point after point)."""
    grid = np.linspace(start_hz, stop_hz, points)
    grid.flags.writeable = False
    return grid


@dataclass(frozen=True)
class InputSpectrum:
    """What arrives at the analyzer input.

    ``lines``: discrete lines as (frequency Hz, power dBm).
    ``noise_dbm_per_hz``: noise density arriving with them, a constant or a function of a
    frequency array (Hz) returning dBm/Hz; ``-inf`` (or anything up to kT0, -174 dBm/Hz) for
    a quiet matched input. The analyzer's own noise comes on top.
    """

    lines: tuple[tuple[float, float], ...] = ()
    noise_dbm_per_hz: NoiseDensity = -math.inf
    #: Total noise power arriving across the analyzer's input band, dBm (it loads the first
    #: mixer like a line of that power; -inf: negligible).
    wideband_noise_dbm: float = -math.inf
    #: ``lines`` as two arrays (Hz, dBm) when they were made from arrays
    #: (:meth:`from_arrays`): the display takes them as they are.
    _line_arrays: tuple[FloatArray, FloatArray] | None = field(
        default=None, compare=False, repr=False)

    @classmethod
    def from_arrays(cls, freq_hz: FloatArray, power_dbm: FloatArray,
                    noise_dbm_per_hz: NoiseDensity = -math.inf,
                    wideband_noise_dbm: float = -math.inf) -> InputSpectrum:
        """The spectrum of lines given as arrays (Hz, dBm; the same numbers as ``lines``)."""
        freq = np.asarray(freq_hz, dtype=float)
        power = np.asarray(power_dbm, dtype=float)
        return cls(tuple(zip(freq.tolist(), power.tolist(), strict=True)), noise_dbm_per_hz,
                   wideband_noise_dbm, (freq, power))

    def line_arrays(self) -> tuple[FloatArray, FloatArray]:
        """The lines as arrays (frequency Hz, power dBm)."""
        if self._line_arrays is not None:
            return self._line_arrays
        if not self.lines:
            return _EMPTY, _EMPTY
        arr = np.asarray(self.lines, dtype=float).reshape(-1, 2)
        return arr[:, 0], arr[:, 1]

    def noise_at(self, freqs_hz: ArrayLike) -> FloatArray:
        """Input noise density at ``freqs_hz``, dBm/Hz."""
        f = np.asarray(freqs_hz, dtype=float)
        if callable(self.noise_dbm_per_hz):
            return np.broadcast_to(np.asarray(self.noise_dbm_per_hz(f), dtype=float), f.shape)
        return np.full(f.shape, float(self.noise_dbm_per_hz))


@dataclass(frozen=True, eq=False)
class SweepResult:
    """The outcome of one (possibly averaged) sweep.

    ``trace_dbm`` is the displayed level per point in ``freqs_hz``. ``overload``: the first
    mixer was driven above its overload threshold. ``uncalibrated``: the trace went above the
    reference level. Use :meth:`level_at` for a marker reading at an exact frequency.
    """

    freqs_hz: FloatArray
    trace_dbm: FloatArray
    overload: bool
    uncalibrated: bool
    sweep_time_s: float
    mixer_level_dbm: float
    _signal_mw: Callable[[FloatArray], FloatArray] = field(repr=False)
    _noise_mw: Callable[[FloatArray], FloatArray] = field(repr=False)
    _noise_offset_db: FloatArray = field(repr=False)
    #: The signal and the mean noise without reciprocal mixing (mW) at every trace point,
    #: as the trace was made from them (None: evaluated at each reading), and the
    #: reciprocal mixing as a function of f (None: none), which a reading evaluates
    #: exactly where it reads (the trace interpolates it between computed points).
    _signal_grid_mw: FloatArray | None = field(default=None, repr=False)
    _noise_base_grid_mw: FloatArray | None = field(default=None, repr=False)
    _reciprocal_mw: Callable[[FloatArray], FloatArray] | None = field(default=None, repr=False)
    #: The highest level the display can show, dBm: the reference level plus
    #: :data:`IF_HEADROOM_DB` (above it the IF clips: the level shown is this).
    clip_dbm: float = math.inf

    def level_at(self, freq_hz: float) -> float:
        """Displayed level (dBm) exactly at ``freq_hz`` (clamped to the sweep's range).

        The lines are evaluated exactly there; the random part of the noise is interpolated
        between the neighbouring trace points, so repeated readings of one sweep agree. A
        reading exactly at a trace point (a marker on the centre or on a grid frequency)
        takes the signal and noise the sweep computed there (the same numbers, or within
        a rounding of the vectorised arithmetic: 1e-15 relative).
        """
        f_lo, f_hi = float(self.freqs_hz[0]), float(self.freqs_hz[-1])
        at = None  # the trace point the reading falls on exactly
        if f_hi <= f_lo:  # zero span: the reading of the middle point
            at = len(self._noise_offset_db) // 2
            offset = float(self._noise_offset_db[at])
            x = f_lo
        else:
            x = min(max(float(freq_hz), f_lo), f_hi)
            freqs = self.freqs_hz
            k = int(np.searchsorted(freqs, x))
            if k < freqs.size and float(freqs[k]) == x:
                at = k
            if at is not None and (k + 1 == freqs.size or float(freqs[k + 1]) != x):
                # on a trace point of its own: what np.interp gives there, that point's offset
                offset = float(self._noise_offset_db[k])
            else:
                offset = float(np.interp(x, freqs, self._noise_offset_db))
        if at is not None and self._signal_grid_mw is not None \
                and self._noise_base_grid_mw is not None:
            noise = np.array([self._noise_base_grid_mw[at]])
            if self._reciprocal_mw is not None:
                noise = noise + self._reciprocal_mw(np.array([x]))
            total = np.array([self._signal_grid_mw[at]]) + noise * 10.0 ** (offset / 10.0)
        else:
            f = np.array([x])
            total = self._signal_mw(f) + self._noise_mw(f) * 10.0 ** (offset / 10.0)
        return min(float(_mw_to_dbm(total)[0]), self.clip_dbm)

    def peak(self) -> tuple[float, float]:
        """Frequency (Hz) and level (dBm) of the trace maximum.

        The highest point is refined by fitting a parabola through the dB values of it and
        its two neighbours (exact for an isolated line under a Gaussian filter, whose dB
        shape is a parabola); the level is then read exactly at the refined frequency.
        """
        k = int(np.argmax(self.trace_dbm))
        n = len(self.trace_dbm)
        f = self.freqs_hz
        if n < 3 or f[-1] <= f[0] or k == 0 or k == n - 1:
            return float(f[k]), self.level_at(float(f[k]))
        a, b, c = (float(v) for v in self.trace_dbm[k - 1 : k + 2])
        denom = a - 2.0 * b + c
        offset_bins = 0.5 * (a - c) / denom if denom < 0 else 0.0
        offset_bins = min(max(offset_bins, -0.5), 0.5)
        freq = float(f[k] + offset_bins * (f[1] - f[0]))
        return freq, self.level_at(freq)


def sweep_time_s(settings: SweepSettings) -> float:
    """Time of one sweep, s: k·span/(RBW·min(RBW, VBW)), at least 1 ms.

    k = 2.5 (common practice, no source: k ≈ 2-3 for Gaussian filters); a VBW narrower than
    the RBW slows the sweep in proportion (common practice, no source). Zero span: 1 µs per
    point, at least 1 ms.
    """
    if settings.span_hz <= 0:
        return max(MIN_SWEEP_TIME_S, settings.points * ZERO_SPAN_TIME_PER_POINT_S)
    rbw = settings.rbw_hz
    t = SWEEP_TIME_FACTOR * settings.span_hz / (rbw * min(rbw, settings.vbw_hz))
    return max(MIN_SWEEP_TIME_S, t)


def total_sweep_time_s(settings: SweepSettings) -> float:
    """Time of a complete measurement (all averages), s."""
    return sweep_time_s(settings) * max(1, settings.averages)


def danl_dbm(settings: SweepSettings, params: AnalyzerParams) -> float:
    """The analyzer's own displayed average noise level, dBm.

    DANL = kT0 + NF + attenuation + 10·log10(RBW), kT0 = -173.98 dBm/Hz (Pozar, noise
    chapter; IEEE noise figure at T0 = 290 K).
    """
    return (
        KT0_DBM_PER_HZ
        + params.noise_figure_db
        + settings.attenuation_db
        + 10.0 * math.log10(settings.rbw_hz)
        + params.amplitude_error_db
    )


def displayed_noise_dbm(
    freqs_hz: ArrayLike, spectrum: InputSpectrum, settings: SweepSettings, params: AnalyzerParams
) -> FloatArray:
    """Mean displayed noise level (dBm) at ``freqs_hz``: DANL, input noise, reciprocal mixing.

    The input noise density is taken as flat across one RBW; its excess above kT0 (the DANL
    already holds a matched input's kT0) is integrated over the Gaussian filter's noise
    bandwidth, ENBW = 1.0645·RBW (derived above). Reciprocal mixing adds, for every strong
    displayed line, ``P_line + L(|f − f_line|) + 10·log10(ENBW)`` (the analyzer's LO phase
    noise moved onto the line; the reciprocal-mixing relation of spectrum-analyzer
    application notes, e.g. "Spectrum Analysis Basics", an application note of a
    test-equipment maker, from memory), faded out within about one RBW of the line, where
    the line's own displayed shape already holds its phase noise (a chosen model, no
    source). Unlike a sweep, every line counts here (no pruning to the strongest).
    """
    f = np.asarray(freqs_hz, float)
    line_f, line_dbm, _ = _displayed_arrays(spectrum.lines, settings, params,
                                          spectrum._line_arrays)
    noise = _noise_mw_fn(spectrum, settings, params, line_f, line_dbm, span_hz=None)
    return _mw_to_dbm(noise(f))


def noise_breakdown_mw(
    freq_hz: float, spectrum: InputSpectrum, settings: SweepSettings, params: AnalyzerParams
) -> tuple[float, float, float]:
    """The mean displayed noise at one frequency in its parts, mW in the noise bandwidth:
    the DANL, the input noise above kT0, and reciprocal mixing (of the lines a sweep with
    ``settings`` counts: exactly what :func:`simulate_sweep` displays there)."""
    line_f, line_dbm, _ = _displayed_arrays(spectrum.lines, settings, params,
                                          spectrum._line_arrays)
    f = np.array([float(freq_hz)])
    enbw_hz = GAUSSIAN_ENBW_PER_RBW * settings.rbw_hz
    error = 10.0 ** (params.amplitude_error_db / 10.0)
    kt0_mw_per_hz = 10.0 ** (KT0_DBM_PER_HZ / 10.0)
    density_mw = 10.0 ** (spectrum.noise_at(f) / 10.0)
    excess = float(np.maximum(density_mw - kt0_mw_per_hz, 0.0)[0]) * enbw_hz * error
    reciprocal = _reciprocal_mw_fn(line_f, line_dbm, settings, params,
                                   span_hz=(settings.start_hz, settings.stop_hz))
    return (10.0 ** (danl_dbm(settings, params) / 10.0), excess,
            float(reciprocal(f)[0]) if reciprocal is not None else 0.0)


def reciprocal_mixing_dbm(
    freqs_hz: ArrayLike, lines: Sequence[tuple[float, float]], settings: SweepSettings,
    params: AnalyzerParams,
) -> FloatArray:
    """Reciprocal-mixing noise alone (dBm in the RBW's noise bandwidth) at ``freqs_hz`` from
    displayed ``lines`` (frequency Hz, dBm); −inf where there is none."""
    f = np.asarray(freqs_hz, dtype=float)
    line_f = np.array([x for x, _ in lines], dtype=float)
    line_dbm = np.array([p for _, p in lines], dtype=float)
    fn = _reciprocal_mw_fn(line_f, line_dbm, settings, params, span_hz=None)
    if fn is None:
        return np.full(f.shape, -math.inf)
    return _mw_to_dbm(fn(f))


_KIND_CODES = {kind: k for k, kind in enumerate(_KINDS)}


@dataclass(frozen=True)
class FirstMixerProduct:
    """One first-mixer product, input-referred: frequency (Hz), complex amplitude
    (sqrt(mW), with its seeded phase) and kind (``h2``, ``h3``, ``im2``, ``im3``)."""

    freq_hz: float
    amplitude: complex
    kind: str

    @property
    def power_dbm(self) -> float:
        return _mw_to_dbm_scalar(abs(self.amplitude) ** 2)


@dataclass(frozen=True, eq=False)
class FirstMixer:
    """The first mixer's view of the input lines, input-referred.

    ``line_freq_hz``/``line_dbm``: the input lines after compression; ``product_freq_hz``,
    ``product_amp`` (complex sqrt(mW)), ``product_kind`` (index into h2, h3, im2, im3): its
    own products; ``total_dbm``: total power at the first mixer (not input-referred);
    ``compression_db``: the gain change of every line (≤ 0).
    """

    line_freq_hz: FloatArray
    line_dbm: FloatArray
    product_freq_hz: FloatArray
    product_amp: NDArray[np.complex128]
    product_kind: NDArray[np.intp]
    total_dbm: float
    compression_db: float

    @property
    def lines(self) -> tuple[tuple[float, float], ...]:
        """The compressed input lines as (Hz, dBm)."""
        return tuple(zip(self.line_freq_hz.tolist(), self.line_dbm.tolist(), strict=True))

    @property
    def products(self) -> tuple[FirstMixerProduct, ...]:
        """The first mixer's own products."""
        return tuple(
            FirstMixerProduct(f, complex(a), _KINDS[k]) for f, a, k in zip(
                self.product_freq_hz.tolist(), self.product_amp.tolist(),
                self.product_kind.tolist(), strict=True))


_EMPTY = np.zeros(0)


def first_mixer(
    lines: Sequence[tuple[float, float]], settings: SweepSettings, params: AnalyzerParams,
    *, arrays: tuple[FloatArray, FloatArray] | None = None,
) -> FirstMixer:
    """Compression and products of the first mixer (see :func:`first_mixer_lines`).
    ``arrays``: the same lines as two arrays (Hz, dBm), taken instead of ``lines``."""
    att = settings.attenuation_db
    if arrays is not None:  # the same lines as arrays (Hz, dBm)
        ok = (arrays[0] > 0) & np.isfinite(arrays[1])
        freqs, input_dbm = (arrays if ok.all() else (arrays[0][ok], arrays[1][ok]))
    elif len(lines):
        arr = np.asarray(lines, dtype=float).reshape(-1, 2)
        ok = (arr[:, 0] > 0) & np.isfinite(arr[:, 1])
        freqs, input_dbm = arr[ok, 0], arr[ok, 1]
    else:
        freqs = input_dbm = _EMPTY
    if freqs.size == 0:
        return FirstMixer(_EMPTY, _EMPTY, _EMPTY, np.zeros(0, complex), np.zeros(0, np.intp),
                          -math.inf, 0.0)
    mixer_dbm = input_dbm - att
    total_mw = float(np.sum(10.0 ** (mixer_dbm / 10.0)))
    total_dbm = _mw_to_dbm_scalar(total_mw)
    # Soft compression on total power: power gain 1/(1 + P/Pc), -1 dB when P = P1dB, so
    # Pc = P1dB / (10^0.1 - 1) (a chosen model, no source).
    pc_mw = 10.0 ** (params.p1db_dbm / 10.0) / (10.0**0.1 - 1.0)
    compression_db = -10.0 * math.log10(1.0 + total_mw / pc_mw)

    top = np.argsort(mixer_dbm)[::-1][:_DISTORTION_LINES]
    fi, pi = freqs[top], mixer_dbm[top]
    toi, shi = params.toi_dbm, params.shi_dbm
    iu, ju, ia, ib, kinds_all = _pair_indices(fi.size)
    im2 = pi[iu] + pi[ju] - (shi - IM2_ABOVE_H2_DB)
    im3 = 2.0 * pi[ia] + pi[ib] - 2.0 * toi
    fiu, fju, fia2, fib = fi[iu], fi[ju], 2.0 * fi[ia], fi[ib]  # each taken once
    prod_f = np.concatenate([
        2.0 * fi, 3.0 * fi, fiu + fju, np.abs(fiu - fju), np.abs(fia2 - fib), fia2 + fib])
    prod_p = np.concatenate([
        2.0 * pi - shi, 3.0 * pi - 2.0 * toi - H3_BELOW_IM3_DB, im2, im2, im3, im3])
    keep = (prod_f > 0) & (prod_p > _PRODUCT_FLOOR_DBM)
    prod_f, prod_p, kinds = prod_f[keep], prod_p[keep], kinds_all[keep]
    phase0, delay = _product_phase_arrays(params.product_phase_seed, params.product_delay_s)
    amp = 10.0 ** ((prod_p + att) / 20.0) * np.exp(
        1j * (phase0[kinds] - 2.0 * math.pi * prod_f * delay[kinds]))
    return FirstMixer(freqs, input_dbm + compression_db, prod_f, amp, kinds, total_dbm,
                      compression_db)


@lru_cache(maxsize=16)
def _pair_indices(n: int) -> tuple[NDArray[np.intp], ...]:
    """For the ``n`` strongest lines: the pairs (i < j) of the 2nd-order sums and
    differences, the ordered pairs (i ≠ j) of the 3rd-order products, and the kind of every
    product in :func:`first_mixer`'s order (h2, h3, im2 sums and differences, im3), made once
    per ``n`` (read-only)."""
    iu, ju = np.triu_indices(n, 1)
    ia, ib = np.nonzero(~np.eye(n, dtype=bool))
    kinds = np.concatenate([
        np.full(n, 0), np.full(n, 1), np.full(2 * iu.size, 2),
        np.full(2 * ia.size, 3)]).astype(np.intp)
    out = (iu, ju, ia, ib, kinds)
    for arr in out:
        arr.flags.writeable = False
    return out


def first_mixer_lines(
    lines: Sequence[tuple[float, float]], settings: SweepSettings, params: AnalyzerParams
) -> tuple[list[tuple[float, float]], float]:
    """Lines as displayed (input-referred, dBm) after the attenuator and the first mixer.

    Returns the compressed input lines with the first mixer's own products added, and the
    total first-mixer power in dBm. Products at the mixer (levels P in dBm at the mixer):
    2f1±f2: 2·P1 + P2 − 2·TOI; 3f1: 3·P1 − 2·TOI − 9.54; f1±f2: P1 + P2 − (SHI − 6.02);
    2f1: 2·P1 − SHI (intercept laws, Razavi nonlinearity chapter; the harmonic offsets are
    derived above). Referring them back to the input adds the attenuation, so 10 dB more
    attenuation drops a 3rd-order product by 20 dB and a 2nd-order one by 10 dB, while the
    input lines keep their displayed level (the classic spectrum-analyzer dynamic-range
    relations: distortion rises 2 dB (3 dB) per dB of mixer level for 2nd (3rd) order,
    "Spectrum Analysis Basics", an application note of a test-equipment maker, from memory).
    Lines and products at one frequency add as voltages with the products' seeded phases
    (``params.coherent_products``), else as powers.
    """
    f, p, total = _displayed_arrays(lines, settings, params)
    return list(zip(f.tolist(), p.tolist(), strict=True)), total


def _displayed_arrays(
    lines: Sequence[tuple[float, float]], settings: SweepSettings, params: AnalyzerParams,
    arrays: tuple[FloatArray, FloatArray] | None = None,
) -> tuple[FloatArray, FloatArray, float]:
    # The display depends only on the lines, the attenuation and the analyzer: the last
    # answer is kept for the same (immutable) lines object, as successive sweeps of one
    # input ask for it again with other spans.
    key = (settings.attenuation_db, params)
    hit = _LAST_DISPLAYED.get("last")
    if hit is not None and hit[0] is lines and hit[1] == key:
        return hit[2]
    mixer = first_mixer(lines, settings, params, arrays=arrays)
    f, p = combine_displayed(mixer, params.coherent_products)
    value = (f, p, mixer.total_dbm)
    if isinstance(lines, tuple):
        _LAST_DISPLAYED["last"] = (lines, key, value)
    return value


_LAST_DISPLAYED: dict[str, tuple[object, tuple[float, AnalyzerParams], tuple[
    FloatArray, FloatArray, float]]] = {}


def combine_displayed(mixer: FirstMixer, coherent: bool = True) -> tuple[FloatArray, FloatArray]:
    """The compressed lines and the products at one frequency summed (voltages if
    ``coherent``, else powers) → displayed lines as arrays (Hz, dBm), sorted by frequency."""
    freq = np.concatenate([mixer.line_freq_hz, mixer.product_freq_hz])
    if freq.size == 0:
        return _EMPTY, _EMPTY
    amp = np.concatenate([10.0 ** (mixer.line_dbm / 20.0) + 0j, mixer.product_amp])
    order = np.argsort(freq, kind="stable")
    freq, amp = freq[order], amp[order]
    start = np.empty(freq.size, dtype=bool)
    start[0] = True
    np.greater(np.diff(freq), _COINCIDENT_HZ, out=start[1:])
    if start.all():
        power_mw = amp.real * amp.real + amp.imag * amp.imag
    else:
        group = np.cumsum(start) - 1
        if coherent:
            summed = np.zeros(int(group[-1]) + 1, dtype=complex)
            np.add.at(summed, group, amp)
            power_mw = summed.real * summed.real + summed.imag * summed.imag
        else:
            power_mw = np.zeros(int(group[-1]) + 1)
            np.add.at(power_mw, group, amp.real * amp.real + amp.imag * amp.imag)
        freq = freq[start]
    keep = power_mw > 0
    return freq[keep], _mw_to_dbm(power_mw[keep])


def simulate_sweep(
    spectrum: InputSpectrum,
    settings: SweepSettings,
    params: AnalyzerParams,
    rng: np.random.Generator,
) -> SweepResult:
    """Run one sweep (with all its averages) and return the trace and flags."""
    freqs = settings.freqs_hz()
    line_f, line_dbm, mixer_total_dbm = _displayed_arrays(spectrum.lines, settings, params,
                                          spectrum._line_arrays)
    signal_mw = _signal_mw_fn(line_f, line_dbm, settings.rbw_hz, params.amplitude_error_db)
    noise_gain = 1.0
    if math.isfinite(spectrum.wideband_noise_dbm):
        # Wideband noise loads the first mixer like a line: the same soft compression law as
        # first_mixer (a chosen model, no source), applied to the input noise it displays.
        noise_at_mixer_mw = 10.0 ** ((spectrum.wideband_noise_dbm - settings.attenuation_db)
                                     / 10.0)
        total_mw = noise_at_mixer_mw + (10.0 ** (mixer_total_dbm / 10.0)
                                        if math.isfinite(mixer_total_dbm) else 0.0)
        pc_mw = 10.0 ** (params.p1db_dbm / 10.0) / (10.0**0.1 - 1.0)
        noise_gain = 1.0 / (1.0 + total_mw / pc_mw)
        mixer_total_dbm = _mw_to_dbm_scalar(total_mw)
    base_mw, reciprocal_mw = _noise_parts_mw_fn(
        spectrum, settings, params, line_f, line_dbm,
        span_hz=(settings.start_hz, settings.stop_hz), input_gain=noise_gain)

    def noise_mw(freqs_hz: FloatArray) -> FloatArray:  # as _noise_mw_fn's
        total = base_mw(freqs_hz)
        if reciprocal_mw is not None:
            total = total + reciprocal_mw(freqs_hz)
        return total

    offsets_db = _noise_offsets_db(settings, rng)
    signal_grid, base_grid = signal_mw(freqs, ascending=True), base_mw(freqs)
    noise_grid = base_grid if reciprocal_mw is None else base_grid + reciprocal_mw(freqs)
    trace = _mw_to_dbm(signal_grid + noise_grid * 10.0 ** (offsets_db / 10.0))
    uncalibrated = bool(np.max(trace) > settings.ref_level_dbm)
    clip_dbm = settings.ref_level_dbm + IF_HEADROOM_DB
    if uncalibrated:  # (only then can a point be above the clip)
        trace = np.minimum(trace, clip_dbm)
    return SweepResult(
        freqs_hz=freqs,
        trace_dbm=trace,
        overload=bool(mixer_total_dbm > params.overload_dbm),
        uncalibrated=uncalibrated,
        sweep_time_s=total_sweep_time_s(settings),
        mixer_level_dbm=mixer_total_dbm,
        _signal_mw=signal_mw,
        _noise_mw=noise_mw,
        _noise_offset_db=offsets_db,
        _signal_grid_mw=signal_grid,
        _noise_base_grid_mw=base_grid,
        _reciprocal_mw=reciprocal_mw,
        clip_dbm=clip_dbm,
    )


class _SignalFn(Protocol):
    """The lines' signal (mW) as a function of f (Hz); ``ascending=True`` tells it ``f`` is
    a 1-D ascending axis (a sweep's grid), which it then need not check."""

    def __call__(self, freqs_hz: FloatArray, *, ascending: bool | None = None) -> FloatArray:
        ...


def _signal_mw_fn(
    line_f: FloatArray, line_dbm: FloatArray, rbw_hz: float, error_db: float
) -> _SignalFn:
    """Sum of the lines (mW) seen through the Gaussian RBW filter, as a function of f (Hz)."""
    line_mw = 10.0 ** ((line_dbm + error_db) / 10.0)
    keep = line_mw > 0
    line_f, line_mw = line_f[keep], line_mw[keep]
    order = np.argsort(line_f)
    line_f, line_mw = line_f[order], line_mw[order]
    reach = _FILTER_REACH_RBW * rbw_hz

    def signal(freqs_hz: FloatArray, *, ascending: bool | None = None) -> FloatArray:
        f = np.asarray(freqs_hz, dtype=float)
        out = np.zeros(f.shape)
        if line_f.size == 0 or f.size == 0:
            return out
        if ascending is None:
            ascending = f.ndim == 1 and bool(np.all(np.diff(f) >= 0))
        if ascending:  # its ends are its least and greatest values
            f_min, f_max = float(f[0]), float(f[-1])
        else:
            f_min, f_max = float(np.min(f)), float(np.max(f))
        lo = np.searchsorted(line_f, f_min - reach, side="left")
        hi = np.searchsorted(line_f, f_max + reach, side="right")
        # Chunks of neighbouring lines; on an ascending frequency axis each chunk only
        # touches the points within reach of it, so wide spans with many lines stay cheap.
        for start in range(int(lo), int(hi), 64):
            stop = min(int(hi), start + 64)
            chunk_f = line_f[start:stop]
            if ascending:
                a = int(np.searchsorted(f, chunk_f[0] - reach, side="left"))
                b = int(np.searchsorted(f, chunk_f[-1] + reach, side="right"))
                if a >= b:
                    continue
                x = (f[a:b, None] - chunk_f[None, :]) * (2.0 / rbw_hz)
                out[a:b] += np.exp2(-(x * x)) @ line_mw[start:stop]
            else:
                x = (f[..., None] - chunk_f) * (2.0 / rbw_hz)
                out += np.exp2(-(x * x)) @ line_mw[start:stop]
        return out

    return signal


def _noise_mw_fn(
    spectrum: InputSpectrum, settings: SweepSettings, params: AnalyzerParams,
    line_f: FloatArray = _EMPTY, line_dbm: FloatArray = _EMPTY,
    span_hz: tuple[float, float] | None = None, input_gain: float = 1.0,
) -> Callable[[FloatArray], FloatArray]:
    """Mean displayed noise power (mW) as a function of f (Hz): DANL plus input noise plus
    reciprocal mixing of the displayed lines (those that can show within ``span_hz``).
    ``input_gain``: the first mixer's power gain on the input noise (1: not compressed)."""
    base, reciprocal = _noise_parts_mw_fn(spectrum, settings, params, line_f, line_dbm,
                                          span_hz=span_hz, input_gain=input_gain)

    def noise(freqs_hz: FloatArray) -> FloatArray:
        total = base(freqs_hz)
        if reciprocal is not None:
            total = total + reciprocal(freqs_hz)
        return total

    return noise


def _noise_parts_mw_fn(
    spectrum: InputSpectrum, settings: SweepSettings, params: AnalyzerParams,
    line_f: FloatArray = _EMPTY, line_dbm: FloatArray = _EMPTY,
    span_hz: tuple[float, float] | None = None, input_gain: float = 1.0,
) -> tuple[Callable[[FloatArray], FloatArray], Callable[[FloatArray], FloatArray] | None]:
    """The two parts of :func:`_noise_mw_fn`'s noise (mW) as functions of f (Hz): the DANL
    plus the input noise, and the reciprocal mixing (None when none can show); the noise
    is their sum."""
    own_mw = 10.0 ** (danl_dbm(settings, params) / 10.0)
    enbw_hz = GAUSSIAN_ENBW_PER_RBW * settings.rbw_hz
    error = 10.0 ** (params.amplitude_error_db / 10.0)
    kt0_mw_per_hz = 10.0 ** (KT0_DBM_PER_HZ / 10.0)
    reciprocal = _reciprocal_mw_fn(line_f, line_dbm, settings, params, span_hz=span_hz)

    def base(freqs_hz: FloatArray) -> FloatArray:
        density_mw = 10.0 ** (spectrum.noise_at(freqs_hz) / 10.0)
        # The noise figure is defined with a source at T0, so the DANL already holds the kT0
        # of a matched input; only the excess above kT0 adds (definition of F; Pozar).
        excess_mw = np.maximum(density_mw - kt0_mw_per_hz, 0.0) * enbw_hz
        # × error × input_gain, each skipped where it is 1 (x·1 is x, bit for bit)
        if error != 1.0:
            excess_mw = excess_mw * error
        if input_gain != 1.0:
            excess_mw = excess_mw * input_gain
        return own_mw + excess_mw

    return base, reciprocal


def _reciprocal_mw_fn(
    line_f: FloatArray, line_dbm: FloatArray, settings: SweepSettings, params: AnalyzerParams,
    *, span_hz: tuple[float, float] | None,
) -> Callable[[FloatArray], FloatArray] | None:
    """Reciprocal-mixing noise (mW in the ENBW) of the lines, or None when none can show.

    ``P·10^(L(Δf)/10)·ENBW`` per line, faded by ``1 − H(Δf)`` (H the RBW filter's power
    response) within about one RBW of the line (there the line's display holds it). With
    ``span_hz`` = (start, stop) only lines whose noise can come within 30 dB of the DANL
    somewhere in that range count, at most the 8 strongest (a sweep's shortcut: what they
    leave out is below 0.004 dB of the floor); None: every line counts.
    """
    if not params.phase_noise or line_f.size == 0:
        return None
    enbw_db = 10.0 * math.log10(GAUSSIAN_ENBW_PER_RBW * settings.rbw_hz)
    xs, ys = _phase_noise_table(params.phase_noise)
    if span_hz is not None:
        start, stop = span_hz
        nearest = np.maximum(np.maximum(start - line_f, line_f - stop), 0.0)
        close_in = np.interp(np.log10(np.maximum(nearest, 1e-6)), xs, ys)
        reach = line_dbm + close_in + enbw_db > danl_dbm(settings, params) - _PHASE_NOISE_REACH_DB
        if not reach.any():
            return None
        line_f, line_dbm = line_f[reach], line_dbm[reach]
        if line_f.size > _PHASE_NOISE_LINES:
            top = np.argsort(line_dbm)[::-1][:_PHASE_NOISE_LINES]
            line_f, line_dbm = line_f[top], line_dbm[top]
    scale_mw = 10.0 ** ((line_dbm + params.amplitude_error_db + enbw_db) / 10.0)
    half_rbw = settings.rbw_hz / 2.0

    def exact(f: FloatArray) -> FloatArray:
        offset = np.abs(f[..., None] - line_f)
        dbc = np.interp(np.log10(np.maximum(offset, 1e-6)), xs, ys)
        x = offset / half_rbw
        fade = -np.expm1(-_LN2 * (x * x))
        return (np.exp(dbc * _LN10_OVER_10) * fade) @ scale_mw

    def reciprocal(freqs_hz: FloatArray) -> FloatArray:
        f = np.asarray(freqs_hz, dtype=float)
        step = 0
        if f.ndim == 1 and f.size > 64 and f[-1] > f[0]:
            step = int(half_rbw / ((f[-1] - f[0]) / (f.size - 1)))
        if step < 2:
            return exact(f)
        # A swept trace: the noise is smooth on the scale of half an RBW (the fade) and of
        # the offset itself (the profile), so every step-th point is computed and the rest
        # interpolated (linear in power); single readings are always exact.
        idx = _decimation(int(f.size), step)
        computed = f[idx]
        return np.interp(f, computed, exact(computed))

    return reciprocal


@lru_cache(maxsize=32)
def _decimation(points: int, step: int) -> NDArray[np.intp]:
    """Every ``step``-th index of ``points`` and the last one, ascending (read-only)."""
    idx = np.unique(np.append(np.arange(0, points, step), points - 1))
    idx.flags.writeable = False
    return idx


@lru_cache(maxsize=32)
def _phase_noise_table(
    profile: tuple[tuple[float, float], ...],
) -> tuple[FloatArray, FloatArray]:
    xs = np.log10(np.array([o for o, _ in profile], dtype=float))
    ys = np.array([v for _, v in profile], dtype=float)
    return xs, ys


@lru_cache(maxsize=32)
def _product_phase_law(seed: int, delay_s: float) -> dict[str, tuple[float, float]]:
    """Per product kind: (φ0 rad, τ s), φ0 uniform in [0, 2π), τ in [0.2, 1]·delay_s, one
    draw per kind from ``numpy.random.default_rng([seed, 23, k])``."""
    law = {}
    for k, kind in enumerate(_KINDS):
        rng = np.random.default_rng([int(seed), 23, k])
        law[kind] = (float(rng.uniform(0.0, 2.0 * math.pi)),
                     float(rng.uniform(0.2, 1.0) * delay_s))
    return law


@lru_cache(maxsize=32)
def _product_phase_arrays(seed: int, delay_s: float) -> tuple[FloatArray, FloatArray]:
    law = _product_phase_law(seed, delay_s)
    return (np.array([law[k][0] for k in _KINDS]), np.array([law[k][1] for k in _KINDS]))


def _noise_offsets_db(settings: SweepSettings, rng: np.random.Generator) -> FloatArray:
    """Random dB offset of the displayed noise per point, zero mean.

    One sweep: 10·log10(E) + 2.507 dB with E ~ Exp(1) (log-detected noise, 5.57 dB rms).
    N averaged sweeps (log averaging) keep the mean and divide the spread by about sqrt(N).
    A VBW narrower than the RBW smooths like RBW/VBW averages (common practice, no source).

    RMS (power) detector: each point is the mean power of the independent samples it spans,
    about ENBW × (sweep time / points) of them (a noise bandwidth B gives B independent
    samples per second, the time-bandwidth rule; common practice, no source), and N averaged
    sweeps multiply that count; the mean of n Exp(1) powers is Gamma(n, 1/n) distributed
    (standard result). The power mean is unbiased: no log correction applies.
    """
    n = settings.points
    if settings.detector == "rms":
        per_point = GAUSSIAN_ENBW_PER_RBW * settings.rbw_hz * sweep_time_s(settings) / n
        samples = max(1.0, per_point) * max(1, int(settings.averages))
        return 10.0 * np.log10(rng.gamma(samples, 1.0 / samples, n))
    averages = max(1, int(settings.averages))
    video_factor = max(1.0, settings.rbw_hz / max(settings.vbw_hz, 1e-12))
    if averages <= _EXACT_AVERAGE_LIMIT and video_factor == 1.0:
        samples = rng.standard_exponential((averages, n))
        if averages == 1:  # the mean of one row is that row (x / 1 is x)
            return 10.0 * np.log10(samples[0]) + LOG_DETECTOR_BIAS_DB
        return np.mean(10.0 * np.log10(samples), axis=0) + LOG_DETECTOR_BIAS_DB
    effective = averages * video_factor
    return rng.standard_normal(n) * (LOG_NOISE_STD_DB / math.sqrt(effective))


def _mw_to_dbm(power_mw: FloatArray) -> FloatArray:
    # the floor keeps log10 off zero (no divide-by-zero to silence)
    return 10.0 * np.log10(np.maximum(power_mw, 1e-300))


def _mw_to_dbm_scalar(power_mw: float) -> float:
    return 10.0 * math.log10(power_mw) if power_mw > 0 else -math.inf
