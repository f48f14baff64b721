"""The model's own value of a reduced figure, for judging a simulated run's figures.

Evaluated on the part directly (never through the bench), at the operating point, LO and RF
frequencies and drives the figure's captures record:

* ``conversion_gain``: the part's output line over its input tone at the drive the point
  gives it (at −20 dBm the KX-2417 is already a few hundredths of a dB into compression,
  which the small-signal figure of :func:`~sweeprig.sim.mixer.reference_figures` leaves
  out);
* ``input_p1db``: :func:`~sweeprig.sim.mixer.reference_figures`'s input P1dB;
* ``iip3_low`` / ``iip3_high``: the two-tone intercept of the textbook test,
  ``P_in + (P_fund − P_IM3)/2`` per tone (Razavi, *RF Microelectronics*, nonlinearity
  chapter; Pozar), evaluated on the part at each drive the fit used (those at least 10 dB
  under P1dB) and averaged: what the slope-3 fit gives on a perfect bench.
  :func:`small_signal_iip3_dbm` gives the small-signal limit of the same intercept
  (``reference_figures``' ``iip3_dbm``, 40 dB under the closed-form intercept); the two
  differ by the part's fifth- and higher-order terms at the drives used (the tanh of a
  differential pair is not a pure cubic: FIELD-NOTES, Razavi), not by any bench error;
* ``im3_low`` / ``im3_high`` (dBc) and ``iip3_point_low`` / ``iip3_point_high``: the same
  relation at the one drive of the figure's point (:data:`PER_DRIVE`).

The truth is the part's between Z0 (50 Ω) terminations, as a datasheet states it: the drive
is the level the sequence states at the DUT plane (what a matched load there would absorb),
never the wave a mismatched bench actually hands the part (:mod:`sweeprig.sim.mismatch`).
The bench's port mismatch is left as an error of the figure, which its uncertainty budget's
mismatch terms cover.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from sweeprig.sim.mixer import OperatingPoint, reference_figures
from sweeprig.sim.mixer.reference import line_power_dbm, output_freq_hz
from sweeprig.sim.mixer.types import ToneInput

#: Drives the intercept fit keeps: at least this far under P1dB, dB.
FIT_BACKOFF_DB = 10.0
#: The sequences' two-tone spacing, Hz.
TONE_SPACING_HZ = 1e6
#: Figures of one drive: an IM3 product (2f1 − f2 or 2f2 − f1) in dBc against tone 1's output
#: (as :mod:`sweeprig.analysis.intercept` reads both sides) and the intercept of that drive.
PER_DRIVE = ("im3_low", "im3_high", "iip3_point_low", "iip3_point_high")


def _context(rows: Any) -> tuple[OperatingPoint, ToneInput, float]:
    row = rows.iloc[0]
    op = OperatingPoint(float(row["probe_temperature_c"]), float(row["supply_v"]))
    lo = ToneInput(float(row["lo_freq_hz"]), float(row["lo_power_dbm"]))
    return op, lo, float(row["rf_freq_hz"])


def figure_truth(part: Any, name: str, rows: Any) -> float:
    """The model's value of figure ``name`` (see the module docstring); ``rows``: the
    figure's capture rows (a pandas frame with probe_temperature_c, supply_v, lo_freq_hz,
    lo_power_dbm, rf_freq_hz, rf_power_dbm), dB or dBm."""
    op, lo, f1 = _context(rows)

    def line(response: Any, f_in: float) -> float:
        return line_power_dbm(response.if_port, output_freq_hz(part, f_in, lo.freq_hz))

    if name == "conversion_gain":
        p = float(rows.iloc[0]["rf_power_dbm"])
        return line(part.evaluate(op, lo, [ToneInput(f1, p)]), f1) - p
    ref = reference_figures(part, op, lo.freq_hz, lo.power_dbm, f1)
    if name == "input_p1db":
        return float(ref.input_p1db_dbm)
    f2 = f1 + TONE_SPACING_HZ
    if name in PER_DRIVE:
        # one drive (the first row's): the product against tone 1, and the intercept that
        # pair gives (the same two-tone relation)
        p = float(rows.iloc[0]["rf_power_dbm"])
        two = part.evaluate(op, lo, [ToneInput(f1, p), ToneInput(f2, p)])
        product = 2 * f1 - f2 if name.endswith("_low") else 2 * f2 - f1
        dbc = line(two, product) - line(two, f1)
        return dbc if name.startswith("im3_") else p - 0.5 * dbc
    if name not in ("iip3_low", "iip3_high"):
        raise ValueError(f"no model truth for figure {name!r}")
    values = []
    for p in sorted(set(rows["rf_power_dbm"].astype(float))):
        if p > ref.input_p1db_dbm - FIT_BACKOFF_DB:
            continue
        two = part.evaluate(op, lo, [ToneInput(f1, p), ToneInput(f2, p)])
        if name == "iip3_low":
            values.append(p + 0.5 * (line(two, f1) - line(two, 2 * f1 - f2)))
        else:
            values.append(p + 0.5 * (line(two, f2) - line(two, 2 * f2 - f1)))
    return float(np.mean(values))


def small_signal_iip3_dbm(part: Any, rows: Any) -> float:
    """The small-signal limit of the part's two-tone intercept at the figure's operating
    point (``reference_figures``' ``iip3_dbm``), dBm."""
    op, lo, f1 = _context(rows)
    ref = reference_figures(part, op, lo.freq_hz, lo.power_dbm, f1,
                            tone_spacing_hz=TONE_SPACING_HZ)
    return float(ref.iip3_dbm)
