"""Datasheet-style reference figures of a part, computed from its model.

These are what a perfect bench would measure on the simulated part; the analysis layer's
results can be checked against them. Every figure is port-referred: input powers are
available powers at the transconductor input port (the RF port of a downconverter), output
powers are delivered into 50 ohm at the output port, per tone, in dBm. The model is evaluated
without noise (noise is a separate density in the response).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

from sweeprig.sim.mixer.core import ideal_commutating_gain, pair_iip3_amplitude_v
from sweeprig.sim.mixer.part import MixerPart
from sweeprig.sim.mixer.types import OperatingPoint, Product, ToneInput

_FREQ_TOL_HZ = 1e-3
_SMALL_SIGNAL_BACKOFF_DB = 50.0  # below the closed-form IIP3: gain error < 0.001 dB
_TWO_TONE_BACKOFF_DB = 40.0  # below the closed-form IIP3: extrapolation error < 0.01 dB
_P1DB_TOL_DB = 0.002


@dataclass(frozen=True)
class ReferenceFigures:
    """Reference figures of one part at one operating point and frequency plan.

    * ``vt_v``: thermal voltage kT/q at the die temperature, V.
    * ``tail_current_a``: I_EE, A. ``gm_s``: small-signal G_m = I_EE/(2·VT + I_EE·R_E), S.
    * ``ideal_voltage_gain``: (2/π)·G_m·R_L (V/V), a fully switched quad;
      ``ideal_power_gain_db``: its power gain ``20·log10(g_v) + 10·log10(R_in/R_L)``
      (no match loss, no band edges).
    * ``conversion_gain_db``: transducer gain of the wanted line (output dBm minus available
      input dBm) for a small single tone at ``rf_freq_hz`` and this LO drive, incl. match and
      band edges. The wanted line is ``|f_in − f_LO|`` (down) or ``f_in + f_LO`` (up).
    * ``input_p1db_dbm``: available input power (single tone) at which that gain has dropped
      by 1 dB (``inf`` when it does not within 100 dB above small signal).
    * ``iip3_closed_form_dbm``: the transconductor's intercept ``A_IIP3 = sqrt(2·a³/VT)``
      (a = 2·VT + I_EE·R_E, peak differential volts at the core) as available power at the
      input port: ``A²/(2·R_in)/(1 − |Γ_in|²)/|H_in(f)|²``.
    * ``iip3_dbm``: per-tone input intercept from a small-signal two-tone test
      (f_in and f_in + spacing, each ``IIP3_cf − 40 dB``):
      ``P_in + (P_fund − P_IM3)/2``, averaged over the lower and upper IM3 lines.
    * ``oip3_dbm``: ``iip3_dbm + conversion_gain_db``.
    * ``iip2_dbm``: ``P_in + (P_fund − P_IM2)`` from the same two tones at
      ``min(P1dB − 10 dB, IIP3_cf − 20 dB)`` each, with the IM2 line at |f2 − f1| at the
      output port (incl. the output band edges there); ``inf`` for a perfectly balanced cell.
    * ``lo_to_if_dbm``: LO-frequency line at the output port with the LO alone, dBm
      (``-inf`` when below the model's floor). ``lo_to_rf_dbm``: the same at the input port.
    * ``rf_to_if_isolation_db``: input power minus the output port's line at the input
      frequency, small single tone with the LO on, dB (``inf`` when absent).
    * ``noise_figure_db``: mid-band SSB noise figure at the die temperature and this LO drive
      (it rises below the part's ``noise.lo_nominal``; a measurement
      near a band edge sees it plus the band-edge losses ahead of the gain);
      ``if_noise_dbm_per_hz``: output noise density with the LO alone,
      ``kT0 + NF + G_mid-band``.
    * ``supply_current_a``: DC supply current, A.
    """

    part_name: str
    lo_freq_hz: float
    lo_power_dbm: float
    rf_freq_hz: float
    output_freq_hz: float
    tone_spacing_hz: float
    vt_v: float
    tail_current_a: float
    gm_s: float
    ideal_voltage_gain: float
    ideal_power_gain_db: float
    conversion_gain_db: float
    input_p1db_dbm: float
    iip3_closed_form_dbm: float
    iip3_dbm: float
    oip3_dbm: float
    iip2_dbm: float
    lo_to_if_dbm: float
    lo_to_rf_dbm: float
    rf_to_if_isolation_db: float
    noise_figure_db: float
    if_noise_dbm_per_hz: float
    supply_current_a: float


def line_power_dbm(products: Sequence[Product], freq_hz: float) -> float:
    """Power of the line at ``freq_hz`` (within 1 mHz), dBm; −inf when there is none."""
    for p in products:
        if abs(p.freq_hz - freq_hz) <= _FREQ_TOL_HZ:
            return p.power_dbm
    return -math.inf


def output_freq_hz(part: MixerPart, in_freq_hz: float, lo_freq_hz: float) -> float:
    """Frequency of the wanted output line for an input at ``in_freq_hz``."""
    if part.conversion == "down":
        return abs(in_freq_hz - lo_freq_hz)
    return in_freq_hz + lo_freq_hz


def closed_form_iip3_dbm(part: MixerPart, op: OperatingPoint, in_freq_hz: float) -> float:
    """The transconductor's A_IIP3 as available power at the input port, dBm."""
    cell = part.cell_at(op)
    amp = pair_iip3_amplitude_v(cell.vt_v, cell.i_ee_a, cell.r_e_ohm)
    port = part.input_port
    delivered_w = amp**2 / (2.0 * port.resistance_ohm)
    avail_w = delivered_w / port.delivered_fraction / port.scalar_magnitude(in_freq_hz) ** 2
    return 10.0 * math.log10(avail_w / 1e-3)


def single_tone_gain_db(
    part: MixerPart, op: OperatingPoint, lo: ToneInput, in_freq_hz: float, power_dbm: float
) -> float:
    """Wanted-line power minus available input power for one input tone, dB."""
    resp = part.evaluate(op, lo, [ToneInput(in_freq_hz, power_dbm)])
    return line_power_dbm(resp.if_port, output_freq_hz(part, in_freq_hz, lo.freq_hz)) - power_dbm


def input_p1db_dbm(
    part: MixerPart, op: OperatingPoint, lo: ToneInput, in_freq_hz: float,
    small_signal_dbm: float,
) -> float:
    """Available input power where the single-tone gain is 1 dB below small signal, dBm."""
    target = single_tone_gain_db(part, op, lo, in_freq_hz, small_signal_dbm) - 1.0
    low = small_signal_dbm
    high = low
    while True:
        high += 3.0
        if high > small_signal_dbm + 100.0:
            return math.inf
        if single_tone_gain_db(part, op, lo, in_freq_hz, high) < target:
            break
        low = high
    while high - low > _P1DB_TOL_DB:
        mid = 0.5 * (low + high)
        if single_tone_gain_db(part, op, lo, in_freq_hz, mid) < target:
            high = mid
        else:
            low = mid
    return 0.5 * (low + high)


def reference_figures(
    part: MixerPart,
    op: OperatingPoint,
    lo_freq_hz: float,
    lo_power_dbm: float,
    rf_freq_hz: float,
    tone_spacing_hz: float = 1e6,
) -> ReferenceFigures:
    """Reference figures (see :class:`ReferenceFigures`) for an LO at ``lo_freq_hz`` and
    ``lo_power_dbm`` and an input tone at ``rf_freq_hz`` (the transconductor input: the RF
    port of a downconverter, the IF port of an upconverter)."""
    lo = ToneInput(lo_freq_hz, lo_power_dbm)
    cell = part.cell_at(op)
    out_port, in_port = part.output_port, part.input_port
    gm = cell.i_ee_a / (2.0 * cell.vt_v + cell.i_ee_a * cell.r_e_ohm)
    g_ideal = ideal_commutating_gain(gm, out_port.resistance_ohm)
    ideal_db = (20.0 * math.log10(g_ideal) + 10.0 * math.log10(
        in_port.resistance_ohm / out_port.resistance_ohm)) if g_ideal > 0 else -math.inf

    iip3_cf = closed_form_iip3_dbm(part, op, rf_freq_hz)
    small = iip3_cf - _SMALL_SIGNAL_BACKOFF_DB
    f_out = output_freq_hz(part, rf_freq_hz, lo_freq_hz)
    single = part.evaluate(op, lo, [ToneInput(rf_freq_hz, small)])
    gain = line_power_dbm(single.if_port, f_out) - small
    feed = line_power_dbm(single.if_port, rf_freq_hz)
    p1db = input_p1db_dbm(part, op, lo, rf_freq_hz, small)

    f1, f2 = rf_freq_hz, rf_freq_hz + tone_spacing_hz
    p_tone = iip3_cf - _TWO_TONE_BACKOFF_DB
    two = part.evaluate(op, lo, [ToneInput(f1, p_tone), ToneInput(f2, p_tone)])
    fund1 = line_power_dbm(two.if_port, output_freq_hz(part, f1, lo_freq_hz))
    fund2 = line_power_dbm(two.if_port, output_freq_hz(part, f2, lo_freq_hz))
    im3_lo = line_power_dbm(two.if_port, output_freq_hz(part, 2 * f1 - f2, lo_freq_hz))
    im3_hi = line_power_dbm(two.if_port, output_freq_hz(part, 2 * f2 - f1, lo_freq_hz))
    iip3 = p_tone + 0.25 * ((fund1 - im3_lo) + (fund2 - im3_hi))
    # IM2 grows only 2 dB/dB: measure it at a higher level (still 10 dB under P1dB) so that
    # it stands clear of the model's floor
    p_im2 = min(p1db - 10.0, iip3_cf - 20.0) if math.isfinite(p1db) else iip3_cf - 20.0
    two2 = part.evaluate(op, lo, [ToneInput(f1, p_im2), ToneInput(f2, p_im2)])
    im2 = line_power_dbm(two2.if_port, abs(f2 - f1))
    iip2 = p_im2 + (line_power_dbm(two2.if_port, output_freq_hz(part, f1, lo_freq_hz)) - im2)

    alone = part.evaluate(op, lo, [])
    return ReferenceFigures(
        part_name=part.name,
        lo_freq_hz=lo_freq_hz,
        lo_power_dbm=lo_power_dbm,
        rf_freq_hz=rf_freq_hz,
        output_freq_hz=f_out,
        tone_spacing_hz=tone_spacing_hz,
        vt_v=cell.vt_v,
        tail_current_a=cell.i_ee_a,
        gm_s=gm,
        ideal_voltage_gain=g_ideal,
        ideal_power_gain_db=ideal_db,
        conversion_gain_db=gain,
        input_p1db_dbm=p1db,
        iip3_closed_form_dbm=iip3_cf,
        iip3_dbm=iip3,
        oip3_dbm=iip3 + gain,
        iip2_dbm=iip2,
        lo_to_if_dbm=line_power_dbm(alone.if_port, lo_freq_hz),
        lo_to_rf_dbm=line_power_dbm(alone.rf_port, lo_freq_hz),
        rf_to_if_isolation_db=small - feed,
        noise_figure_db=alone.notes.get("noise_figure_db", part.noise_figure_at(op)),
        if_noise_dbm_per_hz=alone.if_noise_dbm_per_hz,
        supply_current_a=alone.supply_current_a,
    )
