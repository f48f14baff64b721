"""The noise-figure reading's analyzer settings, its automatic attenuation and its duration.

A ``noise_figure`` reading (:mod:`sweeprig.engine.noise_figure`) reads the noise power at the
part's output with the noise source cold and hot, then both again with
``compression_check_db`` more input attenuation (the hot-source compression check), and the
first reading at each IF and attenuation also runs the system calibration (the noise source
straight into the receive path: one cold and one hot reading). Its settings are the
:class:`NoiseSettings`; an explicit sequence setting (``rbw``, ``averages``, ``attenuation``)
wins, ``"auto"`` or nothing takes the defaults below and the automatic attenuation.

**Automatic attenuation** (:func:`plan_noise_attenuation`). Two demands pull apart:

* the analyzer's own noise must not dominate: its displayed noise at attenuation A,
  DANL = kT0 + NF_sa + A + 10·log10(RBW) (:func:`sweeprig.plan.margins.danl_dbm`), must leave
  the part's cold output noise at least :data:`NOISE_OVER_ANALYZER_DB` above it (the analysis
  flags under :data:`sweeprig.analysis.noise_figure.MIN_DUT_OVER_RECEIVER_DB`; 3 dB more here
  to stay clear of the flag, common practice, no source);
* the hot source must not compress the first mixer: the part's hot output noise is wideband,
  so its total over :data:`NOISE_BAND_HZ` plus the LO leaking to the output reach the first
  mixer, whose small-signal gain drop (:func:`sweeprig.plan.margins.compression_db`) must stay
  under :data:`HOT_COMPRESSION_LIMIT_DB` and its total under the overload level.

The part's output noise density at the analyzer input, relative to kT0 (Friis; Pozar,
*Microwave Engineering*, noise chapter; the DSB picture of :mod:`sweeprig.sim.noise_source`):
cold ``(F·G − 1)/L`` above the kT0 the DANL holds (:func:`sweeprig.plan.margins.part_noise_dbm`),
hot ``(F·G + ENR·2G)/L`` (the source's excess enters in the signal and the image band, equal
gains assumed). The lowest attenuation, in 2 dB steps, free of compression is chosen; when the
analyzer's noise then dominates, no attenuation satisfies both, and the reading carries the
risk ``noise`` (or ``analyzer_compression`` when even the highest attenuation compresses),
which ``check`` and ``plan`` report and ``on_risk = "refuse"`` refuses before any RF. Compression
is avoided first because it biases Y (uncorrectable), while the analyzer's noise is corrected
by the second-stage correction at the cost of uncertainty.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

from sweeprig.plan import margins as mg

#: Sweep time per sweep ≈ K·span/RBW² and the shortest sweep, s (the planner's own rule,
#: :mod:`sweeprig.plan.readings`: common practice, no single source).
SWEEP_TIME_K = 2.5
MIN_SWEEP_S = 1e-3
#: A noise source settles within milliseconds of its drive switching (common practice, no
#: source); the wait after each switch, s.
SWITCH_SETTLE_S = 0.05
#: The part's cold output noise must stand this far above the analyzer's own (dB): the
#: analysis's 3 dB flag threshold plus 3 dB (common practice, no source).
NOISE_OVER_ANALYZER_DB = 6.0
#: Largest gain drop of the first mixer allowed on the hot reading, dB. A compression c of the
#: hot reading moves NF by about c·Y/(Y − 1) (derived from F = ENR/(Y − 1)): 0.05 dB keeps it
#: under a quarter of the issue's 0.2 dB accuracy for Y above 3 dB.
HOT_COMPRESSION_LIMIT_DB = 0.05
#: Band over which the part's wideband output noise reaches the analyzer's first mixer, Hz:
#: assumed its whole input range (13.6 GHz, the simulated analyzer's; an assumption on the
#: safe side for compression, since a real part's output port rolls the noise off).
NOISE_BAND_HZ = 13.6e9
#: Attenuation steps the choice walks, dB (the planner's 2 dB steps, 0 to 70 dB).
ATTENUATION_STEP_DB = 2.0
MAX_ATTENUATION_DB = 70.0
#: SCPI commands of one noise reading (centre, span, RBW, attenuation, reference level,
#: averages, points, detector twice, start, completion, trace, overload, sweep time) and of
#: one switch of the source (current limit, voltage, output, error queue, read-back).
COMMANDS_PER_READ = 14
COMMANDS_PER_SWITCH = 5


@dataclass(frozen=True)
class NoiseSettings:
    """Analyzer settings for noise readings: RBW (Hz), span in RBWs, trace points, sweeps
    averaged, input attenuation (dB), and the extra attenuation of the compression check (dB,
    0: no check)."""

    rbw_hz: float = 3e6
    span_rbw: float = 10.0
    points: int = 1001
    averages: int = 20
    attenuation_db: float = 0.0
    compression_check_db: float = 10.0

    @property
    def span_hz(self) -> float:
        return self.span_rbw * self.rbw_hz

    @property
    def sweep_time_s(self) -> float:
        """One sweep: K·span/RBW², at least 1 ms, s."""
        return max(SWEEP_TIME_K * self.span_hz / self.rbw_hz**2, MIN_SWEEP_S)

    @property
    def read_time_s(self) -> float:
        """One noise reading: all its averaged sweeps, s."""
        return self.sweep_time_s * max(1, self.averages)

    @property
    def reads_per_point(self) -> int:
        """Cold and hot, and both again with more attenuation when the check is on."""
        return 4 if self.compression_check_db > 0 else 2


@dataclass(frozen=True)
class NoiseTime:
    """Predicted time of noise readings, s: sweeps, settling after the source switches, and
    the number of SCPI commands (the caller prices them)."""

    sweep_s: float
    settle_s: float
    commands: int


def point_time(settings: NoiseSettings) -> NoiseTime:
    """One point's hot/cold readings: ``reads_per_point`` readings and two switches (hot,
    then cold again)."""
    reads = settings.reads_per_point
    return NoiseTime(reads * settings.read_time_s, 2 * SWITCH_SETTLE_S,
                     reads * COMMANDS_PER_READ + 2 * COMMANDS_PER_SWITCH)


def calibration_time(settings: NoiseSettings) -> NoiseTime:
    """One system calibration at one IF and attenuation: a cold and a hot reading, two
    switches, and the switch routes there and back (four commands)."""
    return NoiseTime(2 * settings.read_time_s, 2 * SWITCH_SETTLE_S,
                     2 * COMMANDS_PER_READ + 2 * COMMANDS_PER_SWITCH + 4)


@dataclass(frozen=True)
class NoisePlan:
    """The settings of one noise reading and what is predicted at them (dBm at the analyzer
    input): the part's cold noise and the analyzer's in the RBW, the hot total at the first
    mixer and its compression (dB); ``risks``/``reasons`` as the planner's."""

    settings: NoiseSettings
    part_cold_dbm: float
    analyzer_dbm: float
    hot_mixer_dbm: float
    compression_db: float
    risks: tuple[str, ...] = ()
    reasons: tuple[str, ...] = ()
    automatic: bool = True

    def prediction(self) -> mg.Prediction:
        """The planner's :class:`~sweeprig.plan.margins.Prediction` of this reading."""
        return mg.Prediction(product_dbm=self.part_cold_dbm, noise_dbm=self.analyzer_dbm,
                             analyzer_distortion_dbm=None, source_harmonic_dbm=None,
                             reciprocal_dbm=None, mixer_level_dbm=self.hot_mixer_dbm,
                             compression_db=self.compression_db, risks=self.risks,
                             reasons=self.reasons)


def _db_sum(*levels_db: float) -> float:
    """The power sum of levels in dB, taken relative to the largest (no overflow)."""
    top = max(levels_db)
    return top + 10.0 * math.log10(sum(10.0 ** ((x - top) / 10.0) for x in levels_db))


def plan_noise_attenuation(
    settings: NoiseSettings, specs: mg.AnalyzerSpecs, *, part_nf_db: float, gain_db: float,
    loss_db: float, enr_db: float, lo_leak_dbm: float = -math.inf,
    attenuation_db: float | None = None, band_hz: float = NOISE_BAND_HZ,
    assumed: str = "",
) -> NoisePlan:
    """Settings with the attenuation chosen (module docstring), or ``attenuation_db`` kept as
    stated (its risks predicted the same way). ``part_nf_db``: the part's noise figure;
    ``gain_db``: its gain; ``loss_db``: the output path's loss to the analyzer; ``enr_db``:
    the source's ENR (the largest over the signal and image bands: the safe side);
    ``lo_leak_dbm``: the LO at the analyzer input (dBm). ``assumed``: what the prediction
    assumed (said with its risks)."""
    rbw = settings.rbw_hz
    part_cold = mg.part_noise_dbm(part_nf_db, gain_db, loss_db, rbw)
    fg_db = part_nf_db + gain_db
    hot_excess_db = _db_sum(fg_db, enr_db + gain_db + 10.0 * math.log10(2.0)) - loss_db
    hot_wide_dbm = _db_sum(mg.KT0_DBM_PER_HZ + hot_excess_db + 10.0 * math.log10(band_hz),
                           lo_leak_dbm) if math.isfinite(lo_leak_dbm) else \
        mg.KT0_DBM_PER_HZ + hot_excess_db + 10.0 * math.log10(band_hz)

    def at(att: float) -> tuple[bool, bool, float, float, float]:
        """(noise ok, compression ok, analyzer noise dBm, mixer dBm, compression dB)."""
        danl = mg.danl_dbm(specs.noise_figure_db, att, rbw)
        over = _db_sum(danl, part_cold) - danl if math.isfinite(part_cold) else 0.0
        mixer = hot_wide_dbm - att
        comp = mg.compression_db(mixer, specs.p1db_dbm)
        comp_ok = comp <= HOT_COMPRESSION_LIMIT_DB and mixer <= specs.overload_dbm
        return over >= NOISE_OVER_ANALYZER_DB, comp_ok, danl, mixer, comp

    automatic = attenuation_db is None
    if automatic:
        steps = int(MAX_ATTENUATION_DB / ATTENUATION_STEP_DB)
        candidates = [k * ATTENUATION_STEP_DB for k in range(steps + 1)]
        att = next((a for a in candidates if at(a)[1]), MAX_ATTENUATION_DB)
    else:
        att = float(attenuation_db)  # type: ignore[arg-type]
    noise_ok, comp_ok, danl, mixer, comp = at(att)
    risks: list[str] = []
    reasons: list[str] = []
    how = ("the stated attenuation" if not automatic else
           "the lowest attenuation free of compression" if comp_ok else "the highest attenuation")
    if not comp_ok:
        risks.append("analyzer_compression")
        reasons.append(
            f"the hot source's wideband noise ({mixer:.1f} dBm at the first mixer with {att:g} "
            f"dB attenuation) compresses the analyzer by {comp:.2f} dB"
            + (" even at the highest attenuation" if automatic else "")
            + f" (limit {HOT_COMPRESSION_LIMIT_DB:g} dB)")
    if not noise_ok:
        risks.append("noise")
        reasons.append(
            f"the analyzer's own noise ({danl:.1f} dBm in {rbw:g} Hz at {att:g} dB, {how}) is "
            f"not {NOISE_OVER_ANALYZER_DB:g} dB under the part's cold output noise "
            f"({part_cold:.1f} dBm)"
            + ("; no attenuation keeps the analyzer's noise low and the hot source out of "
               "compression: add a low-noise preamplifier ahead of the analyzer or lower the "
               "path loss" if automatic else ""))
    if reasons and assumed:
        reasons.append(assumed)
    return NoisePlan(replace(settings, attenuation_db=att), part_cold, danl, mixer, comp,
                     tuple(sorted(risks)), tuple(reasons), automatic)
