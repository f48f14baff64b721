"""What else the analyzer shows at a product's frequency: pure predictions, no I/O.

For one analyzer reading the planner knows the product's predicted level and every strong
line at the analyzer input (the port picture). This module predicts, in dBm at the analyzer
input, each contributor that can spoil the reading, and says which of them come within their
margin of the product (the reading's *risks*, seam A of the planner and the analysis):

* ``noise``: the analyzer's displayed average noise level (DANL) plus the part's own output
  noise, both in the resolution bandwidth;
* ``reciprocal_mixing``: the analyzer's LO phase noise on each strong neighbour,
  ``P_line + L(offset) + 10·log10(ENBW)``;
* ``analyzer_distortion``: the analyzer's first mixer's own 2nd- and 3rd-order products of the
  strong lines, from its intercepts, at the chosen input attenuation;
* ``analyzer_compression``: the small-signal gain drop of the first mixer on its total input
  power, or a total above its overload level;
* ``source_harmonic``: a source's harmonic converted by the part (or passing straight through
  it at its isolation) onto the product's frequency, by every route of
  :func:`source_harmonic_lines` and :func:`source_harmonic_relative_dbc`;
* ``rbw_merged``: a known line too close for the resolution filter to separate.

The relations are the classic dynamic-range relations of a swept spectrum analyzer (from
memory: Keysight application note 150, "Spectrum Analysis Basics", its chapter on dynamic
range; the same in Engelson, "Modern Spectrum Analyzer Theory and Applications"):

* DANL = kT0 + NF + attenuation + 10·log10(RBW), kT0 = −173.98 dBm/Hz;
* a 2nd-order product at the first mixer: P_i + P_j − SOI (two tones), 2·P − SHI for a
  harmonic, SHI = SOI + 6.02 dB; referred to the input it drops 1 dB per dB of attenuation;
* a 3rd-order product: 2·P_i + P_j − 2·TOI, 3·P − 2·TOI − 9.54 dB for the harmonic; it drops
  2 dB per dB of attenuation;
* reciprocal mixing: the neighbour's level plus the phase noise density at the offset, over
  the noise bandwidth of the filter.

Levels are powers (incoherent sums); the predictions pick settings and raise risks, they do not
correct readings.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np
from numpy.typing import NDArray

FloatArray = NDArray[np.float64]

#: kT0 at 290 K, dBm/Hz: 10·log10(1.380649e-23 · 290 / 1e-3) (Pozar, noise chapter).
KT0_DBM_PER_HZ = 10.0 * math.log10(1.380649e-23 * 290.0 / 1e-3)
#: Noise bandwidth of a Gaussian resolution filter per RBW (−3 dB at ±RBW/2):
#: sqrt(pi / (4·ln 2)) = 1.0645 (derived from the filter shape).
ENBW_PER_RBW = math.sqrt(math.pi / (4.0 * math.log(2.0)))
#: IM2 (f1 ± f2) sits 20·log10(2) above the 2nd harmonic for equal tones: SHI = SOI + 6.02 dB.
SHI_ABOVE_SOI_DB = 20.0 * math.log10(2.0)
#: The 3rd harmonic sits 20·log10(3) below IM3 for equal tones.
H3_BELOW_IM3_DB = 20.0 * math.log10(3.0)
#: Compression of a small signal counted as a risk, dB (seam A).
COMPRESSION_RISK_DB = 0.1
#: Only the strongest lines make first-mixer products worth predicting.
DISTORTION_LINES = 8
#: Two frequencies closer than this count as the same line, Hz.
SAME_LINE_HZ = 1.0
#: A line within this many RBWs of the product cannot be separated from it (seam A).
MERGE_RBW = 3.0

RISKS: tuple[str, ...] = (
    "analyzer_compression", "analyzer_distortion", "source_harmonic", "reciprocal_mixing",
    "noise", "rbw_merged",
)
"""The fixed vocabulary of risks (seam A)."""


@dataclass(frozen=True)
class AnalyzerSpecs:
    """The analyzer's stated front end (see the bench file's ``[analyzer]`` table).

    ``phase_noise``: (offset Hz, dBc/Hz) pairs, offsets rising. ``assumed``: names of the
    figures the bench file did not state (their values are the conservative defaults).
    """

    noise_figure_db: float
    toi_dbm: float
    soi_dbm: float
    p1db_dbm: float
    overload_dbm: float
    phase_noise: tuple[tuple[float, float], ...]
    assumed: frozenset[str] = frozenset()

    @property
    def shi_dbm(self) -> float:
        return self.soi_dbm + SHI_ABOVE_SOI_DB


@dataclass(frozen=True)
class Line:
    """One line at the analyzer input: frequency (Hz), level (dBm), what it is."""

    freq_hz: float
    level_dbm: float
    label: str


@dataclass(frozen=True)
class Prediction:
    """The numbers behind a reading's risks (dBm at the analyzer input; None: not predicted)."""

    product_dbm: float | None
    noise_dbm: float | None
    analyzer_distortion_dbm: float | None
    source_harmonic_dbm: float | None
    reciprocal_dbm: float | None
    mixer_level_dbm: float | None
    compression_db: float | None
    risks: tuple[str, ...] = ()
    reasons: tuple[str, ...] = field(default=(), compare=False)
    target_dbm: float | None = None
    """For a product of unknown level: the weakest level the reading is set to see, which
    the margins are counted from (``product_dbm`` is then None)."""

    def as_dict(self) -> dict[str, float | None]:
        """The ``predicted`` table of seam A (finite numbers or None)."""
        out: dict[str, float | None] = {}
        for key in ("product_dbm", "noise_dbm", "analyzer_distortion_dbm",
                    "source_harmonic_dbm", "reciprocal_dbm", "mixer_level_dbm",
                    "compression_db", "target_dbm"):
            v = getattr(self, key)
            if key == "target_dbm" and v is None:
                continue
            out[key] = round(float(v), 3) if v is not None and math.isfinite(v) else None
        return out


# -- level maths --------------------------------------------------------------------------------


def power_sum_dbm(levels_dbm: Sequence[float] | FloatArray) -> float:
    """Total power of incoherent components, dBm (−inf for none)."""
    arr = np.asarray(levels_dbm, dtype=float)
    if arr.size == 0:
        return -math.inf
    top = float(np.max(arr))
    if not math.isfinite(top):
        return top
    return top + 10.0 * math.log10(float(np.sum(10.0 ** ((arr - top) / 10.0))))


def danl_dbm(noise_figure_db: float, attenuation_db: float, rbw_hz: float) -> float:
    """The analyzer's displayed average noise level: kT0 + NF + attenuation + 10·log10(RBW)."""
    return KT0_DBM_PER_HZ + noise_figure_db + attenuation_db + 10.0 * math.log10(rbw_hz)


def part_noise_dbm(noise_figure_db: float, gain_db: float, loss_db: float,
                   rbw_hz: float) -> float:
    """The part's output noise in the filter's noise bandwidth at the analyzer input, above the
    kT0 the analyzer's DANL already holds: kT0·(F·G − 1)/L (Friis; Pozar, noise chapter)."""
    fg_db = noise_figure_db + gain_db
    # F·G − 1 in dB; far above 1 it is F·G itself (and 10^x would overflow for absurd gains)
    excess_db = fg_db if fg_db > 100.0 else (
        10.0 * math.log10(10.0 ** (fg_db / 10.0) - 1.0) if fg_db > 0 else -math.inf)
    return KT0_DBM_PER_HZ + excess_db - loss_db + 10.0 * math.log10(ENBW_PER_RBW * rbw_hz)


def phase_noise_dbc_hz(profile: Sequence[tuple[float, float]], offset_hz: float) -> float:
    """L(offset) from (offset, dBc/Hz) points: straight lines on a log-offset axis between
    them, held flat outside them (flat below the first point is the safe side)."""
    if not profile:
        return -math.inf
    offs = [o for o, _ in profile]
    if offset_hz <= offs[0]:
        return profile[0][1]
    if offset_hz >= offs[-1]:
        return profile[-1][1]
    x = math.log10(offset_hz)
    return float(np.interp(x, np.log10(offs), [v for _, v in profile]))


def compression_db(mixer_total_dbm: float, p1db_dbm: float) -> float:
    """Small-signal gain drop of the first mixer on its total power, dB (≥ 0).

    Soft law 1/(1 + P/Pc), 1 dB at P = P1dB: Pc = P1dB/(10^0.1 − 1) (common practice, no
    source: a smooth model of gain compression that meets the stated P1dB).
    """
    if not math.isfinite(mixer_total_dbm):
        return 0.0
    pc_dbm = p1db_dbm - 10.0 * math.log10(10.0**0.1 - 1.0)
    x_db = mixer_total_dbm - pc_dbm
    if x_db > 100.0:  # 1 + P/Pc is P/Pc itself (and 10^x would overflow for absurd levels)
        return x_db
    return 10.0 * math.log10(1.0 + 10.0 ** (x_db / 10.0))


@dataclass(frozen=True)
class DistortionTable:
    """The analyzer's own products of a port's lines at 0 dB attenuation (input-referred).

    At attenuation A a product of order k reads ``level0_dbm − (k − 1)·A`` at the input.
    """

    freq_hz: FloatArray
    level0_dbm: FloatArray
    order: FloatArray

    def at(self, freq_hz: float, attenuation_db: float, tolerance_hz: float) -> float:
        """Total of the products within ``tolerance_hz`` of ``freq_hz``, dBm (−inf: none)."""
        if self.freq_hz.size == 0:
            return -math.inf
        hit = np.abs(self.freq_hz - freq_hz) <= tolerance_hz
        if not hit.any():
            return -math.inf
        return power_sum_dbm(self.level0_dbm[hit] - (self.order[hit] - 1.0) * attenuation_db)


def distortion_table(lines: Sequence[Line], specs: AnalyzerSpecs) -> DistortionTable:
    """The first mixer's 2nd- and 3rd-order products of the strongest lines (module docstring
    relations), input-referred at 0 dB attenuation."""
    good = [ln for ln in lines if ln.freq_hz > 0 and math.isfinite(ln.level_dbm)]
    good.sort(key=lambda ln: ln.level_dbm, reverse=True)
    good = good[:DISTORTION_LINES]
    if not good:
        empty = np.zeros(0)
        return DistortionTable(empty, empty, empty)
    f = np.array([ln.freq_hz for ln in good])
    p = np.array([ln.level_dbm for ln in good])
    toi, soi, shi = specs.toi_dbm, specs.soi_dbm, specs.shi_dbm
    freqs = [2.0 * f, 3.0 * f]
    levels = [2.0 * p - shi, 3.0 * p - 2.0 * toi - H3_BELOW_IM3_DB]
    n = f.size
    if n > 1:
        i, j, a, b = _pair_indices(n)
        im2 = p[i] + p[j] - soi
        freqs += [f[i] + f[j], np.abs(f[i] - f[j])]
        levels += [im2, im2]
        im3 = 2.0 * p[a] + p[b] - 2.0 * toi
        freqs += [np.abs(2.0 * f[a] - f[b]), 2.0 * f[a] + f[b]]
        levels += [im3, im3]
    return DistortionTable(np.concatenate(freqs), np.concatenate(levels), _distortion_orders(n))


@lru_cache(maxsize=DISTORTION_LINES + 1)
def _pair_indices(n: int) -> tuple[NDArray[np.intp], ...]:
    """Index pairs of :func:`distortion_table` for n lines: (i < j) for the 2nd-order
    products, (a ≠ b) for the 3rd-order ones."""
    i, j = np.triu_indices(n, k=1)
    a, b = np.nonzero(~np.eye(n, dtype=bool))
    for index in (i, j, a, b):
        index.flags.writeable = False
    return i, j, a, b


@lru_cache(maxsize=DISTORTION_LINES + 1)
def _distortion_orders(n: int) -> FloatArray:
    """The order column of :func:`distortion_table` for n lines (read-only)."""
    pairs = n * (n - 1) // 2
    orders = np.concatenate([np.full(n, 2.0), np.full(n, 3.0), np.full(2 * pairs, 2.0),
                             np.full(4 * pairs, 3.0)])
    orders.flags.writeable = False
    return orders


def reciprocal_dbm(lines: Sequence[Line], freq_hz: float, rbw_hz: float,
                   profile: Sequence[tuple[float, float]]) -> float:
    """Noise that the analyzer's LO phase noise puts at ``freq_hz`` from every other line:
    Σ P_line + L(|f_line − f|) + 10·log10(ENBW), dBm."""
    enbw_db = 10.0 * math.log10(ENBW_PER_RBW * rbw_hz)
    parts = [ln.level_dbm + phase_noise_dbc_hz(profile, abs(ln.freq_hz - freq_hz)) + enbw_db
             for ln in lines
             if abs(ln.freq_hz - freq_hz) >= SAME_LINE_HZ and math.isfinite(ln.level_dbm)]
    return power_sum_dbm(parts)


def skirt_db(offset_hz: float, rbw_hz: float) -> float:
    """Response of a Gaussian resolution filter (−3 dB at ±RBW/2) at ``offset_hz``, dB."""
    return -10.0 * math.log10(2.0) * (2.0 * offset_hz / rbw_hz) ** 2


def merged(lines: Sequence[Line], freq_hz: float, product_dbm: float, rbw_hz: float,
           span_hz: float, noise_margin_db: float) -> bool:
    """True when another line is within 3 RBW, or inside the span with its filter skirt
    less than the noise margin below the product at the product's frequency (seam A)."""
    for ln in lines:
        off = abs(ln.freq_hz - freq_hz)
        if off < SAME_LINE_HZ or not math.isfinite(ln.level_dbm):
            continue
        if off < MERGE_RBW * rbw_hz:
            return True
        if off <= span_hz / 2.0 and \
                ln.level_dbm + skirt_db(off, rbw_hz) > product_dbm - noise_margin_db:
            return True
    return False


# -- source harmonics ---------------------------------------------------------------------------
#
# Where a source's harmonics land at the part's output, and how strong they are there. The
# frequency plan is m·f_LO + n·f_RF (an output line of LO order m and RF order n sits at
# |m·f_LO + n·f_RF|); a source harmonic at h·f changes the part's LO or RF content at order h.
# Levels are bounds on the safe side (the level of each route's line is at most this), each
# derived below or marked as an assumption.

#: Highest LO order through which source harmonics are followed (mxn tables read up to about
#: order 7).
HARMONIC_MAX_LO_ORDER = 7
#: Input-referred second-order intercept of the part's input stage when nothing states it,
#: dBm: pessimistic for a balanced (differential) input stage (common practice, no source).
ASSUMED_PART_IIP2_DBM = 30.0


@dataclass(frozen=True)
class HarmonicTone:
    """A source tone at the part: frequency (Hz), power (dBm at its port), its source's
    harmonics (dBc, 2nd up) and a label."""

    freq_hz: float
    power_dbm: float
    harmonics_dbc: tuple[float, ...]
    label: str


def lo_order_conversion_db(m: int, gain_db: float, even_conversion_db: float) -> float:
    """Conversion (output line over the RF input, dB) through LO order ``m`` with a clean LO.

    Odd m: the hard-switched quad's square-wave switching function has odd Fourier lines of
    amplitude 1/m of the fundamental (square-wave Fourier series), so gain − 20·log10 m.
    Even m (and m = 0, straight through): a balanced quad makes even lines only from its
    asymmetry; an asymmetry that moves the switching instants by ε makes every even line
    (DC included) about 2ε (Fourier series of a pulse train of duty cycle 1/2 + ε/π), so they
    are as strong as the RF→IF feedthrough the part's isolation states: ``even_conversion_db``
    (−isolation, or with no stated isolation the wanted gain or 0 dB, whichever is larger).
    """
    if m % 2:
        return gain_db - 20.0 * math.log10(abs(m))
    return even_conversion_db


def _both_sides(m: int, n: int, f_lo_hz: float, f_hz: float) -> list[float]:
    """|m·f_LO ± n·f| for m ≥ 0, n ≥ 1 (one line for m = 0)."""
    if m == 0:
        return [n * f_hz]
    return [abs(n * f_hz - m * f_lo_hz), n * f_hz + m * f_lo_hz]


def source_harmonic_lines(
    f_lo_hz: float, lo_harmonics_dbc: Sequence[float], tones: Sequence[HarmonicTone],
    gain_db: float, even_conversion_db: float, iip2_dbm: float = ASSUMED_PART_IIP2_DBM,
    max_lo_order: int = HARMONIC_MAX_LO_ORDER,
) -> list[Line]:
    """Lines the sources' harmonics make at the part's output port, dBm there (absolute
    bounds; see :func:`source_harmonic_relative_dbc` for those that only scale a line the
    part makes anyway). With R_k the RF source's k-th harmonic (dBc) and L_h the LO's:

    * **RF harmonic with the LO** (k ≥ 2, any LO order m): at |m·f_LO ± k·f_RF|, the part's
      conversion through LO order m (:func:`lo_order_conversion_db`) of P + R_k: the harmonic
      enters the transconductor like a tone of its own;
    * **LO harmonic as an LO** (even h, even m including 0, RF order k ≥ 1 with R_1 = 0 dBc):
      at |m·f_LO ± k·f_RF|, P + R_k + gain + L_h. Derivation (a bound): an LO harmonic of
      relative amplitude a moves each zero crossing of the hard-switched LO by at most a
      radian, an impulse train of weight ≤ 2a at twice the LO rate, whose Fourier lines are
      ≤ a times the switching fundamental at every order of h's parity. So every even-order
      line, the RF feedthrough (m = 0) among them, can be as strong as the wanted product
      plus L_h. (Odd h only scales the part's own odd-order lines:
      :func:`source_harmonic_relative_dbc`.)
    * **harmonic with the fundamental in the input stage** (k ≥ 2): the second-order
      product of the harmonic and the fundamental at (k + 1)·f, and for k ≥ 3 at (k − 1)·f,
      is P + R_k + P − IIP2 (two-tone second-order product, Razavi, RF Microelectronics,
      nonlinearity chapter), then converted through any LO order like the RF. (At f itself,
      k = 2, it scales the part's own lines: :func:`source_harmonic_relative_dbc`.)
    """
    out: list[Line] = []

    def add(freqs: list[float], level: float, label: str) -> None:
        for f in freqs:
            if f > 0 and math.isfinite(level):
                out.append(Line(f, level, label))

    even_lo = [(h, dbc) for h, dbc in enumerate(lo_harmonics_dbc, start=2) if h % 2 == 0]
    for tone in tones:
        p, f = tone.power_dbm, tone.freq_hz
        orders = [(1, 0.0), *enumerate(tone.harmonics_dbc, start=2)]
        for m in range(max_lo_order + 1):
            conv = lo_order_conversion_db(m, gain_db, even_conversion_db)
            for k, r_k in orders:
                if k >= 2:
                    add(_both_sides(m, k, f_lo_hz, f), p + r_k + conv,
                        f"{tone.label} harmonic {k} x lo order {m}")
                    second = p + r_k + p - iip2_dbm
                    for n in {k + 1, k - 1} - {0, 1}:
                        add(_both_sides(m, n, f_lo_hz, f), second + conv,
                            f"{tone.label} harmonic {k} with its fundamental, x lo order {m}")
                if m % 2 == 0:
                    for h, l_h in even_lo:
                        add(_both_sides(m, k, f_lo_hz, f), p + r_k + gain_db + l_h,
                            f"lo harmonic {h} as lo order {m} x {tone.label} order {k}")
    return out


def source_harmonic_relative_dbc(
    m: int, tone_orders: Sequence[int], lo_harmonics_dbc: Sequence[float],
    tones: Sequence[HarmonicTone], iip2_dbm: float = ASSUMED_PART_IIP2_DBM,
) -> float:
    """How strong, relative to the part's own line of LO order ``m`` and RF orders
    ``tone_orders`` (one per tone), the sources' harmonics can make a contribution that adds
    to exactly that line, dBc (−inf: none). Two routes only scale a line the part makes:

    * an odd LO harmonic h on an odd LO order m: the switching function's line m gains up to
      a = L_h times its fundamental (the crossing bound of :func:`source_harmonic_lines`),
      while the part's own line m is 1/m of the fundamental: L_h + 20·log10 m;
    * the RF 2nd harmonic with its fundamental in the input stage, on a line of RF order ±1:
      the second-order product at f is P + R_2 + P − IIP2, against the linear P: R_2 + P − IIP2
      (Razavi, nonlinearity chapter).
    """
    terms: list[float] = []
    if m % 2:
        terms += [l_h + 20.0 * math.log10(abs(m))
                  for h, l_h in enumerate(lo_harmonics_dbc, start=2) if h % 2]
    for n, tone in zip(tone_orders, tones, strict=False):
        if abs(n) == 1 and tone.harmonics_dbc:
            terms.append(tone.harmonics_dbc[0] + tone.power_dbm - iip2_dbm)
    return power_sum_dbm(terms)
