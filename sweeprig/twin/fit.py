"""The twin fit: weighted least squares of the part model to a run's figures.

Residuals are ``(model − measured) / scale`` per observation (scales in
:data:`~sweeprig.twin.observations.FITTED_FIGURES`), minimised with
:func:`scipy.optimize.least_squares` (trust-region reflective, hard bounds) over the
parameters the data constrain (:mod:`sweeprig.twin.parameters`). Over two or more
temperatures the tail bias law (constant or PTAT, a choice, not a number) is decided by
fitting both and keeping the smaller residual sum.

Stages: the core parameters (gain, compression, intercepts, LO drive, band corners) are fitted
first to the figures they alone shape; then each leakage path, the even-order products
(IIP2), the supply current and the noise figure, each to its own figures with the core held
(they share no figure with each other, and moving them leaves the core's figures alone). A
later stage's intervals include the core's uncertainty, propagated (see :func:`_propagate`).

Confidence intervals: the standard least-squares covariance from the Jacobian at the
solution, ``cov = s²·(JᵀJ)⁻¹`` with ``s² = Σr²/(m − n)`` (Press, Teukolsky, Vetterling &
Flannery, Numerical Recipes, 3rd ed., §15.4–15.5: the covariance of the fitted parameters
of a linearised model, errors scaled by the fit's own residual variance), and 95 % intervals
``θ ± t(0.975, ν)·σ_θ`` (Student's t: same chapter, §15.6), ν = m − n, or, where the
bench-level terms below are part of σ_θ, the Welch–Satterthwaite effective degrees of
freedom (:func:`effective_dof`). Parameters fitted in log10
space get intervals there, so they are asymmetric in SI. A parameter that ends on a bound has
no such interval (the linearisation does not hold at a bound): it is reported as at the
bound. The intervals cover the scatter the run's own residuals show and, for the core, the
bench's level errors of :data:`BENCH_LEVEL_U_DB` each, which no residual shows
(:func:`_with_bench_levels`), and for the noise figure the LO level's and the noise
source ENR's; a larger bias common to every figure (an uncalibrated path loss) is not in
them.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, replace
from types import MappingProxyType

import numpy as np
from scipy import optimize, stats

from sweeprig.sim.mixer.part import MixerPart
from sweeprig.twin.forward import model_figures
from sweeprig.twin.observations import (
    CORE_FIGURES,
    FITTED_FIGURES,
    GROUP_FIGURES,
    Observation,
    ObservationSet,
)
from sweeprig.twin.parameters import FitParameter, catalogue

#: Residual (in scale units) given to an observation the model cannot produce (a line below
#: the model's floor): large enough to steer the fit away, finite so the solver goes on.
_MISSING_RESIDUAL = 20.0
#: Relative finite-difference step for the Jacobian: above the model's numerical grid noise
#: (about 1e-6 dB) by orders of magnitude, small against every parameter's bound range.
_DIFF_STEP = 1e-3
_CI_LEVEL = 0.95
#: Standard uncertainty (k = 1) of each of the bench's level errors the run's figures cannot
#: show, dB: the RF and LO source levels at the DUT ports and the output path to the analyzer.
#: The simulated bench's source level error lies within ±0.15 dB (rectangular: u = 0.15/√3 =
#: 0.087 dB, JCGM 100:2008 (GUM) §4.3.7); 0.1 dB stands for a bench whose path losses were
#: calibrated (common practice, no source). It stands for the noise source's ENR too (an ENR
#: table is stated to about 0.1 to 0.2 dB: from memory, no source). See
#: :func:`_with_bench_levels`.
BENCH_LEVEL_U_DB = 0.1
#: Standard uncertainty (k = 1) of the part of each source's level error that changes with
#: frequency, dB, taken as independent between the run's distinct source frequencies (a
#: ripple over a few hundred MHz, as the simulated sources' ±0.15 dB one, u = 0.087 dB by
#: GUM §4.3.7; a calibrated bench's residual ripple likewise: common practice, no source).
#: A constant offset alone cannot bend the gain across the band or the LO-drive curve;
#: this term can, which is what moved the LO port resistance and the RF high-pass corner
#: past their intervals on the full demo run (clean bench, sources' ripple on). See
#: :func:`_with_bench_levels`.
BENCH_RIPPLE_U_DB = 0.1
_LEVEL_STEP_DB = 0.1  # finite-difference step of a level error, dB
#: A parameter with at least this share of its variance from the bench's level errors, or
#: this correlation with another, is reported as weakly identified: the run alone does not
#: pin it, and a bench error shaped otherwise than a constant level offset (one that changes
#: with frequency) can move it past its interval (seen on the full demo run for the LO port
#: resistance and the RF high-pass corner). Thresholds: common practice, no source.
WEAK_LEVEL_SHARE = 0.5
WEAK_CORRELATION = 0.95
#: Figures read as output − input (an input level error δ reads them δ high; an output one too).
_GAIN_FIGURES = frozenset({"conversion_gain", "lo_drive_gain", "compression_gain"})
#: Figures read as input levels, or against the nominal input level (an input level error δ
#: reads them δ low): the input-referred points and the input→output feedthrough.
_INPUT_REFERRED = frozenset({"input_p1db", "iip3_point_low", "iip3_point_high",
                             "iip2_point_low", "iip2_point_high",
                             "rf_if_isolation", "if_rf_isolation"})
#: Figures read against the nominal LO level (an LO level error δ reads them δ low).
_LO_REFERRED = frozenset({"lo_if_isolation", "lo_rf_isolation"})
#: Figures read against the noise source's ENR (Y-factor): ``F = ENR/(Y − 1)`` when the cold
#: temperature is T0 (field notes, Y-factor), so ``NF_dB = ENR_dB − 10·log10(Y − 1)`` and an
#: ENR error δ reads them δ high. The bench's ENR is one more level it cannot show, of
#: :data:`BENCH_LEVEL_U_DB` like the others.
_ENR_REFERRED = frozenset({"noise_figure"})
#: Solver tolerances (relative change of cost, step and gradient): 1e-6 of a cost of order
#: the figure count moves no figure by a thousandth of its scale; scipy's default 1e-8 only
#: adds iterations (each a full model pass) here.
_TOL = 1e-6


@dataclass(frozen=True)
class FittedParameter:
    """A fitted parameter: SI value, its 95 % interval (``low``, ``high``; NaN when it has
    none), the template's value it started from, and whether it ended on a bound."""

    key: str
    unit: str
    display_scale: float
    value: float
    low: float
    high: float
    start: float | None
    at_bound: bool
    what: str
    #: Share of the interval's variance that is the bench's unseen level errors
    #: (:func:`_with_bench_levels`), 0 to 1; the core parameter it is most correlated with
    #: and that correlation coefficient (``cov_ij/√(cov_ii·cov_jj)``).
    level_share: float = 0.0
    correlated_with: str = ""
    correlation: float = 0.0

    @property
    def weakly_identified(self) -> bool:
        """True when the run pins this parameter only weakly: most of its variance is the
        bench's level errors (:data:`WEAK_LEVEL_SHARE`), or it trades off against another
        parameter (|ρ| ≥ :data:`WEAK_CORRELATION`)."""
        return (self.level_share >= WEAK_LEVEL_SHARE
                or abs(self.correlation) >= WEAK_CORRELATION)

    def covers(self, true_value: float) -> bool:
        """True when ``true_value`` (SI) lies in the 95 % interval."""
        return bool(self.low <= true_value <= self.high)


@dataclass(frozen=True)
class FigureResidual:
    """Model − measured over one figure name: count, mean, RMS and worst, in ``unit``."""

    name: str
    unit: str
    count: int
    mean: float
    rms: float
    worst: float


@dataclass(frozen=True)
class TwinFit:
    """A finished fit: the fitted part, its parameters, what was not constrained (key →
    why), per-figure residuals, degrees of freedom ``m − n`` and residual scale ``s``
    (in scale units: about 1 means the model fits to the figures' stated scales)."""

    part: MixerPart
    parameters: tuple[FittedParameter, ...]
    unconstrained: tuple[tuple[str, str], ...]
    residuals: tuple[FigureResidual, ...]
    observations: int
    dof: int
    residual_scale: float
    bias: str
    bias_note: str
    converged: bool

    def parameter(self, key: str) -> FittedParameter:
        """The fitted parameter with part-file key ``key``."""
        for p in self.parameters:
            if p.key == key:
                return p
        raise KeyError(key)


def fit_twin(template: MixerPart, obs: ObservationSet, *,
             ripple_u_db: float = BENCH_RIPPLE_U_DB) -> TwinFit:
    """Fit ``template``'s constrained parameters to ``obs`` (see the module docstring).

    ``template`` should carry the leakage phases of the bench the twin will be served on
    (:func:`sweeprig.sim.bench.prepare_part`), so that leakage adds as it will there.
    ``ripple_u_db``: the sources' level error that changes with frequency, dB (k = 1;
    :data:`BENCH_RIPPLE_U_DB`), 0 for a run whose sources were calibrated at its
    frequencies and levels (the calibration measured that error and took it out).
    """
    params = catalogue(template, obs)
    free = tuple(p for p in params if p.needs(obs) is None)
    unconstrained = tuple((p.key, str(p.needs(obs))) for p in params if p.needs(obs) is not None)
    temperatures = obs.distinct("conversion_gain", "temperature_c")
    if len(temperatures) >= 2:
        choices = ("constant", "ptat")
        bias_note = (f"bias law chosen from gain at {len(temperatures)} temperatures "
                     "(constant and PTAT both fitted; the smaller residual kept)")
    else:
        choices = (template.bias,)
        bias_note = "bias law kept from the template: gain measured at one temperature"
    core_free = tuple(p for p in free if p.group == "core")
    core_obs = tuple(o for o in obs.observations if o.name in CORE_FIGURES)
    best: tuple[float, _Stage] | None = None
    for bias in choices:
        stage = _fit_stage(template.with_changes(bias=bias), core_free, core_obs)
        if best is None or stage.cost < best[0]:
            best = (stage.cost, stage)
    assert best is not None
    core = _with_bench_levels(best[1], core_obs, ripple_u_db=ripple_u_db)
    part = core.part
    stages = [core]
    for group in dict.fromkeys(p.group for p in free if p.group != "core"):
        group_free = tuple(p for p in free if p.group == group)
        group_obs = obs.of_group(group)
        stage = _fit_stage(part, group_free, group_obs)
        # the core's own uncertainty moves this group's estimate too: add it
        stage = _propagate(stage, core, group_obs)
        # its figures are read against the bench's levels too (an isolation against the
        # nominal LO or RF level and a port's path, a noise figure against the ENR): add
        # them. Not to the even-order stage: its few IIP2 points scatter by far more than
        # 0.1 dB, and the level term would only raise its effective degrees of freedom
        # (:func:`effective_dof`) and narrow an interval whose scatter is not all noise
        # (the analyzer's own second-order products add to the IM2 line)
        if group != "even_order":
            stage = _with_bench_levels(stage, group_obs, ripple_u_db=ripple_u_db)
        part = stage.part
        stages.append(stage)
    fitted = []
    for stage in stages:
        # a leakage path's level and its slope trade off about the reference frequency by
        # construction, which says nothing: correlations are judged in the other stages
        correlations = not any(p.key.startswith("isolation.") for p in stage.free)
        for i, p in enumerate(stage.free):
            level_var = 0.0 if stage.level_cov is None else float(stage.level_cov[i, i])
            fitted.append(_with_identification(
                _fitted(p, float(stage.x[i]), stage.cov[i, i], stage.dof, p.get(template),
                        level_var=level_var),
                stage, i, correlations=correlations))
    m = len(obs.observations)
    total_cost = sum(st.cost for st in stages)
    residual_cost = total_cost + _unfitted_cost(part, obs, stages)
    dof = m - len(free)
    return TwinFit(part=part, parameters=tuple(fitted), unconstrained=unconstrained,
                   residuals=_residual_table(part, obs), observations=m, dof=dof,
                   residual_scale=math.sqrt(2.0 * residual_cost / dof) if dof > 0 else math.nan,
                   bias=part.bias, bias_note=bias_note,
                   converged=all(st.converged for st in stages))


@dataclass(frozen=True)
class _Stage:
    """One group's fit: the part after it, its free parameters and their solution ``x``
    (fit coordinates), covariance, degrees of freedom, cost (½Σr²) and Jacobian."""

    part: MixerPart
    base: MixerPart
    free: tuple[FitParameter, ...]
    x: np.ndarray
    cov: np.ndarray
    dof: int
    cost: float
    jac: np.ndarray
    converged: bool
    level_cov: np.ndarray | None = None  # the bench-level part of ``cov``


def _fit_stage(base: MixerPart, free: tuple[FitParameter, ...],
               observations: Sequence[Observation]) -> _Stage:
    result = _solve(base, free, observations)
    m, n = len(observations), len(free)
    dof = m - n
    cost = float(result.cost)
    s2 = 2.0 * cost / dof if dof > 0 else math.nan
    jac = np.asarray(result.jac, dtype=float)
    return _Stage(_apply(base, free, result.x), base, free, np.asarray(result.x, dtype=float),
                  _covariance(jac, s2), dof, cost, jac, bool(result.success))


def _with_bench_levels(stage: _Stage, observations: Sequence[Observation],
                       u_db: float = BENCH_LEVEL_U_DB, *,
                       ripple_u_db: float = BENCH_RIPPLE_U_DB) -> _Stage:
    """Add to a stage's covariance what the bench's level errors do to its estimate.

    A level error common to every figure (the RF source's, the LO source's, the output
    path's) does not scatter the residuals, so the Jacobian covariance cannot hold it: the
    fit absorbs it into the parameters (an LO level error into the LO port resistance, an RF
    or output one into the tail current). Each is an input quantity δ_k of standard
    uncertainty ``u_db``; the estimate moves by ``g_k = −(JᵀJ)⁻¹Jᵀ·∂r/∂δ_k`` per dB, so
    ``cov += Σ_k u²·g_k·g_kᵀ`` (the law of propagation of uncertainty, JCGM 100:2008 (GUM)
    §5.1.2, for independent inputs). ``∂r/∂δ_k``: the model at every observation's level
    moved by the error (RF: ``rf_power_dbm`` and ``rf2_power_dbm``; LO: ``lo_power_dbm``),
    plus how the figure is read (a gain is read as output − the nominal input, so an RF
    error reads it δ high; an input-referred figure, δ low; an output error moves a gain
    only; the noise source's ENR moves a Y-factor noise figure by δ, see
    :data:`_ENR_REFERRED`, and nothing else). Found on the full demo run: without it the
    tail current's and the LO port resistance's 95 % intervals missed the truth by several
    widths (a ±0.15 dB source level error the fit could not see).

    Each source's error also has a part that changes with frequency (``ripple_u_db``): one
    more input per distinct frequency of that source (RF: ``rf_freq_hz``, LO:
    ``lo_freq_hz``), independent of the others, whose direction is the source's own masked
    to the observations at that frequency (the model at one observation does not depend on
    another's levels, so no further model pass is needed).

    Applied to every stage but the even-order one: the core, and each later one whose
    figures are read against a level (an isolation against the nominal LO or RF level and
    its port's path to the analyzer, δ low; a noise figure against the ENR and, through the
    model, the LO level); the supply current reads none. Each stage's terms are added on
    their own: the correlation a shared level error makes between stages is not carried.
    """
    if not stage.free or u_db <= 0.0 or not np.all(np.isfinite(stage.cov)):
        return stage
    scale = np.array([o.scale for o in observations])
    gain = np.array([o.name in _GAIN_FIGURES for o in observations], dtype=float)
    input_referred = np.array([o.name in _INPUT_REFERRED for o in observations], dtype=float)
    enr = np.array([o.name in _ENR_REFERRED for o in observations], dtype=float)
    lo_referred = np.array([o.name in _LO_REFERRED for o in observations], dtype=float)
    # an isolation is the nominal level − a line: a path that reads its line δ high reads it
    # δ low; the line is at the output port, or (the LO back at the input) at the input port
    at_input = ("lo_rf_isolation" if stage.part.conversion == "down" else "lo_if_isolation")
    isolation_in = np.array([o.name == at_input for o in observations], dtype=float)
    isolation_out = np.array([o.name in _LO_REFERRED | {"rf_if_isolation", "if_rf_isolation"}
                              and o.name != at_input for o in observations], dtype=float)
    base = model_figures(stage.part, observations)

    def moved(keys: tuple[str, ...]) -> np.ndarray:
        shifted = [Observation(o.name, o.value, MappingProxyType(
            {**o.conditions, **{k: o.conditions[k] + _LEVEL_STEP_DB for k in keys
                                if k in o.conditions}}), o.study) for o in observations]
        d = (model_figures(stage.part, shifted) - base) / _LEVEL_STEP_DB
        return np.where(np.isfinite(d), d, 0.0)

    rf_source = moved(("rf_power_dbm", "rf2_power_dbm")) + gain - input_referred
    lo_source = moved(("lo_power_dbm",)) - lo_referred
    directions = [
        (u_db, rf_source),  # RF source
        (u_db, lo_source),  # LO source
        (u_db, gain - isolation_out),  # output path
        (u_db, -isolation_in),  # the input port's path to the analyzer (LO leaking back)
        (u_db, enr),  # noise source's ENR (zero for every figure but a noise figure)
    ]
    if ripple_u_db > 0.0:
        for key, source in (("rf_freq_hz", rf_source), ("lo_freq_hz", lo_source)):
            freqs = np.array([round(o.condition(key), 3) for o in observations])
            for f in np.unique(freqs[np.isfinite(freqs)]):
                directions.append((ripple_u_db, np.where(freqs == f, source, 0.0)))
    jac = stage.jac
    try:
        solve = np.linalg.solve(jac.T @ jac, jac.T)
    except np.linalg.LinAlgError:
        return stage
    extra = np.zeros_like(stage.cov)
    for u, d in directions:
        if not np.any(d):
            continue
        g = solve @ (d / scale)
        extra += u * u * np.outer(g, g)
    return replace(stage, cov=stage.cov + extra, level_cov=extra)


def _propagate(stage: _Stage, core: _Stage, observations: Sequence[Observation]) -> _Stage:
    """Add the core parameters' covariance to a later group's, through the group estimate's
    sensitivity to them: ``S = −(JᵦᵀJᵦ)⁻¹·JᵦᵀJ_θ``, ``cov += S·cov_θ·Sᵀ`` (the law of
    propagation of uncertainty, JCGM 100:2008 (GUM) §5.1.2, in matrix form; a two-step
    estimate's second step inherits the first step's uncertainty this way)."""
    if not core.free or not stage.free or not np.all(np.isfinite(core.cov)):
        return stage
    scale = np.array([o.scale for o in observations])
    measured = np.array([o.value for o in observations])

    def residual(core_x: np.ndarray) -> np.ndarray:
        moved = _apply(_apply(core.base, core.free, core_x), stage.free, stage.x)
        r = (model_figures(moved, observations) - measured) / scale
        return np.where(np.isfinite(r), r, _MISSING_RESIDUAL)

    r0 = residual(core.x)
    j_core = np.empty((len(observations), len(core.free)))
    for k in range(len(core.free)):
        step = _DIFF_STEP * max(abs(core.x[k]), 1.0)
        moved = core.x.copy()
        moved[k] += step
        j_core[:, k] = (residual(moved) - r0) / step
    jb = stage.jac
    try:
        sens = -np.linalg.solve(jb.T @ jb, jb.T @ j_core)
    except np.linalg.LinAlgError:
        return stage
    extra = sens @ core.cov @ sens.T
    cov = stage.cov + extra if np.all(np.isfinite(stage.cov)) else stage.cov
    return _Stage(stage.part, stage.base, stage.free, stage.x, cov, stage.dof, stage.cost,
                  stage.jac, stage.converged)


def effective_dof(var: float, level_var: float, dof: int) -> float:
    """Welch–Satterthwaite effective degrees of freedom (JCGM 100:2008 (GUM) G.4.1,
    ``ν_eff = u_c⁴ / Σ u_i⁴/ν_i``) of a variance ``var`` of which ``level_var`` is the bench
    levels' (a Type B term of stated u: ν = ∞) and the rest the fit's own scatter (ν =
    ``dof``): ``ν_eff = dof·(var/(var − level_var))²``; infinite when the scatter adds
    nothing. Without it a fit with few degrees of freedom would stretch a known 0.1 dB
    level term by Student's t of those few (12.7 at one)."""
    scatter = var - level_var
    if level_var <= 0.0 or dof <= 0:
        return float(dof)
    if scatter <= 0.0:
        return math.inf
    return dof * (var / scatter) ** 2


def _fitted(p: FitParameter, x: float, var: float, dof: int,
            start: float | None, *, level_var: float = 0.0) -> FittedParameter:
    lo_b, hi_b = p.internal_bounds()
    span = hi_b - lo_b
    at_bound = min(x - lo_b, hi_b - x) <= 1e-3 * max(span, 1e-12)
    nu = effective_dof(var, level_var, dof)
    t = (float(stats.norm.ppf(0.5 + _CI_LEVEL / 2.0)) if math.isinf(nu)
         else float(stats.t.ppf(0.5 + _CI_LEVEL / 2.0, nu)) if nu > 0 else math.nan)
    half = t * math.sqrt(var) if var >= 0 else math.nan
    low, high = ((math.nan, math.nan) if at_bound or not math.isfinite(half)
                 else (p.to_si(x - half), p.to_si(x + half)))
    return FittedParameter(p.key, p.unit, p.display_scale, p.to_si(x), low, high, start,
                           at_bound, p.what)


def _with_identification(fp: FittedParameter, stage: _Stage, i: int, *,
                         correlations: bool = True) -> FittedParameter:
    """``fp`` with its bench-level share and (``correlations``) its strongest correlation
    with another parameter of its stage."""
    cov = stage.cov
    var = float(cov[i, i])
    if not (math.isfinite(var) and var > 0.0) or stage.level_cov is None:
        return fp
    share = min(max(float(stage.level_cov[i, i]) / var, 0.0), 1.0)
    partner, rho = "", 0.0
    for j, q in enumerate(stage.free if correlations else ()):
        if j == i or not (math.isfinite(cov[j, j]) and cov[j, j] > 0.0):
            continue
        r = float(cov[i, j] / math.sqrt(var * cov[j, j]))
        if abs(r) > abs(rho):
            partner, rho = q.key, r
    return replace(fp, level_share=share, correlated_with=partner, correlation=rho)


def _unfitted_cost(part: MixerPart, obs: ObservationSet, stages: list[_Stage]) -> float:
    """½Σr² of the observations no stage fitted (a figure whose path is not a parameter)."""
    fitted_names = set(CORE_FIGURES) | {name for st in stages for p in st.free
                                        for name in GROUP_FIGURES.get(p.group, (p.group,))}
    rest = tuple(o for o in obs.observations if o.name not in fitted_names)
    if not rest:
        return 0.0
    r = (model_figures(part, rest) - np.array([o.value for o in rest])) / np.array(
        [o.scale for o in rest])
    r = np.where(np.isfinite(r), r, _MISSING_RESIDUAL)
    return 0.5 * float(r @ r)


def _start(p: FitParameter, part: MixerPart) -> float:
    """The template's value in the fit's coordinate, inside the bounds (a missing leakage
    path starts at 60 dB, missing corners a decade outside the band)."""
    value = p.get(part)
    lo_b, hi_b = p.internal_bounds()
    if value is None:
        value = {"dB": 60.0}.get(p.unit)
        if value is None:
            x = lo_b + 0.1 * (hi_b - lo_b) if p.key.endswith("highpass") else hi_b - 0.1 * (
                hi_b - lo_b)
            return x
    x = p.to_internal(value) if (not p.log or value > 0) else lo_b
    margin = 1e-3 * (hi_b - lo_b)
    return min(max(x, lo_b + margin), hi_b - margin)


def _apply(part: MixerPart, free: Sequence[FitParameter], x: np.ndarray) -> MixerPart:
    for p, xi in zip(free, x, strict=True):
        part = p.put(part, p.to_si(float(xi)))
    return part


def _solve(start: MixerPart, free: Sequence[FitParameter],
           observations: Sequence[Observation]) -> optimize.OptimizeResult:
    measured = np.array([o.value for o in observations])
    scale = np.array([o.scale for o in observations])

    def residual(x: np.ndarray) -> np.ndarray:
        model = model_figures(_apply(start, free, x), observations)
        r = (model - measured) / scale
        return np.where(np.isfinite(r), r, _MISSING_RESIDUAL)

    x0 = np.array([_start(p, start) for p in free])
    if not free:
        r0 = residual(x0)
        return optimize.OptimizeResult(x=x0, cost=0.5 * float(r0 @ r0),
                                       jac=np.zeros((len(r0), 0)), success=True)
    bounds = np.array([p.internal_bounds() for p in free]).T
    return optimize.least_squares(residual, x0, bounds=(bounds[0], bounds[1]),
                                  diff_step=_DIFF_STEP, x_scale="jac", method="trf",
                                  ftol=_TOL, xtol=_TOL, gtol=_TOL)


def _covariance(jac: np.ndarray, s2: float) -> np.ndarray:
    """``s²·(JᵀJ)⁻¹`` (NaN where it does not exist: no degrees of freedom, or a direction
    the Jacobian does not see)."""
    n = jac.shape[1]
    if n == 0 or not math.isfinite(s2):
        return np.full((n, n), math.nan)
    try:
        return s2 * np.linalg.inv(jac.T @ jac)
    except np.linalg.LinAlgError:
        return np.full((n, n), math.nan)


def _residual_table(part: MixerPart, obs: ObservationSet) -> tuple[FigureResidual, ...]:
    rows = []
    for name in FITTED_FIGURES:
        subset = obs.named(name)
        if not subset:
            continue
        model = model_figures(part, subset)
        diff = model - np.array([o.value for o in subset])
        finite = diff[np.isfinite(diff)]
        if finite.size == 0:
            rows.append(FigureResidual(name, FITTED_FIGURES[name][0], len(subset), math.nan,
                                       math.nan, math.nan))
            continue
        rows.append(FigureResidual(
            name, FITTED_FIGURES[name][0], len(subset), float(finite.mean()),
            float(np.sqrt(np.mean(finite**2))), float(finite[np.argmax(np.abs(finite))])))
    return tuple(rows)
