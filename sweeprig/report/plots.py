"""The report's plots: matplotlib figures drawn on the Agg canvas, returned as PNG bytes.

No pyplot and no global backend switch: every plot builds its own
:class:`matplotlib.figure.Figure` on a :class:`~matplotlib.backends.backend_agg.FigureCanvasAgg`,
so drawing a report never touches a user's interactive session. Each function takes a
:class:`~sweeprig.analysis.reduce.RunFigures` and returns a :class:`Plot`, or None when the
run has nothing to show for it. Axes carry units; the colours are sweeprig's own (cold
temperatures in slate blue, room in moss green, hot in brick red; fundamentals blue, IM3
brick, IM2 plum, fits dashed, valid ranges shaded ochre).
"""

from __future__ import annotations

import io
import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd
from matplotlib.axes import Axes
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.colors import LinearSegmentedColormap, Normalize
from matplotlib.figure import Figure as MplFigure

from sweeprig.analysis.captures import point_table
from sweeprig.analysis.compression import compression_table
from sweeprig.analysis.figures import Figure, flag_bit
from sweeprig.analysis.gain import gain_table
from sweeprig.analysis.reduce import (
    ROLE_COMPRESSION,
    ROLE_FLATNESS,
    ROLE_GAIN,
    ROLE_IMAGE,
    ROLE_ISOLATION,
    ROLE_LO_DRIVE,
    ROLE_SPURS,
    ROLE_TWO_TONE,
    RunFigures,
)
from sweeprig.analysis.spurs import spur_table
from sweeprig.report.tables import figure_text

# -- the colour scheme -------------------------------------------------------------------------
INK = "#1f2a36"
MUTED = "#6b7785"
GRID = "#dde2e8"
PAPER = "#fcfbf8"
SLATE = "#2d5f8a"
OCHRE = "#c9922e"
MOSS = "#5b8c4a"
PLUM = "#84436f"
BRICK = "#b5472f"
TEAL = "#3d7f86"
SERIES: tuple[str, ...] = (SLATE, OCHRE, MOSS, PLUM, BRICK, TEAL, "#7d6b45", "#4b4f8c")
#: Cold → room → hot, over −55 °C … +125 °C.
TEMPERATURE_MAP = LinearSegmentedColormap.from_list(
    "sweeprig_temperature", [(0.0, "#24507e"), (0.44, MOSS), (1.0, "#b03a26")]
)
TEMPERATURE_RANGE_C = (-55.0, 125.0)
#: Spur levels: strong spurs dark plum, weak ones pale sand (dBc).
SPUR_MAP = LinearSegmentedColormap.from_list(
    "sweeprig_spurs", ["#f7f2e6", "#e8c77a", "#c9722e", "#84436f", "#2b1d3a"]
)
SPUR_RANGE_DBC = (-100.0, 0.0)
LINE_STYLES: tuple[str, ...] = ("-", "--", ":", "-.")

#: Reading flags that fade a point in the two-tone plot.
_DOUBTFUL = (flag_bit("in_noise") | flag_bit("overload") | flag_bit("analyzer_distortion")
             | flag_bit("atten_carrier_moved") | flag_bit("analyzer_compression")
             | flag_bit("source_harmonic") | flag_bit("rbw_merged") | flag_bit("noise_limited"))

WIDTH_IN = 9.6
DPI = 100
MAX_PANELS = 6


@dataclass(frozen=True)
class Plot:
    """One rendered plot: ``key`` (stable name), ``title``, ``caption`` (what it shows and
    where the numbers come from), the PNG bytes and the image size in pixels."""

    key: str
    title: str
    caption: str
    png: bytes
    width_px: int
    height_px: int


def all_plots(run: RunFigures) -> list[Plot]:
    """Every plot the run has data for, in report order."""
    from sweeprig.report.noise_plot import noise_figure_plot  # it builds on this module

    makers: tuple[Callable[[RunFigures], Plot | None], ...] = (
        gain_vs_frequency, compression_curves, two_tone_plot, gain_vs_lo_drive, spur_chart,
        isolation_vs_frequency, noise_figure_plot, soak_curves,
    )
    return [p for p in (make(run) for make in makers) if p is not None]


def temperature_colour(temperature_c: float | None) -> str:
    """The colour of a temperature (room colour when unknown)."""
    if temperature_c is None or not math.isfinite(temperature_c):
        return MOSS
    low, high = TEMPERATURE_RANGE_C
    rgba = TEMPERATURE_MAP(float(np.clip((temperature_c - low) / (high - low), 0.0, 1.0)))
    return "#{:02x}{:02x}{:02x}".format(*(round(255 * c) for c in rgba[:3]))


# -- the plots ---------------------------------------------------------------------------------


def gain_vs_frequency(run: RunFigures) -> Plot | None:
    """Conversion gain versus RF frequency, one line per temperature (and per other fixed
    setting), with the conversion-gain limits shaded."""
    studies = run.studies_with(ROLE_FLATNESS) or run.studies_with(ROLE_GAIN)
    if not studies:
        return None
    table = gain_table(run.captures, study=studies)
    if table.empty:
        return None
    fig, ax = _figure(1, 1, height_in=4.2)
    keys = _varying(table, ("study", "temperature_c", "supply_v", "lo_power_dbm", "rf_power_dbm"))
    for k, (label, rows) in enumerate(_groups(table, keys)):
        rows = rows.sort_values("rf_freq_hz")
        temp = _first(rows, "temperature_c")
        ax.plot(rows["rf_freq_hz"] / 1e9, rows["gain_db"], marker="o", markersize=3.5,
                linewidth=1.6, color=temperature_colour(temp),
                linestyle=LINE_STYLES[(k // 3) % len(LINE_STYLES)] if len(keys) > 1 else "-",
                label=label)
    _min_span(ax, 2.0)
    _limit_band(ax, run, "conversion_gain")
    ax.set_xlabel("RF frequency (GHz)")
    ax.set_ylabel("conversion gain (dB)")
    _legend(ax)
    return _finish(fig, "gain_vs_frequency", "Conversion gain versus RF frequency",
                   "P_IF − P_RF at the DUT ports, one line per temperature; shaded: the "
                   "conversion-gain limits of the sequence. Studies: " + ", ".join(studies))


def compression_curves(run: RunFigures) -> Plot | None:
    """Output versus input and gain versus input of every power sweep, P1dB marked."""
    studies = run.studies_with(ROLE_COMPRESSION)
    if not studies:
        return None
    table = compression_table(run.captures, study=studies)
    if table.empty:
        return None
    fig, (ax_out, ax_gain) = _figure(1, 2, height_in=4.4)
    p1 = _by_conditions(run.figures_named("input_p1db"))
    p1_out = _by_conditions(run.figures_named("output_p1db"))
    sweeps = list(table.groupby("sweep", sort=True))
    for k, (_, rows) in enumerate(sweeps[: 3 * MAX_PANELS]):
        temp = _first(rows, "temperature_c")
        colour = temperature_colour(temp) if len(sweeps) <= 6 else SERIES[k % len(SERIES)]
        label = _sweep_label(rows)
        x, out, gain = rows["input_dbm"], rows["output_dbm"], rows["gain_db"]
        ax_out.plot(x, out, marker="o", markersize=3, linewidth=1.5, color=colour, label=label)
        linear = rows[rows["linear"].to_numpy(dtype=bool)]
        gss = float(np.median(linear["gain_db"])) if len(linear) else float(gain.iloc[0])
        ax_out.plot(x, x + gss, linestyle=":", linewidth=1.0, color=colour, alpha=0.7)
        ax_gain.plot(x, gain, marker="o", markersize=3, linewidth=1.5, color=colour, label=label)
        key = _condition_key(rows.iloc[0])
        fin, fout = p1.get(key), p1_out.get(key)
        if fin is not None and fout is not None and math.isfinite(fin.value):
            if fin.bound is None:
                ax_out.plot([fin.value], [fout.value], marker="D", markersize=7, color=colour,
                            markeredgecolor=INK, zorder=5)
                ax_gain.plot([fin.value], [fout.value - fin.value], marker="D", markersize=7,
                             color=colour, markeredgecolor=INK, zorder=5)
                ax_gain.annotate(f"P1dB {figure_text(fin, 1)}", (fin.value, fout.value -
                                 fin.value), textcoords="offset points", xytext=(6, 8),
                                 fontsize=8, color=INK)
            else:
                ax_gain.annotate(f"P1dB {figure_text(fin, 1)}", (float(x.iloc[-1]),
                                 float(gain.iloc[-1])), textcoords="offset points",
                                 xytext=(-70, -14), fontsize=8, color=INK)
    ax_out.set_xlabel("input power per tone at the RF port (dBm)")
    ax_out.set_ylabel("output power at the IF port (dBm)")
    ax_out.set_title("output versus input (dotted: small-signal line)", fontsize=9, color=MUTED)
    _min_span(ax_gain, 2.0)
    ax_gain.set_xlabel("input power at the RF port (dBm)")
    ax_gain.set_ylabel("conversion gain (dB)")
    ax_gain.set_title("gain versus input (◆: 1 dB compression)", fontsize=9, color=MUTED)
    _legend(ax_gain)
    return _finish(fig, "compression", "Gain compression",
                   "Single-tone power sweeps: output power and gain versus input power at the "
                   "DUT ports; the diamond marks the input and output P1dB. Studies: "
                   + ", ".join(studies))


def two_tone_plot(run: RunFigures) -> Plot | None:
    """Fundamental, IM3 (and IM2) versus input power per tone, with the slope-1 and slope-3
    lines meeting at the intercept and the fit range shaded, one panel per sweep."""
    studies = run.studies_with(ROLE_TWO_TONE)
    if not studies:
        return None
    names = ("im3_low", "im3_high", "im2_low", "im2_high")
    table = point_table(run.captures, names, study=studies, where="two-tone plot")
    table = table[table["if_present"].to_numpy()]
    if table.empty:
        return None
    keys = [k for k in ("study", "temperature_c", "supply_v", "lo_freq_hz", "lo_power_dbm",
                        "rf_freq_hz", "rf2_freq_hz") if k in table]
    groups = _groups(table, _varying(table, keys))
    shown = groups[:MAX_PANELS]
    cols = min(len(shown), 3)
    rows_n = math.ceil(len(shown) / cols)
    fig, axes = _figure(rows_n, cols, height_in=3.9 * rows_n)
    axes_list = list(np.atleast_1d(axes).ravel())
    fits = {n: _by_conditions(run.figures_named(n)) for n in
            ("iip3_low", "oip3_low", "iip3_high", "oip3_high", "iip2_low", "iip2_high",
             "iip3", "iip2")}
    for ax, (label, rows) in zip(axes_list, shown, strict=False):
        rows = rows.sort_values("rf_power_dbm")
        x = rows["rf_power_dbm"].to_numpy(dtype=float)
        key = _condition_key(rows.iloc[0])
        ax.plot(x, rows["if_level_dbm"], "o", color=SLATE, markersize=4, label="fundamental")
        styles = {"im3_low": (BRICK, "v", "IM3 lower"), "im3_high": (BRICK, "^", "IM3 upper"),
                  "im2_low": (PLUM, "s", "IM2 f2−f1"), "im2_high": (PLUM, "D", "IM2 f1+f2")}
        for name, (colour, marker, text) in styles.items():
            if f"{name}_present" in rows and rows[f"{name}_present"].any():
                level = rows[f"{name}_level_dbm"].to_numpy(dtype=float)
                doubtful = (rows[f"{name}_flags"].to_numpy(dtype=np.int64) & _DOUBTFUL) != 0
                face = "none" if name.endswith("high") else colour
                ax.plot(x[~doubtful], level[~doubtful], marker, color=colour, markersize=4,
                        label=text, markerfacecolor=face)
                if doubtful.any():
                    ax.plot(x[doubtful], level[doubtful], marker, color=colour, markersize=4,
                            markerfacecolor=face, alpha=0.3)
        valid_x: list[float] = []
        for side, dash in (("low", "--"), ("high", (0, (5, 3, 1, 3)))):
            iip, oip = fits[f"iip3_{side}"].get(key), fits[f"oip3_{side}"].get(key)
            if iip is None or oip is None or not iip.is_number or not math.isfinite(oip.value):
                continue
            valid_x += _point_powers(run, iip.points)
            top = max(iip.value, float(x.max())) + 2.0
            xs = np.array([float(x.min()) - 2.0, top])
            gain = oip.value - iip.value
            ax.plot(xs, xs + gain, linestyle=dash, color=SLATE, linewidth=1.0)
            ax.plot(xs, oip.value + 3.0 * (xs - iip.value), linestyle=dash, color=BRICK,
                    linewidth=1.0)
            ax.plot([iip.value], [oip.value], "*", color=OCHRE, markersize=11,
                    markeredgecolor=INK, zorder=5)
        for side in ("low", "high"):
            iip2 = fits[f"iip2_{side}"].get(key)
            if iip2 is not None and iip2.is_number:
                gain = float(np.nanmedian(rows["if_level_dbm"].to_numpy(dtype=float) - x))
                xs = np.array([float(x.min()) - 2.0, iip2.value + 2.0])
                ax.plot(xs, iip2.value + gain + 2.0 * (xs - iip2.value), linestyle=":",
                        color=PLUM, linewidth=1.0)
                break
        if valid_x:
            ax.axvspan(min(valid_x) - 0.5, max(valid_x) + 0.5, color=OCHRE, alpha=0.13,
                       linewidth=0, label="fit range")
        headline = fits["iip3"].get(key)
        note = [f"IIP3 {figure_text(headline, 2)}"] if headline is not None else []
        if (iip2 := fits["iip2"].get(key)) is not None:
            note.append(f"IIP2 {figure_text(iip2, 1)}")
        ax.set_title(label + ("\n" + ", ".join(note) if note else ""), fontsize=9, color=INK)
        ax.set_xlabel("input power per tone (dBm)")
        ax.set_ylabel("output power per product (dBm)")
        low = np.nanmin(rows[[c for c in rows if c.endswith("_level_dbm")
                              and not c.endswith("atten_level_dbm")]].to_numpy(dtype=float))
        high = np.nanmax(rows["if_level_dbm"].to_numpy(dtype=float))
        if math.isfinite(low) and math.isfinite(high):
            ax.set_ylim(low - 10.0, max(high + 15.0, _top_oip(fits, key) + 5.0))
        right = max([float(x.max())] + [f.value for n in ("iip3_low", "iip3_high")
                                         if (f := fits[n].get(key)) is not None and f.is_number])
        ax.set_xlim(float(x.min()) - 3.0, right + 4.0)
        _legend(ax, fontsize=7, loc="lower right")
    for ax in axes_list[len(shown):]:
        ax.set_visible(False)
    extra = f" (first {MAX_PANELS} of {len(groups)} sweeps)" if len(groups) > MAX_PANELS else ""
    return _finish(fig, "two_tone", "Two-tone intermodulation",
                   "Fundamental and intermodulation products at the IF port versus input "
                   "power per tone; dashed: the slope-1 and slope-3 lines of the fits, meeting "
                   "at the intercept (star); shaded: the drives the fit used; faded: readings "
                   "in the noise, overloaded or analyzer-made" + extra + ".")


def gain_vs_lo_drive(run: RunFigures) -> Plot | None:
    """Conversion gain versus LO power, one line per temperature; the LO drive needed for
    full gain marked."""
    studies = run.studies_with(ROLE_LO_DRIVE)
    if not studies:
        return None
    table = gain_table(run.captures, study=studies)
    if table.empty:
        return None
    fig, ax = _figure(1, 1, height_in=4.0)
    fixed = tuple(k for k in _KEY_COLUMNS if k != "lo_power_dbm")
    needed = _by_conditions(run.figures_named("lo_power_for_gain"), fixed)
    keys = _varying(table, ("study", "temperature_c", "supply_v", "rf_freq_hz", "rf_power_dbm"))
    for label, rows in _groups(table, keys):
        rows = rows.sort_values("lo_power_dbm")
        colour = temperature_colour(_first(rows, "temperature_c"))
        ax.plot(rows["lo_power_dbm"], rows["gain_db"], marker="o", markersize=3.5,
                linewidth=1.6, color=colour, label=label)
        figure = needed.get(_condition_key(rows.iloc[0], fixed))
        if figure is not None and math.isfinite(figure.value):
            ax.axvline(figure.value, color=colour, linestyle="--", linewidth=0.9)
            ax.annotate(f"{figure_text(figure, 0)}", (figure.value, float(rows["gain_db"].min())),
                        textcoords="offset points", xytext=(4, 4), fontsize=8, color=colour)
    _min_span(ax, 2.0)
    ax.set_xlabel("LO power at the LO port (dBm)")
    ax.set_ylabel("conversion gain (dB)")
    _legend(ax)
    return _finish(fig, "lo_drive", "Gain versus LO drive",
                   "Conversion gain versus LO power; dashed: the lowest LO power from which "
                   "the gain stays within 0.5 dB of its maximum. Studies: " + ", ".join(studies))


def spur_chart(run: RunFigures) -> Plot | None:
    """The m×n spur table as a heat-map in dBc, one panel per spur point."""
    studies = run.studies_with(ROLE_SPURS)
    if not studies:
        return None
    table = spur_table(run.captures, study=studies)
    if table.empty:
        return None
    points = list(table.groupby("point", sort=True))
    shown = points[:MAX_PANELS]
    cols = min(len(shown), 3)
    rows_n = math.ceil(len(shown) / cols)
    fig, axes = _figure(rows_n, cols, height_in=4.2 * rows_n)
    axes_list = list(np.atleast_1d(axes).ravel())
    norm = Normalize(*SPUR_RANGE_DBC)
    image = None
    for ax, (point, rows) in zip(axes_list, shown, strict=False):
        ms = sorted(set(rows["m"].astype(int)))
        ns = sorted(set(rows["n"].astype(int)))
        grid = np.full((len(ns), len(ms)), np.nan)
        for _, r in rows.iterrows():
            grid[ns.index(int(r["n"])), ms.index(int(r["m"]))] = r["dbc"]
        image = ax.imshow(grid, cmap=SPUR_MAP, norm=norm, aspect="auto", origin="lower")
        for _, r in rows.iterrows():
            i, j = ns.index(int(r["n"])), ms.index(int(r["m"]))
            value = float(r["dbc"])
            text = "n/a" if not math.isfinite(value) else f"{value:.0f}"
            if int(r["bound"]) < 0:
                text = "<" + text
            flags = set(r["flag_names"])
            if flags & {"analyzer_distortion", "overload", "atten_carrier_moved"}:
                text += "*"
            shade = norm(value) if math.isfinite(value) else 0.0
            ax.text(j, i, text, ha="center", va="center", fontsize=7,
                    color="white" if shade > 0.55 else INK)
        ax.set_xticks(range(len(ms)), [str(m) for m in ms])
        ax.set_yticks(range(len(ns)), [str(n) for n in ns])
        ax.set_xlabel("m (LO multiplier)")
        ax.set_ylabel("n (RF multiplier)")
        first = rows.iloc[0]
        ax.set_title(f"point {point}: {_label_of(first, ('study', 'temperature_c'))}\n"
                     f"RF {first['rf_freq_hz'] / 1e9:.4g} GHz at {first['rf_power_dbm']:g} dBm, "
                     f"LO {first['lo_power_dbm']:g} dBm", fontsize=8.5, color=INK)
    for ax in axes_list[len(shown):]:
        ax.set_visible(False)
    if image is not None:
        bar = fig.colorbar(image, ax=axes_list[: len(shown)], shrink=0.85)
        bar.set_label("spur level relative to the wanted IF (dBc)")
    extra = f" (first {MAX_PANELS} of {len(points)} points)" if len(points) > MAX_PANELS else ""
    return _finish(fig, "spurs", "m×n spur table",
                   "Each cell: the product at |m·f_LO + n·f_RF| at the IF port, in dBc of the "
                   "wanted output at the same point; '<' an upper bound (in the noise), '*' a "
                   "reading flagged as analyzer-made or overloaded; the wanted product is "
                   "left out" + extra + ".")


def isolation_vs_frequency(run: RunFigures) -> Plot | None:
    """LO leakage isolation versus LO frequency, and RF→IF isolation and image rejection
    versus RF frequency, one line per temperature."""
    studies = run.studies_with(ROLE_ISOLATION) + run.studies_with(ROLE_IMAGE)
    if not studies:
        return None
    lo_names = ("lo_if_isolation", "lo_rf_isolation")
    rf_names = ("rf_if_isolation", "image_rejection")
    frames = {n: _figure_frame(run.figures_named(n)) for n in (*lo_names, *rf_names)}
    swept = {n: f for n, f in frames.items() if not f.empty}
    if not swept:
        return None
    # Prefer the points of frequency sweeps (a study at one frequency adds a vertical smear).
    for name, frame in list(swept.items()):
        axis = "lo_freq_hz" if name in lo_names else "rf_freq_hz"
        counts = frame.groupby("study")[axis].nunique()
        keep = counts[counts > 1].index
        if len(keep):
            swept[name] = frame[frame["study"].isin(keep)]
    fig, (ax_lo, ax_rf) = _figure(1, 2, height_in=4.2)
    styles = {"lo_if_isolation": ("-", "o", "LO→IF"), "lo_rf_isolation": ("--", "s", "LO→RF"),
              "rf_if_isolation": ("-", "o", "RF→IF"), "image_rejection": ("--", "s", "image")}
    for name, frame in swept.items():
        ax = ax_lo if name in lo_names else ax_rf
        axis = "lo_freq_hz" if name in lo_names else "rf_freq_hz"
        line, marker, text = styles[name]
        for temp, rows in frame.groupby("temperature_c", dropna=False, sort=True):
            rows = rows.sort_values(axis)
            t = float(temp) if isinstance(temp, int | float) else None
            bound = rows["bound"].to_numpy() == ">"
            label = text + (f", {t:g} °C" if t is not None and math.isfinite(t) else "")
            ax.plot(rows[axis] / 1e9, rows["value"], linestyle=line, marker=marker,
                    markersize=3.5, linewidth=1.4, color=temperature_colour(t), label=label)
            if bound.any():
                ax.plot(rows[axis][bound] / 1e9, rows["value"][bound], "^", color=INK,
                        markersize=4, linestyle="none")
    ax_lo.set_xlabel("LO frequency (GHz)")
    ax_lo.set_ylabel("isolation (dB)")
    ax_lo.set_title("LO leakage: LO power − leaked power", fontsize=9, color=MUTED)
    ax_rf.set_xlabel("RF frequency (GHz)")
    ax_rf.set_ylabel("isolation / rejection (dB)")
    ax_rf.set_title("RF feedthrough and image", fontsize=9, color=MUTED)
    for ax in (ax_lo, ax_rf):
        if ax.lines:
            _legend(ax, fontsize=7)
        else:
            ax.text(0.5, 0.5, "not measured", transform=ax.transAxes, ha="center",
                    color=MUTED)
    return _finish(fig, "isolation", "Leakage and isolation versus frequency",
                   "Isolation = drive power at its port − the leaked power at the other port "
                   "(larger is better); image rejection = gain at the wanted RF − gain at the "
                   "image; ▲: a lower bound (leakage in the noise).")


def soak_curves(run: RunFigures) -> Plot | None:
    """Each adaptive soak: the DUT probe temperature and the settling criterion's readings
    (relative to the last one) against the time since the probe reached the set point."""
    curves = [ev.details for ev in run.events
              if ev.kind == "soak_curve" and ev.details.get("time_s")]
    if not curves:
        return None
    fig, (probe_ax, value_ax) = _figure(1, 2, height_in=3.4)  # type: ignore[misc]
    unit = ""
    for details in curves:
        times = np.asarray(details["time_s"], dtype=float) / 60.0
        values = np.asarray(details["value"], dtype=float)
        temp = float(details["temperature_c"])
        colour = temperature_colour(temp)
        unit = str(details.get("unit", ""))
        scale, unit = (1e3, "mA") if unit == "A" else (1.0, unit)
        end = "settled" if details.get("settled") else "not settled"
        probe_ax.plot(times, details["probe_c"], marker="o", markersize=3, color=colour,
                      label=f"{temp:g} °C ({end})")
        value_ax.plot(times, (values - values[-1]) * scale, marker="o", markersize=3,
                      color=colour, label=f"{temp:g} °C")
    probe_ax.set_xlabel("time since the probe reached the set point (min)")
    probe_ax.set_ylabel("DUT probe (°C)")
    value_ax.set_xlabel("time since the probe reached the set point (min)")
    by = str(curves[0].get("by", "gain"))
    value_ax.set_ylabel(f"{'gain' if by == 'gain' else 'supply current'} − last reading "
                        f"({unit})")
    _legend(probe_ax)
    _legend(value_ax)
    return _finish(fig, "soak_curves", "Adaptive soaks",
                   "Each soak of [conditions.adaptive_soak]: left, the DUT probe temperature; "
                   "right, the settling criterion read during the soak, relative to its last "
                   "reading. The soak ends when the readings over the window spread by no "
                   "more than the drift allowed (after the minimum, at most the maximum). "
                   "From the run's soak_curve events.")


# -- helpers -----------------------------------------------------------------------------------


def _figure(rows: int, cols: int, *, height_in: float) -> tuple[MplFigure, object]:
    fig = MplFigure(figsize=(WIDTH_IN, height_in), dpi=DPI, facecolor=PAPER,
                    layout="constrained")
    FigureCanvasAgg(fig)
    axes = fig.subplots(rows, cols, squeeze=True)
    for ax in np.atleast_1d(axes).ravel():
        _style(ax)
    return fig, axes


def _style(ax: Axes) -> None:
    ax.set_facecolor("white")
    ax.grid(True, color=GRID, linewidth=0.7)
    ax.set_axisbelow(True)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    for side in ("left", "bottom"):
        ax.spines[side].set_color(MUTED)
    ax.tick_params(colors=INK, labelsize=8)
    ax.xaxis.label.set_color(INK)
    ax.yaxis.label.set_color(INK)
    ax.xaxis.label.set_size(9)
    ax.yaxis.label.set_size(9)


def _legend(ax: Axes, fontsize: float = 8, loc: str = "best") -> None:
    handles, _labels = ax.get_legend_handles_labels()
    if handles:
        ax.legend(fontsize=fontsize, frameon=False, labelcolor=INK, loc=loc)


def _finish(fig: MplFigure, key: str, title: str, caption: str) -> Plot:
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png", dpi=DPI, facecolor=PAPER,
                metadata={"Software": None})
    width, height = fig.canvas.get_width_height()
    return Plot(key, title, caption, buffer.getvalue(), int(width), int(height))


def _min_span(ax: Axes, span_db: float) -> None:
    """Widen the y axis to at least ``span_db`` so readings scatter does not look like a
    trend (a flat 0.02 dB would otherwise fill the panel)."""
    low, high = ax.get_ylim()
    if high - low < span_db:
        middle = 0.5 * (low + high)
        ax.set_ylim(middle - span_db / 2.0, middle + span_db / 2.0)


def _limit_band(ax: Axes, run: RunFigures, name: str) -> None:
    for limit in run.limits:
        if limit.name != name:
            continue
        low = limit.min if limit.min is not None else -np.inf
        high = limit.max if limit.max is not None else np.inf
        if math.isfinite(low):
            ax.axhline(low, color=MOSS, linestyle="--", linewidth=0.9)
        if math.isfinite(high):
            ax.axhline(high, color=MOSS, linestyle="--", linewidth=0.9)
        if math.isfinite(low) and math.isfinite(high):
            ax.axhspan(low, high, color=MOSS, alpha=0.06, linewidth=0)


def _varying(table: pd.DataFrame, keys: Sequence[str]) -> list[str]:
    """The keys whose values differ across the table (the others need no label)."""
    return [k for k in keys if k in table and table[k].nunique(dropna=True) > 1]


def _groups(table: pd.DataFrame, keys: Sequence[str]) -> list[tuple[str, pd.DataFrame]]:
    if not keys:
        return [(_label_of(table.iloc[0], ("temperature_c",)), table)]
    out = []
    for _, rows in table.groupby(list(keys), dropna=False, sort=True):
        out.append((_label_of(rows.iloc[0], keys), rows))
    return out


def _label_of(row: pd.Series, keys: Sequence[str]) -> str:
    parts = []
    for key in keys:
        value = row.get(key)
        if value is None or (isinstance(value, float) and not math.isfinite(value)):
            continue
        if key == "study":
            parts.append(str(value))
        elif key == "temperature_c":
            parts.append(f"{float(value):g} °C")
        elif key == "supply_v":
            parts.append(f"{float(value):g} V")
        elif key.endswith("_freq_hz"):
            parts.append(f"{key.split('_')[0].upper()} {float(value) / 1e9:.4g} GHz")
        elif key.endswith("_dbm"):
            parts.append(f"{key.split('_')[0].upper()} {float(value):g} dBm")
    return ", ".join(parts) or "all points"


def _first(rows: pd.DataFrame, column: str) -> float | None:
    if column not in rows or rows.empty:
        return None
    value = rows[column].iloc[0]
    return float(value) if pd.notna(value) else None


def _sweep_label(rows: pd.DataFrame) -> str:
    return _label_of(rows.iloc[0], ("temperature_c", "supply_v")) + (
        f", LO {float(rows['lo_power_dbm'].iloc[0]):g} dBm" if "lo_power_dbm" in rows else "")


_KEY_COLUMNS = ("study", "temperature_c", "supply_v", "lo_freq_hz", "lo_power_dbm",
                "rf_freq_hz")


def _condition_key(
    source: Mapping[str, object] | pd.Series, columns: Sequence[str] = _KEY_COLUMNS
) -> tuple[object, ...]:
    """A hashable key of the conditions a sweep and its figures share."""
    out: list[object] = []
    for k in columns:
        v = source.get(k)
        if isinstance(v, float | int | np.floating) and not isinstance(v, bool):
            v = float(f"{float(v):.9g}") if math.isfinite(float(v)) else None
        out.append(v)
    return tuple(out)


def _by_conditions(
    figures: Sequence[Figure], columns: Sequence[str] = _KEY_COLUMNS
) -> dict[tuple[object, ...], Figure]:
    return {_condition_key(f.conditions, columns): f for f in figures}


def _point_powers(run: RunFigures, points: Sequence[int]) -> list[float]:
    caps = run.captures
    rows = caps[caps["point"].isin(list(points))]
    return [float(v) for v in rows["rf_power_dbm"].unique() if math.isfinite(v)]


def _top_oip(fits: Mapping[str, Mapping[tuple[object, ...], Figure]],
             key: tuple[object, ...]) -> float:
    values = [f.value for n in ("oip3_low", "oip3_high") if (f := fits[n].get(key))
              is not None and f.is_number]
    return max(values) if values else -math.inf


def _figure_frame(figures: Sequence[Figure]) -> pd.DataFrame:
    rows = [{
        "value": f.value, "bound": f.bound or "",
        "study": f.conditions.get("study"),
        "temperature_c": f.conditions.get("temperature_c", np.nan),
        "rf_freq_hz": f.conditions.get("rf_freq_hz", np.nan),
        "lo_freq_hz": f.conditions.get("lo_freq_hz", np.nan),
    } for f in figures if math.isfinite(f.value)]
    return pd.DataFrame(rows, columns=["value", "bound", "study", "temperature_c", "rf_freq_hz",
                                       "lo_freq_hz"])
