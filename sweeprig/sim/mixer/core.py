"""The memoryless core of a bipolar Gilbert cell: differential pairs and the switching quad.

Units: volts (V), amperes (A), ohms, siemens (S), kelvin/degC as named. All functions are
pure and accept numpy arrays where an argument is named ``v_...``.

Sign conventions:

* ``x = ΔI / I_EE`` is the transconductor's differential output current fraction,
  ``ΔI = I_C1 − I_C2``, ``I_C1,2 = (I_EE ± ΔI)/2`` (α = 1), positive for a positive
  differential input voltage ``v_diff = v_B1 − v_B2``.
* The switching quad: pair 1 (fed by I_C1) and pair 2 (fed by I_C2) are driven by the same
  differential LO voltage ``v_lo`` with their own input offsets ``v_os1``, ``v_os2``; their
  outputs are cross-coupled so that the differential output current is
  ``out = I_C1·t1 − I_C2·t2``, ``t_k = tanh((v_lo + v_os_k)/(2·VT))``, i.e.
  ``out = (I_EE/2)·(t1 − t2) + (ΔI/2)·(t1 + t2)``.
* ``R_E`` is the emitter degeneration resistance *per emitter*.
"""

from __future__ import annotations

import math
from typing import Literal

import numpy as np
from numpy.typing import ArrayLike, NDArray

BOLTZMANN_J_PER_K = 1.380649e-23  # exact (SI 2019)
ELEMENTARY_CHARGE_C = 1.602176634e-19  # exact (SI 2019)
ZERO_CELSIUS_K = 273.15
NOISE_REFERENCE_K = 290.0  # T0 of the IEEE noise-figure definition
KT0_DBM_PER_HZ = 10.0 * math.log10(BOLTZMANN_J_PER_K * NOISE_REFERENCE_K / 1e-3)  # ≈ −173.98

_NEWTON_MAX_ITERATIONS = 60
_NEWTON_STEP_TOL = 1e-8

BiasLaw = Literal["constant", "ptat"]


def thermal_voltage_v(temperature_c: float) -> float:
    """VT = k·T/q at a die temperature in degC, V."""
    return BOLTZMANN_J_PER_K * (temperature_c + ZERO_CELSIUS_K) / ELEMENTARY_CHARGE_C


def pair_angle(v_diff_v: ArrayLike, vt_v: float, i_ee_a: float, r_e_ohm: float) -> NDArray:
    """``u = atanh(x)`` of a degenerated bipolar pair for a differential input ``v_diff_v``.

    Solves ``v = 2·VT·u + I_EE·R_E·tanh(u)`` (the pair equation
    ``v = 2·VT·atanh(x) + x·I_EE·R_E`` written in ``u = atanh(x)``, which keeps the slope
    between 2·VT and 2·VT + I_EE·R_E so Newton's method is well conditioned).

    Newton starts from the series solution ``u0 = w + (β/3)·w³ + (β²/3 − 2β/15)·w⁵``,
    ``w = v/a``, ``β = b/a`` (a = 2·VT + b, b = I_EE·R_E; from
    ``w = u − (β/3)·u³ + (2β/15)·u⁵ − …``), clipped to the bracket [v/a, v/(2·VT)] that
    holds the root (``tanh(u) ≤ u``); every iterate is kept in that bracket. The right-hand
    side has a slope between 2·VT and a and is concave in u for u > 0 (convex for u < 0), so
    after at most one step that lands on the near side of the root every Newton step moves
    monotonically towards it. Iteration stops when the step is below 1e-8 (the next error is
    then below ~|g''/2g'|·1e-16 ≤ 4e-16).
    """
    v = np.asarray(v_diff_v, dtype=float)
    two_vt = 2.0 * vt_v
    if r_e_ohm == 0.0 or i_ee_a == 0.0:
        return v / two_vt
    if v.ndim == 0:
        return pair_angle(v.reshape(1), vt_v, i_ee_a, r_e_ohm)[0]
    b = i_ee_a * r_e_ohm
    a = two_vt + b
    beta = b / a
    w = v * (1.0 / a)
    w2 = w * w
    # u = w·(1 + w²·(β/3 + w²·(β²/3 − 2β/15))), computed in place (the arrays are large)
    u = w2 * (beta * beta / 3.0 - 2.0 * beta / 15.0)
    u += beta / 3.0
    u *= w2
    u += 1.0
    u *= w
    bound = v * (1.0 / two_vt)
    low = np.minimum(w, bound)
    high = np.maximum(w, bound, out=bound)
    _clip_into(u, low, high)
    t = w2  # scratch arrays, reused every step
    step = w
    for _ in range(_NEWTON_MAX_ITERATIONS):
        np.tanh(u, out=t)
        # step = (2·VT·u + b·t − v) / (2·VT + b·(1 − t²))
        np.multiply(u, two_vt, out=step)
        step += b * t
        step -= v
        t *= t
        t *= -b
        t += a
        step /= t
        u -= step
        _clip_into(u, low, high)
        if not np.abs(step).max(initial=0.0) > _NEWTON_STEP_TOL:
            break
    return u


def _clip_into(u: NDArray, low: NDArray, high: NDArray) -> None:
    """u ← min(max(u, low), high) in place (``np.clip`` without its wrapper's cost)."""
    np.maximum(u, low, out=u)
    np.minimum(u, high, out=u)


def pair_fraction(v_diff_v: ArrayLike, vt_v: float, i_ee_a: float, r_e_ohm: float) -> NDArray:
    """``x = ΔI/I_EE`` of the (optionally degenerated) transconductor pair.

    Undegenerated (``R_E = 0``): ``x = tanh(v/(2·VT))``. Degenerated: the solution of
    ``v = 2·VT·atanh(x) + x·I_EE·R_E`` (see :func:`pair_angle`).
    """
    return np.tanh(pair_angle(v_diff_v, vt_v, i_ee_a, r_e_ohm))


def pair_slope_per_v(v_diff_v: ArrayLike, vt_v: float, i_ee_a: float, r_e_ohm: float) -> NDArray:
    """dx/dv of the transconductor pair at ``v_diff_v``, 1/V.

    From the implicit equation: ``dv/dx = 2·VT/(1 − x²) + I_EE·R_E``.
    """
    x = pair_fraction(v_diff_v, vt_v, i_ee_a, r_e_ohm)
    one_minus = 1.0 - x * x
    return one_minus / (2.0 * vt_v + i_ee_a * r_e_ohm * one_minus)


def pair_transconductance_s(vt_v: float, i_ee_a: float, r_e_ohm: float) -> float:
    """Small-signal G_m = dΔI/dv at zero input = I_EE/(2·VT + I_EE·R_E), S."""
    return i_ee_a / (2.0 * vt_v + i_ee_a * r_e_ohm)


def pair_iip3_amplitude_v(vt_v: float, i_ee_a: float, r_e_ohm: float) -> float:
    """Input third-order intercept of the pair, peak differential volts (per tone).

    Series inversion of ``v = a·x + (2·VT/3)·x³ + …`` (a = 2·VT + I_EE·R_E, from
    atanh(x) = x + x³/3 + …) gives ``x = v/a − (2·VT/(3·a⁴))·v³ + …``; for a cubic
    ``c1·v + c3·v³`` the intercept is ``sqrt((4/3)·|c1/c3|)``, so
    ``A_IIP3 = sqrt(2·a³/VT)``. At R_E = 0 this is 4·VT; with degeneration it is
    ``4·VT·(1 + G_m0·R_E)^(3/2)``, G_m0 = I_EE/(2·VT).
    """
    a = 2.0 * vt_v + i_ee_a * r_e_ohm
    return math.sqrt(2.0 * a**3 / vt_v)


def switching_functions(
    v_lo_v: ArrayLike, vt_v: float, v_os1_v: float, v_os2_v: float
) -> tuple[NDArray, NDArray]:
    """The quad's two LO-only factors ``(D, S) = (t1 − t2, t1 + t2)``.

    ``t_k = tanh((v_lo + v_os_k)/(2·VT))``; the cell's output is
    ``out = (I_EE/2)·D + (ΔI/2)·S``.
    """
    v = np.asarray(v_lo_v, dtype=float)
    inv = 0.5 / vt_v
    t1 = np.tanh((v + v_os1_v) * inv)
    t2 = np.tanh((v + v_os2_v) * inv)
    return t1 - t2, t1 + t2


def cell_output_a(
    v_lo_v: ArrayLike,
    v_rf_v: ArrayLike,
    vt_v: float,
    i_ee_a: float,
    r_e_ohm: float,
    v_os1_v: float = 0.0,
    v_os2_v: float = 0.0,
    v_os_rf_v: float = 0.0,
) -> NDArray:
    """Instantaneous differential output current of the cell, A (time-domain form).

    ``out = I_C1·t1 − I_C2·t2`` with ``I_C1,2 = (I_EE ± ΔI)/2``,
    ``ΔI = I_EE·x(v_rf + v_os_rf)``.
    """
    x = pair_fraction(np.asarray(v_rf_v, dtype=float) + v_os_rf_v, vt_v, i_ee_a, r_e_ohm)
    d, s = switching_functions(v_lo_v, vt_v, v_os1_v, v_os2_v)
    return 0.5 * i_ee_a * (d + x * s)


def ideal_commutating_gain(gm_s: float, r_load_ohm: float) -> float:
    """Voltage conversion gain of a fully switched (square-wave) quad: (2/π)·G_m·R_L."""
    return 2.0 / math.pi * gm_s * r_load_ohm


def tail_current_a(
    nominal_a: float,
    bias: BiasLaw,
    temperature_c: float,
    reference_temperature_c: float,
    supply_v: float,
    nominal_supply_v: float,
    supply_coeff_per_v: float,
    min_supply_v: float = 0.0,
) -> float:
    """Tail current I_EE at an operating point, A.

    ``constant``: ``I_EE = I0·(1 + k_v·(V − V_nom))``, independent of temperature.
    ``ptat``: the same times ``T/T_ref`` (absolute temperatures), which holds G_m constant.
    Below ``min_supply_v`` the bias is off (0 A). Never negative.
    """
    if supply_v < min_supply_v:
        return 0.0
    current = nominal_a * (1.0 + supply_coeff_per_v * (supply_v - nominal_supply_v))
    if bias == "ptat":
        current *= (temperature_c + ZERO_CELSIUS_K) / (reference_temperature_c + ZERO_CELSIUS_K)
    return max(current, 0.0)
