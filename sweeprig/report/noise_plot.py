"""The report's noise-figure plot: the figure versus RF frequency with its k = 2 uncertainty,
one line per temperature and LO drive, and versus LO drive at each temperature (the band's
mean), the noise-figure limits shaded."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from sweeprig.analysis.reduce import RunFigures
from sweeprig.report.plots import (
    DENSE_SENTENCE,
    LINE_STYLES,
    MARKER_POINTS,
    Plot,
    _corners,
    _figure,
    _finish,
    _legend,
    _limit_lines,
    _line,
    _one_per_pixel,
    figure_frame,
    temperature_colour,
)


def _frame(run: RunFigures) -> pd.DataFrame:
    """The finite noise figures (through :func:`~sweeprig.report.plots.figure_frame`), with
    ``u`` (k = 2, dB), ``flagged`` and ``sideband`` ("dsb" unless stated)."""
    frame = figure_frame(run, "noise_figure")
    frame = frame[np.isfinite(frame["value"].to_numpy(dtype=float))]
    sideband = (frame["sideband"].fillna("dsb") if "sideband" in frame
                else pd.Series("dsb", index=frame.index))
    return pd.DataFrame({
        "value": frame["value"], "u": frame["uncertainty_db"],
        "flagged": frame["flags"].map(bool).astype(bool), "sideband": sideband,
        "temperature_c": frame["temperature_c"], "lo_power_dbm": frame["lo_power_dbm"],
        "rf_freq_hz": frame["rf_freq_hz"], "study": frame["study"].fillna("").astype(str),
    }, columns=["value", "u", "flagged", "sideband", "temperature_c", "lo_power_dbm",
                "rf_freq_hz", "study"])


def noise_figure_plot(run: RunFigures) -> Plot | None:
    """Noise figure versus RF frequency and versus LO drive (None without noise figures)."""
    table = _frame(run)
    if table.empty:
        return None
    sideband = "/".join(sorted({str(s).upper() for s in table["sideband"]}))
    fig, (ax_f, ax_lo) = _figure(1, 2, height_in=4.2)
    drives = sorted(table["lo_power_dbm"].dropna().unique())
    dense = False
    for (temp, lo), rows in table.groupby(["temperature_c", "lo_power_dbm"], dropna=False):
        rows = rows.sort_values("rf_freq_hz")
        t = float(temp) if math.isfinite(float(temp)) else None
        style = LINE_STYLES[drives.index(lo) % len(LINE_STYLES)] if lo in drives else "-"
        label = (f"{t:g} °C, " if t is not None else "") + f"LO {float(lo):+g} dBm"
        colour = temperature_colour(t)
        if len(rows) > MARKER_POINTS:  # bars would merge into a band: draw the band
            dense = True
            freq_ghz = rows["rf_freq_hz"].to_numpy(dtype=float) / 1e9
            value, u = rows["value"].to_numpy(dtype=float), rows["u"].to_numpy(dtype=float)
            ax_f.fill_between(freq_ghz, value - u, value + u, color=colour, alpha=0.18,
                              linewidth=0)
            _line(ax_f, freq_ghz, value, linestyle=style, linewidth=1.2, color=colour,
                  label=label)
        else:
            ax_f.errorbar(rows["rf_freq_hz"] / 1e9, rows["value"], yerr=rows["u"],
                          linestyle=style, marker="o", markersize=3, linewidth=1.2,
                          capsize=2, color=colour, label=label)
        flagged = rows[rows["flagged"]]
        if len(flagged):
            flagged = _one_per_pixel(flagged, x="rf_freq_hz", y="value", by=("flagged",))
            ax_f.plot(flagged["rf_freq_hz"] / 1e9, flagged["value"], "x", color="black",
                      markersize=6, linestyle="none")
    for temp, rows in table.groupby("temperature_c", dropna=False):
        t = float(temp) if math.isfinite(float(temp)) else None
        mean = rows.groupby("lo_power_dbm")["value"].mean()
        ax_lo.plot(mean.index, mean.to_numpy(), marker="o", markersize=3.5, linewidth=1.4,
                   color=temperature_colour(t),
                   label=f"{t:g} °C" if t is not None else "room")
    studies = sorted(set(table["study"]))
    for ax in (ax_f, ax_lo):
        _limit_lines(ax, run, "noise_figure", studies, band=True)
        _legend(ax, fontsize=7)
    ax_f.set_xlabel("RF frequency (GHz)")
    ax_f.set_ylabel(f"noise figure, {sideband} (dB)")
    ax_lo.set_xlabel("LO drive (dBm)")
    ax_lo.set_ylabel(f"noise figure, {sideband}, band mean (dB)")
    return _finish(fig, "noise_figure", "Noise figure (Y-factor method)",
                   f"{sideband} noise figure with second-stage correction; bars: expanded "
                   "uncertainty (k = 2) from the ENR, mismatch, linearity, second-stage and "
                   "jitter terms; ×: flagged (see the flags). Right: the band's mean versus "
                   "LO drive, one line per temperature; a switching mixer's noise figure rises "
                   "as its LO drive falls."
                   + (" Where a line has more than "
                      f"{MARKER_POINTS} frequencies its uncertainty is shaded instead of barred."
                      + DENSE_SENTENCE if dense else ""),
                   corners=_corners(table, ("temperature_c", "lo_power_dbm")),
                   corner_keys=("temperature_c", "lo_power_dbm"), studies=studies)
