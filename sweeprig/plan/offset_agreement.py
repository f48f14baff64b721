"""Do the frequency offsets found for the products of one point tell one story?

Every product's offset is the same few reference errors times its own coefficients
(:func:`sweeprig.plan.frequency_error.reference_coefficients`: offset = Σ_r c_r·ε_r). The
errors are estimated from all the point's offsets by least squares with each error held
within three times its stated tolerance by a Gaussian prior (a ridge term ``(ε_r/3·tol_r)²``,
so a point with fewer products than references still has one answer; Tikhonov
regularisation, as in ``numpy.linalg.lstsq`` on the stacked system); a product whose offset
the estimate leaves more than :data:`DISAGREE_K` of its own resolution from the fit disagrees
with the others (a neighbouring line taken for it, most likely). A reference with no stated
tolerance (0) is taken as exact. Pure numpy; Hz and ppm.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np

#: Residual, in units of a product's own frequency resolution, beyond which it disagrees.
DISAGREE_K = 3.0
#: The prior holds each error within this many times its stated tolerance.
PRIOR_WIDTH = 3.0


def fitted_errors_ppm(coefficients: Sequence[Mapping[str, float]], offsets_hz: Sequence[float],
                      resolution_hz: Sequence[float], tolerance_ppm: Mapping[str, float]
                      ) -> dict[str, float]:
    """The reference errors, ppm, that best explain the offsets (see the module docstring).
    ``coefficients[i]``: Hz per unit fractional error of each reference for product ``i``."""
    refs = sorted({r for c in coefficients for r in c if tolerance_ppm.get(r, 0.0) > 0.0})
    if not refs or not offsets_hz:
        return {}
    a = np.array([[c.get(r, 0.0) * 1e-6 for r in refs] for c in coefficients], dtype=float)
    w = 1.0 / np.asarray(resolution_hz, dtype=float)
    prior = np.diag([1.0 / (PRIOR_WIDTH * tolerance_ppm[r]) for r in refs])
    lhs = np.vstack([a * w[:, None], prior])
    rhs = np.concatenate([np.asarray(offsets_hz, dtype=float) * w, np.zeros(len(refs))])
    solution, *_ = np.linalg.lstsq(lhs, rhs, rcond=None)
    return dict(zip(refs, solution.tolist(), strict=True))


def _residuals(coefficients: Sequence[Mapping[str, float]], offsets_hz: Sequence[float],
               resolution_hz: Sequence[float], tolerance_ppm: Mapping[str, float],
               fit_on: Sequence[int]) -> list[float]:
    """Every product's |offset − fit|, in units of its resolution, the fit made on
    ``fit_on`` only."""
    errors = fitted_errors_ppm([coefficients[i] for i in fit_on],
                               [offsets_hz[i] for i in fit_on],
                               [resolution_hz[i] for i in fit_on], tolerance_ppm)
    return [abs(o - sum(c.get(r, 0.0) * 1e-6 * e for r, e in errors.items())) / res
            for c, o, res in zip(coefficients, offsets_hz, resolution_hz, strict=True)]


def disagreeing(coefficients: Sequence[Mapping[str, float]], offsets_hz: Sequence[float],
                resolution_hz: Sequence[float], tolerance_ppm: Mapping[str, float]
                ) -> list[bool]:
    """Per product: True when its offset disagrees with the others' (module docstring).

    When the fit on all products leaves some off, each product is left out in turn: if
    exactly one leaves the others in agreement and itself off, it alone disagrees;
    otherwise the offsets cannot say which product is wrong and every product left off by
    the full fit is marked (the safe side). Fewer than two products: none disagrees."""
    n = len(offsets_hz)
    if n < 2:
        return [False] * n
    full = _residuals(coefficients, offsets_hz, resolution_hz, tolerance_ppm, range(n))
    off = [r > DISAGREE_K for r in full]
    if not any(off):
        return off
    culprits = []
    for i in range(n):
        rest = [j for j in range(n) if j != i]
        res = _residuals(coefficients, offsets_hz, resolution_hz, tolerance_ppm, rest)
        if res[i] > DISAGREE_K and all(res[j] <= DISAGREE_K for j in rest):
            culprits.append(i)
    if len(culprits) == 1:
        return [i == culprits[0] for i in range(n)]
    return off


def predicted_offset_hz(coefficients: Sequence[Mapping[str, float]],
                        offsets_hz: Sequence[float], resolution_hz: Sequence[float],
                        tolerance_ppm: Mapping[str, float], target: Mapping[str, float]
                        ) -> tuple[float, float]:
    """Where a product of coefficients ``target`` should lie, given the offsets found so far:
    (mean, standard deviation), Hz.

    Bayesian linear regression (any statistics text; the normal equations solved with
    numpy): each reference error has a Gaussian prior of standard deviation its stated
    tolerance (a ± bound taken as one sigma: wider than a uniform's tol/√3, the safe side),
    each found offset a Gaussian error of its resolution; the posterior covariance is
    ``Σ = (AᵀWA + P)⁻¹``, the mean ``Σ·AᵀW·o``, and the product's offset ``c·μ ± √(cᵀΣc)``.
    With nothing found yet it is ``0 ± √(Σ (c_r·tol_r)²)``.
    """
    refs = sorted({r for c in [*coefficients, target] for r in c
                   if tolerance_ppm.get(r, 0.0) > 0.0})
    if not refs:
        return 0.0, 0.0
    c = np.array([target.get(r, 0.0) * 1e-6 for r in refs])
    prior = np.diag([1.0 / tolerance_ppm[r] ** 2 for r in refs])
    if coefficients:
        a = np.array([[k.get(r, 0.0) * 1e-6 for r in refs] for k in coefficients])
        w = 1.0 / np.asarray(resolution_hz, dtype=float) ** 2
        info = a.T @ (a * w[:, None]) + prior
        cov = np.linalg.inv(info)
        mean = cov @ (a.T @ (w * np.asarray(offsets_hz, dtype=float)))
    else:
        cov = np.linalg.inv(prior)
        mean = np.zeros(len(refs))
    return float(c @ mean), float(np.sqrt(max(c @ cov @ c, 0.0)))
