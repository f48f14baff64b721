"""Noise figure by the Y-factor method: the relations, the second-stage correction, the
sideband conversion, the flags and the uncertainty budget. Pure functions, SI and dB.

Relations (each checked in tests/analysis/test_noise_figure.py against its source):

* Noise factor F = 1 + Te/T0, NF = 10·log10 F, T0 = 290 K (IEEE definition).
* Y-factor: Y = N_hot/N_cold. With ENR = (T_hot − T0)/T0 (a ratio) and the source's cold
  temperature Tc, Te = (T_hot − Y·Tc)/(Y − 1), so
  F = (ENR − Y·(Tc/T0 − 1))/(Y − 1), which is ENR/(Y − 1) when Tc = T0 (Pozar, *Microwave
  Engineering*, noise chapter; the field notes' derivation).
* Cascade (Friis, Proc. IRE 1944): F12 = F1 + (F2 − 1)/G1, so the second-stage correction is
  F1 = F12 − (F2 − 1)/G1, with F2 the receive path's noise factor from the system calibration
  (the noise source straight into the receive path) and G1 the part's gain from the same
  hot/cold readings: the hot−cold difference grows with the gain, ΔN ∝ k·T0·ENR·B·G, so
  G1 = (ΔN12/ENR_part)/(ΔN2/ENR_cal) (the bandwidth and the receiver's gain cancel).
* Sidebands: a double-balanced mixer converts the noise source's noise from the signal and
  the image band to one IF, so the Y-factor method measures the double-sideband figure; the
  single-sideband one is F_SSB = F_DSB·(1 + G_image/G_signal), +3.01 dB with equal gains
  (field notes). G1 above is then the sum of both bands' gains. The image-to-signal ratio
  comes from two readings (the source at the image and at the signal frequency); a wanted
  reading near its noise floor, or an image response far above the wanted one, makes the
  ratio (and with it the SSB figure) meaningless, which the flag ``image_ratio_doubtful``
  says (:func:`image_ratio_doubtful`).

Uncertainty (the GUM's root sum of squares, :mod:`sweeprig.analysis.uncertainty`): the terms
are the input quantities of the measurement model above, as JCGM 100:2008 4.1.1-4.1.3 builds a
budget (every quantity the result is computed from, plus the influence quantities acting on
them): the ENR of the source (from its table), the hot and cold noise readings of the part and
of the system calibration (their averaged jitter, Type A, and the display linearity between the
hot and cold levels), the cold temperature, and the mismatch at the source-part connection that
the ENR calibration did not see. That noise-temperature guides of national laboratories list
the same terms is from memory (not checked against a text). The sensitivity coefficients are
evaluated numerically from the measurement model by central differences (GUM 5.1.3 allows c_i
to be evaluated numerically).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field

from sweeprig.analysis.uncertainty import (
    Budget,
    Contribution,
    InstrumentSpecs,
    mismatch_half_width_db,
)

T0_K = 290.0
#: Y below which a reading is flagged: every error of the noise powers is multiplied by
#: Y/(Y − 1) in F, five times at Y = 1.25 (0.97 dB) (derived; the threshold is common
#: practice, no source).
MIN_Y_DB = 10.0 * math.log10(1.25)
#: The part's cold output noise should stand at least this far above the receive path's own
#: noise, else the second-stage correction dominates the figure (common practice, no source).
MIN_DUT_OVER_RECEIVER_DB = 3.0
#: Hot−cold difference change with 10 dB more input attenuation above which the hot reading
#: counts as compressed (common practice, no source), on top of 3 σ of its jitter.
COMPRESSION_STEP_DB = 0.1
#: A line in the noise span stands out from RMS-detected noise by more than this many
#: standard deviations of one trace point (plus 0.5 dB) → an interferer (common practice).
INTERFERER_SIGMAS = 6.0
#: The SSB conversion's image-to-signal ratio is doubtful when the wanted (signal-frequency)
#: reading it comes from stood less than this above its noise floor (dB): the ratio then
#: holds the floor, not the part's response (common practice, no source; the analysis' own
#: noise margin, :data:`sweeprig.analysis.validity.NOISE_MARGIN_DB`).
IMAGE_WANTED_NOISE_MARGIN_DB = 6.0
#: ...or when the ratio itself is above this (dB): a mixer whose image response stands 10 dB
#: above its wanted response says the measurement is wrong, not the part (common practice,
#: no source).
MAX_IMAGE_TO_SIGNAL_DB = 10.0
#: The cold temperature's uncertainty when it is the measured ambient, K (± rectangular; a
#: room thermometer near the source, from memory).
COLD_TEMPERATURE_HALF_WIDTH_K = 1.0
#: The noise source's reflection |Γ| (on and off alike) when the bench states none: VSWR 1.15,
#: a typical diode source (assumption, no source).
NOISE_SOURCE_MATCH = 0.07

FLAG_TEXT: Mapping[str, str] = {
    "y_too_small": "Y too small for the stated accuracy",
    "analyzer_noise_dominates": "the analyzer's own noise dominates the cold reading",
    "hot_compression": "compression by the hot source",
    "interferer": "an interferer in the noise band",
    "image_ratio_doubtful": "the image-to-signal ratio of the SSB conversion is doubtful",
}


def db(ratio: float) -> float:
    return 10.0 * math.log10(ratio) if ratio > 0 else -math.inf


def lin(value_db: float) -> float:
    return 10.0 ** (value_db / 10.0)


def noise_factor_from_y(y: float, enr: float, cold_k: float) -> float:
    """F from Y (ratio), ENR (ratio) and the cold temperature (K):
    (ENR − Y·(Tc/T0 − 1))/(Y − 1) (see the module docstring). NaN when Y ≤ 1."""
    if not y > 1.0:
        return math.nan
    return (enr - y * (cold_k / T0_K - 1.0)) / (y - 1.0)


def second_stage_corrected(f12: float, f2: float, g1: float) -> float:
    """F1 = F12 − (F2 − 1)/G1 (Friis, 1944)."""
    return f12 - (f2 - 1.0) / g1 if g1 > 0 else math.nan


def y_factor_gain(dn_part_mw: float, dn_cal_mw: float, enr_part: float,
                  enr_cal: float) -> float:
    """The part's gain (ratio) from the hot−cold differences of the measurement and of the
    system calibration: (ΔN12/ENR_part)/(ΔN2/ENR_cal)."""
    if not (dn_cal_mw > 0 and enr_part > 0):
        return math.nan
    return (dn_part_mw / enr_part) / (dn_cal_mw / enr_cal)


def ssb_from_dsb_db(nf_dsb_db: float, image_to_signal_db: float) -> float:
    """NF_SSB = NF_DSB + 10·log10(1 + G_image/G_signal) (field notes: +3.01 dB when equal)."""
    return nf_dsb_db + db(1.0 + lin(image_to_signal_db))


def image_ratio_doubtful(image_to_signal_db: float,
                         wanted_over_floor_db: float | None = None) -> bool:
    """Whether a measured image-to-signal ratio (dB) is doubtful: above
    :data:`MAX_IMAGE_TO_SIGNAL_DB`, or its wanted reading stood less than
    :data:`IMAGE_WANTED_NOISE_MARGIN_DB` above its noise floor (``wanted_over_floor_db``;
    None or NaN: the floor was not recorded, so it is not counted). A ratio that is not a
    finite number is doubtful too."""
    if not math.isfinite(image_to_signal_db) or image_to_signal_db > MAX_IMAGE_TO_SIGNAL_DB:
        return True
    return (wanted_over_floor_db is not None and math.isfinite(wanted_over_floor_db)
            and wanted_over_floor_db < IMAGE_WANTED_NOISE_MARGIN_DB)


@dataclass(frozen=True)
class HotCold:
    """One pair of noise readings: powers (mW, input-referred at the analyzer, any common
    reference) with the source hot and cold, the standard deviation of each reading's mean
    (relative, a ratio, e.g. 0.004 for 0.4 %), the frequency the ENR is taken at (Hz) and
    that ENR (dB) with its expanded uncertainty (k = 2, dB)."""

    hot_mw: float
    cold_mw: float
    jitter_rel: float
    enr_db: float
    enr_u_db: float

    @property
    def y(self) -> float:
        return self.hot_mw / self.cold_mw


@dataclass(frozen=True)
class NoiseFigureResult:
    """The noise figure of one point and what stands behind it.

    ``nf_db``: the figure reported, of sideband ``sideband`` ("dsb" or "ssb");
    ``nf_dsb_db``; ``nf_ssb_db`` (None when the image gain is unknown and SSB was not asked
    for); ``gain_db``: the Y-factor gain estimate (both bands' gains summed);
    ``y_db`` / ``y_cal_db``: the measured Y of the part and of the system calibration;
    ``receiver_nf_db``: the receive path's noise figure; ``dut_over_receiver_db``: the part's
    cold output noise over the receive path's own; ``budget``; ``flags``: causes (keys of
    :data:`FLAG_TEXT`)."""

    nf_db: float
    sideband: str
    nf_dsb_db: float
    nf_ssb_db: float | None
    gain_db: float
    y_db: float
    y_cal_db: float
    receiver_nf_db: float
    dut_over_receiver_db: float
    budget: Budget
    flags: tuple[str, ...] = field(default=())

    @property
    def expanded_db(self) -> float:
        return self.budget.expanded_db


def _model(part: HotCold, cal: HotCold, cold_k: float, image_to_signal_db: float | None,
           sideband: str) -> Callable[[Mapping[str, float]], float]:
    """The measurement model NF(inputs), inputs as dB offsets on the readings and ENRs (and K
    on the cold temperature), for the numerical sensitivity coefficients."""

    def nf(d: Mapping[str, float]) -> float:
        g = d.get
        enr_p = lin(part.enr_db + g("enr", 0.0) + g("mismatch_source", 0.0))
        enr_c = lin(cal.enr_db + g("enr_cal", 0.0))
        hot12 = part.hot_mw * lin(g("hot", 0.0) + g("linearity", 0.0))
        cold12 = part.cold_mw * lin(g("cold", 0.0))
        hot2 = cal.hot_mw * lin(g("hot_cal", 0.0) + g("linearity_cal", 0.0))
        cold2 = cal.cold_mw * lin(g("cold_cal", 0.0))
        tc = cold_k + g("cold_temperature", 0.0)
        f12 = noise_factor_from_y(hot12 / cold12, enr_p, tc)
        f2 = noise_factor_from_y(hot2 / cold2, enr_c, tc)
        g1 = y_factor_gain(hot12 - cold12, hot2 - cold2, enr_p, enr_c) * lin(
            g("mismatch_output", 0.0))
        f1 = second_stage_corrected(f12, f2, g1)
        out = db(f1) if f1 > 0 else math.nan
        if sideband == "ssb" and image_to_signal_db is not None:
            out = ssb_from_dsb_db(out, image_to_signal_db)
        return out

    return nf


def _model_image(part: HotCold, cal: HotCold, cold_k: float,
                 image_db: float) -> Callable[[Mapping[str, float]], float]:
    """NF_SSB as a function of an offset on the image-to-signal ratio (dB)."""

    def nf(d: Mapping[str, float]) -> float:
        return _model(part, cal, cold_k, image_db + d.get("image", 0.0), "ssb")({})

    return nf


def _sensitivity(model: Callable[[Mapping[str, float]], float], name: str,
                 step: float) -> float:
    up, down = model({name: step}), model({name: -step})
    if not (math.isfinite(up) and math.isfinite(down)):
        return math.nan
    return (up - down) / (2.0 * step)


def reduce_noise_figure(
    part: HotCold, cal: HotCold, *, cold_k: float, specs: InstrumentSpecs,
    sideband: str = "dsb", image_to_signal_db: float | None = None,
    cold_measured: bool = True, noise_source_match: float = NOISE_SOURCE_MATCH,
    compression_step_db: float | None = None, compression_jitter_db: float = 0.0,
    interferer_excess_db: float | None = None, interferer_sigma_db: float = 0.0,
    image_wanted_over_floor_db: float | None = None,
) -> NoiseFigureResult:
    """The noise figure of one point from the part's hot/cold readings and the system
    calibration's (see the module docstring), with its budget and flags.

    ``sideband``: "dsb" (what the method measures) or "ssb" (converted with
    ``image_to_signal_db``, 0 dB, i.e. +3.01 dB, when the image gain was not measured, which
    the budget then carries as a ±0.5 dB rectangular term). ``compression_step_db``: the
    change of the hot−cold difference with 10 dB more attenuation (None: not checked), and
    its jitter; ``interferer_excess_db``: the trace's highest point over its median in the
    noise span (None: not looked at) with one point's standard deviation;
    ``image_wanted_over_floor_db``: how far the wanted reading behind ``image_to_signal_db``
    stood above its noise floor (None: not recorded). An SSB figure converted with a measured
    ratio that :func:`image_ratio_doubtful` calls doubtful is flagged
    ``image_ratio_doubtful``.
    """
    if sideband not in ("dsb", "ssb"):
        raise ValueError(f"sideband {sideband!r} is not 'dsb' or 'ssb'")
    image_known = image_to_signal_db is not None
    image_db = image_to_signal_db if image_known else 0.0
    model = _model(part, cal, cold_k, image_db, sideband)
    nf = model({})
    dsb = _model(part, cal, cold_k, None, "dsb")({})
    enr_p, enr_c = lin(part.enr_db), lin(cal.enr_db)
    g1 = y_factor_gain(part.hot_mw - part.cold_mw, cal.hot_mw - cal.cold_mw, enr_p, enr_c)
    f2 = noise_factor_from_y(cal.y, enr_c, cold_k)

    def term(name: str, what: str, half: float, shape: str, kind: str = "B",
             origin: str = "", step: float = 0.01) -> Contribution:
        c = _sensitivity(model, name, step)
        return Contribution(name, what, half, shape, c if math.isfinite(c) else 0.0,
                            kind=kind, origin=origin)  # type: ignore[arg-type]

    jitter_db = lambda rel: 10.0 * math.log10(1.0 + rel)  # noqa: E731
    lin_spec = specs.analyzer_linearity
    terms = [
        term("enr", "ENR of the noise source at the part's input band",
             part.enr_u_db, "normal-k2", origin="ENR table (k = 2)"),
        term("enr_cal", "ENR at the receive band (system calibration)",
             cal.enr_u_db, "normal-k2", origin="ENR table (k = 2)"),
        term("mismatch_source", "mismatch between the noise source and the part's input",
             mismatch_half_width_db(noise_source_match, specs.part_match), "u-shaped",
             origin=f"|Γ| {noise_source_match:g} (source) × {specs.part_match:g} (part)"),
        term("mismatch_output", "mismatch between the part's output and the receive path "
             "(its gain estimate)",
             mismatch_half_width_db(specs.bench_match, specs.part_match), "u-shaped",
             origin=specs.match_origin),
        term("linearity", "analyzer linearity over the hot/cold step", lin_spec.half_width_db,
             lin_spec.shape, origin=lin_spec.origin),
        term("linearity_cal", "analyzer linearity over the calibration's hot/cold step",
             lin_spec.half_width_db, lin_spec.shape, origin=lin_spec.origin),
        term("cold_temperature", "cold (ambient) temperature of the source, K",
             COLD_TEMPERATURE_HALF_WIDTH_K if cold_measured else 3.0, "rectangular",
             origin="measured ambient" if cold_measured else "stated", step=0.5),
        term("hot", "jitter of the averaged hot reading", jitter_db(part.jitter_rel),
             "standard", kind="A", origin="measured"),
        term("cold", "jitter of the averaged cold reading", jitter_db(part.jitter_rel),
             "standard", kind="A", origin="measured"),
        term("hot_cal", "second-stage noise: jitter of the calibration's hot reading",
             jitter_db(cal.jitter_rel), "standard", kind="A", origin="measured"),
        term("cold_cal", "second-stage noise: jitter of the calibration's cold reading",
             jitter_db(cal.jitter_rel), "standard", kind="A", origin="measured"),
    ]
    if sideband == "ssb" and image_known:
        # the measured image-to-signal ratio: the same source at two frequencies, each level
        # within the source's level accuracy (the bench's input_level specification)
        spec = specs.input_level
        c = _sensitivity(_model_image(part, cal, cold_k, image_db), "image", 0.01)
        terms.append(Contribution("image_gain", "image-band gain measured (source level at "
                                  "the image against the signal frequency)",
                                  spec.half_width_db, spec.shape,
                                  c if math.isfinite(c) else 0.5, origin=spec.origin))
    if sideband == "ssb" and not image_known:
        terms.append(Contribution("image_gain", "image-band gain not measured: equal gains "
                                  "assumed", 0.5, "rectangular", 1.0,
                                  origin="assumption, no source"))
    budget = Budget(tuple(terms), coverage_factor=specs.coverage_factor)
    flags = []
    if part.y < lin(MIN_Y_DB):
        flags.append("y_too_small")
    dut_over = db(part.cold_mw / cal.cold_mw)
    if dut_over < MIN_DUT_OVER_RECEIVER_DB:
        flags.append("analyzer_noise_dominates")
    if compression_step_db is not None and compression_step_db > max(
            COMPRESSION_STEP_DB, 3.0 * compression_jitter_db):
        flags.append("hot_compression")
    if interferer_excess_db is not None and interferer_excess_db > (
            INTERFERER_SIGMAS * interferer_sigma_db + 0.5):
        flags.append("interferer")
    if sideband == "ssb" and image_known and image_ratio_doubtful(
            image_db, image_wanted_over_floor_db):
        flags.append("image_ratio_doubtful")
    ssb = (ssb_from_dsb_db(dsb, image_db) if (image_known or sideband == "ssb") else None)
    return NoiseFigureResult(
        nf_db=nf, sideband=sideband, nf_dsb_db=dsb, nf_ssb_db=ssb, gain_db=db(g1),
        y_db=db(part.y), y_cal_db=db(cal.y), receiver_nf_db=db(f2),
        dut_over_receiver_db=dut_over, budget=budget, flags=tuple(flags),
    )
