"""The model's figure for each observation: the measurement repeated on the model.

Pure: a :class:`~sweeprig.sim.mixer.part.MixerPart` and observations in, numbers out. Each
figure is computed the way the analysis measured it, at the observation's own conditions
(powers available at the DUT port planes, output powers into 50 ohm there):

* ``conversion_gain``, ``lo_drive_gain``, ``compression_gain``: wanted line − input power
  for one tone at the measured RF power;
* ``lo_if_isolation`` / ``lo_rf_isolation``: LO power − the LO-frequency line at the IF / RF
  port, with the same tone present (as read in a gain study);
* ``rf_if_isolation`` (an upconverter's ``if_rf_isolation``): input power − the
  input-frequency line at the output port;
* ``iip3_point_low`` / ``_high``: ``P_in + (P_fund − P_IM3)/2`` at the measured two-tone
  drive (the single-point intercept; Pozar, Microwave Engineering, 4th ed., §10.3, and the
  field notes' intercept relation), lower product with the lower tone's fundamental;
* ``iip2_point_low`` / ``_high``: ``P_in + (P_fund − P_IM2)`` (the field notes' IIP2
  relation; Razavi, RF Microelectronics), the IM2 line at f2 − f1 (low) or f1 + f2 (high),
  which reaches the output port untranslated, against the lower tone's fundamental, as the
  analysis takes them (:mod:`sweeprig.analysis.intercept`);
* ``input_p1db``: input power where the single-tone gain is 1 dB under small signal
  (:func:`sweeprig.sim.mixer.reference.input_p1db_dbm`);
* ``supply_current`` (A);
* ``noise_figure`` (dB): as the Y-factor method sees the model (:func:`sweeprig.sim.
  noise_truth.part_noise_figure`: the output noise density against the conversion gain of the
  signal band, or of signal and image bands for a double-sideband figure, with the port band
  edges), at the LO drive. The part's own ``noise.figure`` is the mid-band SSB figure; the
  measured one also carries the band edges' gain slope between signal and image.

Both conversions: observations keep the run's one spelling (``rf_*`` = the input tone,
whichever port it enters), and the isolations keep their physical port names: a
downconverter's LO→IF line is at its output, an upconverter's LO→RF line is (the model's
``if_port`` field holds the output port's lines either way, :class:`~sweeprig.sim.mixer.
types.MixerResponse`).

Evaluations are shared: one single-tone evaluation serves the gain and the three isolations
of a point.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np

from sweeprig.sim.mixer.part import MixerPart
from sweeprig.sim.mixer.reference import (
    closed_form_iip3_dbm,
    input_p1db_dbm,
    line_power_dbm,
    output_freq_hz,
)
from sweeprig.sim.mixer.types import OperatingPoint, Product, ToneInput
from sweeprig.sim.noise_truth import part_noise_figure
from sweeprig.twin.observations import NOISE_DSB, Observation

_SMALL_SIGNAL_BACKOFF_DB = 50.0  # as the reference figures: gain error < 0.001 dB there
_DEFAULT_RF_POWER_DBM = -30.0  # a figure without an RF power (none of the fitted ones)


def model_figures(part: MixerPart, observations: Sequence[Observation]) -> np.ndarray:
    """The model's value of every observation, in the observation's unit (NaN when the
    model has no such line, e.g. a leakage below the model's floor)."""
    single: dict[tuple[float, ...], object] = {}
    out = np.empty(len(observations))
    for i, obs in enumerate(observations):
        out[i] = _one(part, obs, single)
    return out


def _op(obs: Observation) -> OperatingPoint:
    return OperatingPoint(temperature_c=obs.condition("temperature_c", 25.0),
                          supply_v=obs.condition("supply_v", 3.3))


def _one(part: MixerPart, obs: Observation, single: dict[tuple[float, ...], object]) -> float:
    op = _op(obs)
    lo = ToneInput(obs.condition("lo_freq_hz"), obs.condition("lo_power_dbm", 0.0))
    f_rf = obs.condition("rf_freq_hz")
    p_rf = obs.condition("rf_power_dbm", _DEFAULT_RF_POWER_DBM)
    name = obs.name
    if name == "supply_current":
        return part.supply_current_at(op)
    if name == "noise_figure":
        truth = part_noise_figure(part, temperature_c=op.temperature_c, supply_v=op.supply_v,
                                  lo_freq_hz=lo.freq_hz, lo_power_dbm=lo.power_dbm,
                                  rf_freq_hz=f_rf)
        return truth.dsb_db if obs.condition(NOISE_DSB, 0.0) else truth.ssb_db
    if name == "input_p1db":
        small = closed_form_iip3_dbm(part, op, f_rf) - _SMALL_SIGNAL_BACKOFF_DB
        return input_p1db_dbm(part, op, lo, f_rf, small)
    if name in ("iip3_point_low", "iip3_point_high"):
        return _point_iip3(part, op, lo, obs, low=name.endswith("low"))
    if name in ("iip2_point_low", "iip2_point_high"):
        return _point_iip2(part, op, lo, obs, low=name.endswith("low"))
    key = (op.temperature_c, op.supply_v, lo.freq_hz, lo.power_dbm, f_rf, p_rf)
    resp = single.get(key)
    if resp is None:
        resp = part.evaluate(op, lo, [ToneInput(f_rf, p_rf)])
        single[key] = resp
    # the response's if_port field is the output port, rf_port the input port (both kinds)
    out_lines, in_lines = resp.if_port, resp.rf_port  # type: ignore[attr-defined]
    up = part.conversion == "up"
    if name in ("conversion_gain", "lo_drive_gain", "compression_gain"):
        return _finite(line_power_dbm(out_lines, output_freq_hz(part, f_rf, lo.freq_hz)) - p_rf)
    if name == "lo_if_isolation":  # the IF port: the output (down) or the input (up)
        return _finite(lo.power_dbm - line_power_dbm(in_lines if up else out_lines,
                                                     lo.freq_hz))
    if name == "lo_rf_isolation":  # the RF port: the input (down) or the output (up)
        return _finite(lo.power_dbm - line_power_dbm(out_lines if up else in_lines,
                                                     lo.freq_hz))
    if name in ("rf_if_isolation", "if_rf_isolation"):  # input tone at the output port
        return _finite(p_rf - line_power_dbm(out_lines, f_rf))
    raise ValueError(f"no model for figure {name!r}")


def _two_tones(part: MixerPart, op: OperatingPoint, lo: ToneInput, obs: Observation
               ) -> tuple[float, float, float, float, tuple[Product, ...]]:
    """The observation's two tones (f1, f2 in Hz; p1, p2 in dBm, tone 2 at tone 1's power
    when unstated) and the lines they make at the output port."""
    f1 = obs.condition("rf_freq_hz")
    f2 = obs.condition("rf2_freq_hz")
    p1 = obs.condition("rf_power_dbm")
    p2 = obs.condition("rf2_power_dbm", p1)
    lines = part.evaluate(op, lo, [ToneInput(f1, p1), ToneInput(f2, p2)]).if_port
    return f1, f2, p1, p2, lines


def _point_iip3(part: MixerPart, op: OperatingPoint, lo: ToneInput, obs: Observation, *,
                low: bool) -> float:
    f1, f2, p1, p2, lines = _two_tones(part, op, lo, obs)
    if low:
        fund = line_power_dbm(lines, output_freq_hz(part, f1, lo.freq_hz))
        im3 = line_power_dbm(lines, output_freq_hz(part, 2 * f1 - f2, lo.freq_hz))
        return _finite(p1 + 0.5 * (fund - im3))
    fund = line_power_dbm(lines, output_freq_hz(part, f2, lo.freq_hz))
    im3 = line_power_dbm(lines, output_freq_hz(part, 2 * f2 - f1, lo.freq_hz))
    return _finite(p2 + 0.5 * (fund - im3))


def _point_iip2(part: MixerPart, op: OperatingPoint, lo: ToneInput, obs: Observation, *,
                low: bool) -> float:
    f1, f2, p1, _p2, lines = _two_tones(part, op, lo, obs)
    fund = line_power_dbm(lines, output_freq_hz(part, f1, lo.freq_hz))
    im2 = line_power_dbm(lines, abs(f2 - f1) if low else f1 + f2)
    return _finite(p1 + (fund - im2))


def _finite(value: float) -> float:
    return value if math.isfinite(value) else math.nan
