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

import gc
import io
import itertools
import math
import operator
from collections.abc import Callable, Iterator, Mapping, Sequence
from dataclasses import dataclass

import matplotlib
import numpy as np
import pandas as pd
from matplotlib.axes import Axes
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.colors import LinearSegmentedColormap, Normalize
from matplotlib.figure import Figure as MplFigure
from matplotlib.lines import Line2D
from matplotlib.ticker import MaxNLocator

from sweeprig.analysis.captures import (
    ATTEN_CHECK,
    CARRIER,
    OUTPUT_FREQ,
    POINT,
    READING,
    STUDY,
    point_levels,
    point_table,
)
from sweeprig.analysis.compression import compression_table
from sweeprig.analysis.figures import Figure, flag_bit, flags_from_mask
from sweeprig.analysis.gain import gain_table
from sweeprig.analysis.reduce import RunFigures
from sweeprig.analysis.roles import (
    ROLE_COMPRESSION,
    ROLE_FLATNESS,
    ROLE_GAIN,
    ROLE_IMAGE,
    ROLE_ISOLATION,
    ROLE_LO_DRIVE,
    ROLE_SIDEBAND,
    ROLE_SPURS,
    ROLE_TWO_TONE,
)
from sweeprig.analysis.spurs import spur_table
from sweeprig.report.tables import figure_label, figure_text

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
#: Panels per row of a small-multiples grid.
GRID_COLUMNS = 3


@dataclass(frozen=True)
class Plot:
    """One rendered plot: ``key`` (stable name), ``title``, ``caption`` (what it shows and
    where the numbers come from), the PNG bytes and the image size in pixels.

    ``corners``: every corner drawn, as :func:`corner_label` text over ``corner_keys`` (the
    corner settings that do not form the plot's x axis); ``studies``: the studies it draws.
    A check can compare them with the corners the captures hold: no corner is dropped."""

    key: str
    title: str
    caption: str
    png: bytes
    width_px: int
    height_px: int
    corners: tuple[str, ...] = ()
    corner_keys: tuple[str, ...] = ()
    studies: tuple[str, ...] = ()


def all_plots(run: RunFigures) -> list[Plot]:
    """Every plot the run has data for, in report order."""
    from sweeprig.report.noise_plot import noise_figure_plot  # it builds on this module

    makers: tuple[Callable[[RunFigures], Plot | None], ...] = (
        gain_vs_frequency, compression_curves, figures_vs_frequency, two_tone_plot,
        intermod_dbc_plot, gain_vs_lo_drive, isolation_vs_frequency, spur_chart,
        noise_figure_plot, soak_curves,
    )
    plots = []
    for make in makers:
        plot = make(run)
        # A drawn figure is garbage in reference cycles (figure, axes, artists and its
        # canvas' pixel buffer, megabytes a plot): collected now, its objects still young,
        # not whenever the collector next runs; while a large report's tables are fed to
        # their helper the collector is paused (the slices are many acyclic objects), and
        # every plot would stay until the end (a 100k-point report: +20 MB at its peak).
        gc.collect(1)
        if plot is not None:
            plots.append(plot)
    return plots


def temperature_colour(temperature_c: float | None) -> str:
    """The colour of a temperature (room colour when unknown)."""
    if temperature_c is None or not math.isfinite(temperature_c):
        return MOSS
    low, high = TEMPERATURE_RANGE_C
    rgba = TEMPERATURE_MAP(float(np.clip((temperature_c - low) / (high - low), 0.0, 1.0)))
    return "#{:02x}{:02x}{:02x}".format(*(round(255 * c) for c in rgba[:3]))


#: The corner settings a plot must show every value combination of (unless one is its x axis).
CORNER_KEYS: tuple[str, ...] = ("temperature_c", "supply_v", "lo_power_dbm")


def corner_label(row: Mapping[str, object] | pd.Series, keys: Sequence[str]) -> str:
    """A corner as text, ``temperature_c=25|supply_v=3.3|lo_power_dbm=0`` (values ``:g``;
    a key without a finite value is left out)."""
    parts = []
    for key in keys:
        value = row.get(key)
        if isinstance(value, int | float | np.floating) and math.isfinite(float(value)):
            parts.append(f"{key}={float(value):g}")
    return "|".join(parts)


# -- the figures a plot reads ------------------------------------------------------------------

#: The condition columns :func:`figure_frame` always has (NaN where a figure lacks one).
FRAME_CONDITIONS: tuple[str, ...] = ("temperature_c", "supply_v", "lo_power_dbm", "rf_freq_hz",
                                     "lo_freq_hz", "rf2_freq_hz", OUTPUT_FREQ)
#: The columns of :func:`figure_frame` before the condition columns.
FRAME_COLUMNS: tuple[str, ...] = ("name", "value", "unit", "bound", "uncertainty_db", "flags",
                                  "points", "study")


def figure_frame(run: RunFigures, names: str | Sequence[str]) -> pd.DataFrame:
    """The run's figures called ``names`` as one table, a row a figure in reduction order.

    Columns: :data:`FRAME_COLUMNS` (``value`` in ``unit``; ``bound`` "" for a number, "<" or
    ">" for a bound; ``uncertainty_db`` the expanded uncertainty, k = 2, NaN without a budget;
    ``flags`` and ``points`` tuples of flag names and store point indices; ``study`` the
    study's name), then :data:`FRAME_CONDITIONS` and every other condition key the figures
    carry (SI units, NaN where a figure lacks it). Every plot reads figures through here and
    nowhere else, so the source can change (a columnar figure store) without touching a plot.
    """
    from sweeprig.analysis.figure_table import BASE_COLUMNS, figure_columns

    _positions, table = figure_columns(run.figures, [names] if isinstance(names, str)
                                       else names, conditions=run.figure_conditions)
    count = table["value"].size
    masks = table["flags"].tolist()
    flag_sets = {m: flags_from_mask(m) for m in set(masks)}
    flags = np.empty(count, dtype=object)
    flags[:] = [flag_sets[m] for m in masks]
    columns: dict[str, object] = {
        "name": table["name"],
        "value": table["value"],
        "unit": table["unit"],
        "bound": table["bound"],
        "uncertainty_db": table["uncertainty_db"],
        "flags": flags,
        "points": table["points"],
    }
    # the condition columns, as the figures' mappings give them: a key a figure lacks is
    # None for the study, NaN elsewhere
    kept = [key for key in table if key not in BASE_COLUMNS]
    if "study" in table:
        study = table["study"]
        columns["study"] = np.where(study == "", None, study)
    else:
        columns["study"] = np.full(count, None, dtype=object)
    for key in FRAME_CONDITIONS:
        columns[key] = table[key] if key in table else np.full(count, np.nan)
    for key in kept:
        if key != "study" and key not in FRAME_CONDITIONS:
            values = table[key]
            columns[key] = (np.where(values == "", np.nan, values) if values.dtype == object
                            else values)
    frame = pd.DataFrame(columns)
    for key in ("value", "uncertainty_db", *FRAME_CONDITIONS):
        if frame[key].dtype != np.float64:
            frame[key] = pd.to_numeric(frame[key], errors="coerce").astype(float)
    return frame


def _frame_figure(row: Mapping[str, object]) -> Figure:
    """A figure rebuilt from a :func:`figure_frame` row, for :func:`figure_text`."""
    bound = str(row.get("bound") or "") or None
    return Figure(str(row["name"]), float(row["value"]), str(row["unit"]),  # type: ignore[arg-type]
                  bound,  # type: ignore[arg-type]
                  uncertainty_db=float(row["uncertainty_db"]))  # type: ignore[arg-type]


# -- the plots ---------------------------------------------------------------------------------


def gain_vs_frequency(run: RunFigures) -> Plot | None:
    """Conversion gain versus the output frequency where the output moves (or the input
    frequency where the output stays put), one line per temperature, one panel per study,
    supply and LO drive, with the conversion-gain limits drawn inside the axis."""
    studies = run.studies_with(ROLE_FLATNESS) or run.studies_with(ROLE_GAIN)
    if not studies:
        return None
    table = gain_table(run.captures, study=studies)
    if table.empty:
        return None
    if OUTPUT_FREQ not in table.columns:
        table[OUTPUT_FREQ] = table["if_freq_hz"]
    port_in, port_out = ("IF", "RF") if run.conversion == "up" else ("RF", "IF")
    panels = _groups(table, _varying(table, ("study", "supply_v", "lo_power_dbm")))
    fig, axes_list = _grid(len(panels), height_in=3.4, single_height_in=4.2)
    corners: list[str] = []
    axes_named: list[str] = []
    dense = False
    for ax, (title, rows) in zip(axes_list, panels, strict=False):
        out_varies = bool(rows.groupby("study")[OUTPUT_FREQ].nunique().gt(1).any())
        axis, axis_text = ((OUTPUT_FREQ, f"output ({port_out}) frequency (GHz)") if out_varies
                           else ("rf_freq_hz", f"input ({port_in}) frequency (GHz)"))
        axes_named.append("output" if out_varies else "input (the output frequency is fixed)")
        series = _groups(rows, _varying(rows, ("temperature_c", "rf_power_dbm")))
        for k, (label, line) in enumerate(series):
            line = line.sort_values(axis)
            _line(ax, line[axis].to_numpy(dtype=float) / 1e9, line["gain_db"].to_numpy(),
                  marker="o", markersize=3.5, linewidth=1.6,
                  color=temperature_colour(_first(line, "temperature_c")),
                  linestyle=LINE_STYLES[(k // 5) % len(LINE_STYLES)], label=label)
            dense = dense or len(line) > MARKER_POINTS
            corners += _corners(line, CORNER_KEYS)
        _min_span(ax, 2.0)
        _limit_lines(ax, run, "conversion_gain", studies, band=True)
        ax.set_xlabel(axis_text)
        ax.set_ylabel("conversion gain (dB)")
        if len(panels) > 1:
            _title(ax, title, fontsize=9, color=INK)
    _legends(axes_list[:len(panels)], fontsize=7)
    against = " or ".join(dict.fromkeys(axes_named))
    return _finish(fig, "gain_vs_frequency", "Conversion gain versus frequency",
                   f"P_out − P_in at the DUT ports against the {against} frequency, one line "
                   "per temperature"
                   + (", one panel per study, supply and LO drive" if len(panels) > 1 else "")
                   + "; green band: the conversion-gain limits of the sequence. Studies: "
                   + ", ".join(studies) + "." + (DENSE_SENTENCE if dense else ""),
                   corners=corners, corner_keys=CORNER_KEYS,
                   studies=studies)


def compression_curves(run: RunFigures) -> Plot | None:
    """Output and gain versus input of every power sweep, P1dB marked on each curve and
    listed in the curve's colour; one panel per supply and LO drive, the curves at the middle
    input frequency and, when the study swept the frequency, the spread of the gain over every
    frequency shaded behind them."""
    studies = run.studies_with(ROLE_COMPRESSION)
    if not studies:
        return None
    table = compression_table(run.captures, study=studies)
    if table.empty:
        return None
    # the drive step of each point within its sweep, for the spread over the frequencies
    table = table.sort_values(["sweep", "input_dbm"], kind="stable")
    table = table.assign(_step=table.groupby("sweep", sort=False).cumcount().to_numpy())
    shown, thinned = thin_frequencies(table, keep=1)
    # (the curves drawn are the shown ones: only their figures are looked up)
    p1 = _by_conditions(figure_frame(run, "input_p1db"), asked_from=shown)
    p1_out = _by_conditions(figure_frame(run, "output_p1db"), asked_from=shown)
    port_in = "IF" if run.conversion == "up" else "RF"  # an upconverter's input is its IF
    keys = _varying(table, ("study", "supply_v", "lo_power_dbm"))
    every = dict(_groups(table, keys)) if keys else {}
    panels = _groups(shown, keys)
    single = len(panels) == 1
    if single:
        fig, (ax_out, ax_gain) = _figure(1, 2, height_in=4.4)  # type: ignore[misc]
        pairs = [(ax_out, ax_gain, panels[0])]
    else:
        fig, axes_list = _grid(len(panels), height_in=3.3, single_height_in=4.2)
        pairs = [(None, ax, panel) for ax, panel in zip(axes_list, panels, strict=False)]
    corners: list[str] = []
    for ax_out, ax_gain, (title, rows) in pairs:
        notes: list[tuple[str, str]] = []
        freqs = sorted(rows["rf_freq_hz"].dropna().unique())
        by = ("temperature_c", "rf_freq_hz") if len(freqs) > 1 else ("temperature_c",)
        if thinned:
            for temp, spread in every.get(title, table).groupby("temperature_c", dropna=False,
                                                                sort=True):
                colour = temperature_colour(float(temp) if pd.notna(temp) else None)
                _spread_band(ax_gain, spread, step="_step", x="input_dbm",
                             y="gain_db", colour=colour)
                if ax_out is not None:
                    _spread_band(ax_out, spread, step="_step", x="input_dbm",
                                 y="output_dbm", colour=colour)
        for _, sweep in rows.groupby("sweep", sort=True):
            sweep = sweep.sort_values("input_dbm")
            temp = _first(sweep, "temperature_c")
            colour = temperature_colour(temp)
            label = _label_of(sweep.iloc[0], by)
            style = LINE_STYLES[freqs.index(sweep["rf_freq_hz"].iloc[0]) % len(LINE_STYLES)] \
                if len(freqs) > 1 else "-"
            x, out, gain = sweep["input_dbm"], sweep["output_dbm"], sweep["gain_db"]
            corners += _corners(sweep, CORNER_KEYS)
            if ax_out is not None:
                ax_out.plot(x, out, marker="o", markersize=3, linewidth=1.5, color=colour,
                            label=label)
                linear = sweep[sweep["linear"].to_numpy(dtype=bool)]
                gss = float(np.median(linear["gain_db"])) if len(linear) else float(
                    gain.iloc[0])
                ax_out.plot(x, x + gss, linestyle=":", linewidth=1.0, color=colour, alpha=0.7)
            ax_gain.plot(x, gain, marker="o", markersize=3, linewidth=1.5, color=colour,
                         label=label, linestyle=style)
            key = _condition_key(sweep.iloc[0])
            fin, fout = p1.get(key), p1_out.get(key)
            if fin is None or not math.isfinite(fin.value):
                notes.append((colour, f"{label}: no P1dB"))
                continue
            if fin.bound is None and fout is not None:
                if ax_out is not None:
                    ax_out.plot([fin.value], [fout.value], marker="D", markersize=7,
                                color=colour, markeredgecolor=INK, zorder=5)
                ax_gain.plot([fin.value], [fout.value - fin.value], marker="D", markersize=7,
                             color=colour, markeredgecolor=INK, zorder=5)
            notes.append((colour, f"{label}: input P1dB {figure_text(fin, 1)}"))
        _min_span(ax_gain, 2.0)
        _note_block(ax_gain, notes)
        ax_gain.set_xlabel(f"input power at the {port_in} port (dBm)")
        ax_gain.set_ylabel("conversion gain (dB)")
        if ax_out is not None:
            ax_out.set_xlabel(f"input power at the {port_in} port (dBm)")
            ax_out.set_ylabel("output power (dBm)")
            _title(ax_out, "output versus input (dotted: small-signal line)", fontsize=9,
                             color=MUTED)
            _title(ax_gain, "gain versus input (◆: 1 dB compression)", fontsize=9,
                              color=MUTED)
            _legend(ax_out, fontsize=7, loc="upper left")
        else:
            _title(ax_gain, title, fontsize=9, color=INK)
    return _finish(fig, "compression", "Gain compression",
                   "Single-tone power sweeps: "
                   + ("output power and " if single else "")
                   + "conversion gain versus input power at the DUT ports, one curve per "
                   "temperature (and frequency)" + ("" if single else ", one panel per supply "
                                                    "and LO drive")
                   + "; the diamond marks the 1 dB compression point, listed in the curve's "
                   "colour. Studies: " + ", ".join(studies) + thinned
                   + (f" {SPREAD_SENTENCE} Input P1dB at every frequency: in the plot of "
                      "compression and intercept versus frequency." if thinned else ""),
                   corners=corners, corner_keys=CORNER_KEYS, studies=studies)


def figures_vs_frequency(run: RunFigures) -> Plot | None:
    """Input P1dB and IIP3 versus input frequency, when a compression or two-tone study
    swept the frequency; one line per corner."""
    frames = {n: _finite(figure_frame(run, n)) for n in ("input_p1db", "iip3")}
    names = [n for n, frame in frames.items() if _swept_in_frequency(frame)]
    if not names:
        return None
    fig, axes_list = _grid(len(names), height_in=3.6, single_height_in=4.0)
    corners: list[str] = []
    studies: list[str] = []
    dense = False
    for ax, name in zip(axes_list, names, strict=False):
        frame = frames[name]
        frame = frame[frame["study"].isin(
            frame.groupby("study")["rf_freq_hz"].nunique().loc[lambda c: c > 1].index)]
        studies += [s for s in dict.fromkeys(frame["study"]) if s not in studies]
        for k, (label, rows) in enumerate(_groups(frame, _varying(frame, (
                "study", "temperature_c", "supply_v", "lo_power_dbm")))):
            rows = rows.sort_values("rf_freq_hz")
            dense = dense or len(rows) > MARKER_POINTS
            _bounded_line(ax, rows["rf_freq_hz"].to_numpy() / 1e9, rows,
                          colour=temperature_colour(_first(rows, "temperature_c")),
                          linestyle=LINE_STYLES[(k // 5) % len(LINE_STYLES)], label=label)
            corners += _corners(rows, CORNER_KEYS)
        _limit_lines(ax, run, name, studies)
        ax.set_xlabel("input (RF) frequency (GHz)")
        ax.set_ylabel(f"{figure_label(name)} (dBm)")
    _legends(axes_list[:len(names)], fontsize=7)
    return _finish(fig, "figures_vs_frequency", "Compression and intercept versus frequency",
                   "Input P1dB and IIP3 of the studies that swept the frequency, one line per "
                   "corner; open triangles: bounds (the true value lies beyond, in the "
                   "triangle's direction), not joined to the measured line."
                   + (DENSE_SENTENCE if dense else ""),
                   corners=corners, corner_keys=CORNER_KEYS, studies=studies)


_TWO_TONE_KEYS = ("study", "supply_v", "lo_power_dbm", "lo_freq_hz", "rf_freq_hz",
                  "rf2_freq_hz")


def _thinned_two_tone_points(run: RunFigures) -> tuple[list[str], pd.DataFrame, str]:
    """The two-tone points at the middle input frequency (each corner keeps one): the
    frequencies are chosen from the captures' wanted readings, and only their points are
    made into a table (a large run's whole two-tone table is several times the captures
    it comes from)."""
    studies = run.studies_with(ROLE_TWO_TONE)
    captures = run.captures
    if not studies or captures.empty:
        return studies, pd.DataFrame(), ""
    ours = captures[STUDY].isin(studies).to_numpy(dtype=bool)
    # the points with a wanted reading (not the attenuation repeat), as the table has them
    carriers = ours & (captures[READING] == CARRIER).to_numpy(dtype=bool) & \
        ~captures[ATTEN_CHECK].to_numpy(dtype=bool)
    keys = [c for c in ("rf_freq_hz", *CORNER_KEYS) if c in captures]
    points = captures.loc[carriers, [POINT, *keys]].drop_duplicates(POINT, keep="last")
    shown, thinned = thin_frequencies(points.sort_values(POINT, kind="stable"), keep=1)
    kept = np.unique(shown["rf_freq_hz"].to_numpy(dtype=float))
    rows = ours & captures["rf_freq_hz"].isin(kept).to_numpy(dtype=bool)
    names = ("im3_low", "im3_high", "im2_low", "im2_high")
    table = point_table(captures[rows], names, study=studies, where="two-tone plot")
    return studies, table[table["if_present"].to_numpy()], thinned


def two_tone_plot(run: RunFigures) -> Plot | None:
    """Fundamental and IM3 versus input power per tone, with the slope-1 and slope-3 lines
    of the fits meeting at the intercept; one panel per supply, LO drive and frequency, one
    colour per temperature."""
    studies, table, thinned = _thinned_two_tone_points(run)
    if table.empty:
        return None
    panels = _groups(table, _varying(table, _TWO_TONE_KEYS))
    fig, axes_list = _grid(len(panels), height_in=3.7, single_height_in=4.6)
    fits = {n: _by_conditions(figure_frame(run, n), asked_from=table) for n in
            ("iip3_low", "oip3_low", "iip3_high", "oip3_high", "iip3")}
    corners: list[str] = []
    for ax, (title, rows) in zip(axes_list, panels, strict=False):
        notes: list[tuple[str, str]] = []
        tops: list[float] = []
        for sweep, colour, label, x in _power_sweeps(rows):
            corners += _corners(sweep, CORNER_KEYS)
            ax.plot(x, sweep["if_level_dbm"], "o", color=colour, markersize=4)
            for name, marker in (("im3_low", "v"), ("im3_high", "^")):
                if f"{name}_present" not in sweep or not sweep[f"{name}_present"].any():
                    continue
                level = sweep[f"{name}_level_dbm"].to_numpy(dtype=float)
                doubtful = (sweep[f"{name}_flags"].to_numpy(dtype=np.int64) & _DOUBTFUL) != 0
                face = "none" if name.endswith("high") else colour
                ax.plot(x[~doubtful], level[~doubtful], marker, color=colour, markersize=4,
                        markerfacecolor=face, linestyle="none")
                if doubtful.any():
                    ax.plot(x[doubtful], level[doubtful], marker, color=colour, markersize=4,
                            markerfacecolor=face, alpha=0.3, linestyle="none")
            key = _condition_key(sweep.iloc[0])
            iip, oip = fits["iip3_low"].get(key), fits["oip3_low"].get(key)
            if iip is not None and oip is not None and iip.is_number and \
                    math.isfinite(oip.value):
                xs = np.array([float(x.min()) - 2.0, max(iip.value, float(x.max())) + 2.0])
                gain = oip.value - iip.value
                ax.plot(xs, xs + gain, linestyle="--", color=colour, linewidth=0.9)
                ax.plot(xs, oip.value + 3.0 * (xs - iip.value), linestyle="--",
                        color=colour, linewidth=0.9)
                ax.plot([iip.value], [oip.value], "*", color=colour, markersize=11,
                        markeredgecolor=INK, zorder=5)
                tops += [iip.value, oip.value]
            headline = fits["iip3"].get(key)
            notes.append((colour, f"{label}: IIP3 "
                          + (figure_text(headline, 1) if headline is not None else "n/a")))
        _note_block(ax, notes, loc="lower right")
        _title(ax, title if len(panels) > 1 else "", fontsize=9, color=INK)
        ax.set_xlabel("input power per tone (dBm)")
        ax.set_ylabel("output power per product (dBm)")
        levels = rows[[c for c in ("if_level_dbm", "im3_low_level_dbm", "im3_high_level_dbm")
                       if c in rows]].to_numpy(dtype=float)
        if np.isfinite(levels).any():
            low, high = float(np.nanmin(levels)), float(np.nanmax(levels))
            top = max([high + 12.0, *(t + 5.0 for t in tops[1::2])])
            ax.set_ylim(low - 25.0, top)
        xs_all = rows["rf_power_dbm"].to_numpy(dtype=float)
        ax.set_xlim(float(np.nanmin(xs_all)) - 3.0,
                    max([float(np.nanmax(xs_all)), *tops[0::2]]) + 4.0)
    handles = [Line2D([], [], marker="o", color=INK, linestyle="none", label="fundamental"),
               Line2D([], [], marker="v", color=INK, linestyle="none", label="IM3 lower"),
               Line2D([], [], marker="^", color=INK, markerfacecolor="none", linestyle="none",
                      label="IM3 upper"),
               Line2D([], [], color=INK, linestyle="--", label="fitted lines"),
               Line2D([], [], marker="*", color=INK, linestyle="none", label="intercept")]
    axes_list[0].legend(handles=handles, fontsize=7, frameon=False, loc="upper left")
    return _finish(fig, "two_tone", "Two-tone intermodulation",
                   "Fundamental and IM3 products at the output versus input power per tone, "
                   "one colour per temperature"
                   + (", one panel per supply, LO drive and frequency" if len(panels) > 1
                      else "")
                   + "; dashed: the slope-1 and slope-3 lines of the lower product's fit, "
                   "meeting at the intercept (star); faded: readings in the noise, overloaded "
                   "or analyzer-made. IIP3 of each curve listed in its colour." + thinned
                   + (" IIP3 at every frequency: in the plot of compression and intercept "
                      "versus frequency." if thinned else ""),
                   corners=corners, corner_keys=CORNER_KEYS, studies=studies)


def intermod_dbc_plot(run: RunFigures) -> Plot | None:
    """IM3 and IM2 relative to the fundamental (dBc) versus input power per tone; one panel
    per supply and LO drive, one colour per temperature: the median over the input
    frequencies as a line, their spread (lowest to highest) shaded."""
    studies = run.studies_with(ROLE_TWO_TONE)
    if not studies or run.captures.empty:
        return None
    # every two-tone point, its levels alone (point_levels: the points with a wanted reading)
    table = point_levels(run.captures, (CARRIER, "im3_low", "im3_high", "im2_low", "im2_high"),
                         study=studies)
    table = table[table[f"{CARRIER}_present"].to_numpy()]
    if table.empty:
        return None
    fund = table["if_level_dbm"].to_numpy(dtype=float)
    orders: dict[str, str] = {}
    for order in ("im3", "im2"):
        cols = [f"{order}_{s}_level_dbm" for s in ("low", "high")
                if f"{order}_{s}_present" in table and table[f"{order}_{s}_present"].any()]
        if cols:
            levels = table[cols].to_numpy(dtype=float)
            worst = np.full(len(table), np.nan)
            seen = np.isfinite(levels).any(axis=1)
            worst[seen] = np.nanmax(levels[seen], axis=1) - fund[seen]
            orders[order] = f"_{order}_dbc"
            table = table.assign(**{orders[order]: worst})
    if not orders:
        return None
    freq_count = int(table["rf_freq_hz"].nunique())
    panels = _groups(table, _varying(table, ("study", "supply_v", "lo_power_dbm")))
    fig, axes_list = _grid(len(panels), height_in=3.3, single_height_in=3.9)
    corners: list[str] = []
    for ax, (title, rows) in zip(axes_list, panels, strict=False):
        for temp, sweep in rows.groupby("temperature_c", dropna=False, sort=True):
            t = float(temp) if pd.notna(temp) else None
            colour = temperature_colour(t)
            label = _label_of(sweep.iloc[0], ("temperature_c",))
            corners += _corners(sweep, CORNER_KEYS)
            for order, style in (("im3", "-"), ("im2", "--")):
                if order not in orders:
                    continue
                column = orders[order]
                line = sweep.groupby("rf_power_dbm", sort=True)[column].median().dropna()
                if line.empty:
                    continue
                ax.plot(line.index.to_numpy(dtype=float), line.to_numpy(dtype=float),
                        linestyle=style, marker="o", markersize=3, color=colour,
                        label=f"{order.upper()}, {label}")
                if freq_count > 1:
                    _spread_band(ax, sweep, step="rf_power_dbm", x="rf_power_dbm", y=column,
                                 colour=colour)
        ax.set_xlabel("input power per tone (dBm)")
        ax.set_ylabel("product relative to the fundamental (dBc)")
        if len(panels) > 1:
            _title(ax, title, fontsize=9, color=INK)
    _legends(axes_list[:len(panels)], fontsize=7)
    over = (f" Line: the median over the {freq_count} input frequencies; shaded: their spread "
            "(lowest to highest) at each drive." if freq_count > 1 else "")
    return _finish(fig, "intermod_dbc", "Intermodulation in dBc",
                   "The stronger of the two IM3 (solid) and IM2 (dashed) products, relative to "
                   "the fundamental at the same drive, one colour per temperature; upper "
                   "bounds where a product is in the noise." + over,
                   corners=corners, corner_keys=CORNER_KEYS, studies=studies)


_LO_CORNERS = ("temperature_c", "supply_v")


def gain_vs_lo_drive(run: RunFigures) -> Plot | None:
    """Conversion gain versus LO power, one line per temperature, one panel per supply; the
    LO drive needed for full gain marked and listed in the line's colour."""
    studies = run.studies_with(ROLE_LO_DRIVE)
    if not studies:
        return None
    table = gain_table(run.captures, study=studies)
    if table.empty:
        return None
    shown, thinned = thin_frequencies(table, keep=1)
    fixed = tuple(k for k in _KEY_COLUMNS if k != "lo_power_dbm")
    needed = _by_conditions(figure_frame(run, "lo_power_for_gain"), fixed, asked_from=shown)
    keys = _varying(shown, ("study", "supply_v", "rf_freq_hz", "rf_power_dbm"))
    spread_keys = [k for k in keys if k != "rf_freq_hz"]
    panels = _groups(shown, keys)
    fig, axes_list = _grid(len(panels), height_in=3.4, single_height_in=4.0)
    corners: list[str] = []
    for ax, (title, rows) in zip(axes_list, panels, strict=False):
        notes: list[tuple[str, str]] = []
        if thinned:
            every = table
            for key in spread_keys:
                every = every[every[key] == rows[key].iloc[0]]
            for temp, spread in every.groupby("temperature_c", dropna=False, sort=True):
                _spread_band(ax, spread, step="lo_power_dbm", x="lo_power_dbm", y="gain_db",
                             colour=temperature_colour(float(temp) if pd.notna(temp)
                                                       else None))
        for label, line in _groups(rows, _varying(rows, ("temperature_c",))):
            line = line.sort_values("lo_power_dbm")
            colour = temperature_colour(_first(line, "temperature_c"))
            ax.plot(line["lo_power_dbm"], line["gain_db"], marker="o", markersize=3.5,
                    linewidth=1.6, color=colour, label=label)
            corners += _corners(line, _LO_CORNERS)
            figure = needed.get(_condition_key(line.iloc[0], fixed))
            if figure is not None and math.isfinite(figure.value):
                ax.axvline(figure.value, color=colour, linestyle="--", linewidth=0.9)
                notes.append((colour, f"{label}: full gain from {figure_text(figure, 0)}"))
        _min_span(ax, 2.0)
        _note_block(ax, notes, loc="lower right")
        ax.set_xlabel("LO power at the LO port (dBm)")
        ax.set_ylabel("conversion gain (dB)")
        if len(panels) > 1:
            _title(ax, title, fontsize=9, color=INK)
    return _finish(fig, "lo_drive", "Gain versus LO drive",
                   "Conversion gain versus LO power, one line per temperature; dashed: the "
                   "lowest LO power from which the gain stays within 0.5 dB of its maximum, "
                   "listed in the line's colour. Studies: " + ", ".join(studies) + thinned
                   + (f" {SPREAD_SENTENCE}" if thinned else ""),
                   corners=corners, corner_keys=_LO_CORNERS, studies=studies)


#: Leakage figures drawn by :func:`isolation_vs_frequency`.
_ISOLATION: dict[str, tuple[str, tuple[str, ...]]] = {
    # figure (trade name) → (label, the frequencies to plot it against, first that varies)
    "lo_if_isolation": ("LO→IF isolation", ("lo_freq_hz", "output_freq_hz", "rf_freq_hz")),
    "lo_rf_isolation": ("LO→RF isolation", ("lo_freq_hz", "output_freq_hz", "rf_freq_hz")),
    "rf_if_isolation": ("RF→IF isolation", ("rf_freq_hz", "lo_freq_hz", "output_freq_hz")),
    "if_rf_isolation": ("IF→RF isolation", ("rf_freq_hz", "output_freq_hz", "lo_freq_hz")),
    "image_rejection": ("image rejection", ("rf_freq_hz", "lo_freq_hz", "output_freq_hz")),
    "lo_leakage": ("LO leakage at the RF port", ("output_freq_hz", "lo_freq_hz", "rf_freq_hz")),
    "lo_suppression": ("LO (carrier) suppression",
                       ("output_freq_hz", "lo_freq_hz", "rf_freq_hz")),
    "sideband_suppression": ("unwanted-sideband suppression",
                             ("output_freq_hz", "lo_freq_hz", "rf_freq_hz")),
}


def _frequency_axis_text(column: str, conversion: str) -> str:
    """The axis title of a frequency column in the words of the part's ``conversion``."""
    port_in, port_out = ("IF", "RF") if conversion == "up" else ("RF", "IF")
    return {"lo_freq_hz": "LO frequency (GHz)",
            "output_freq_hz": f"output ({port_out}) frequency (GHz)",
            "rf_freq_hz": f"input ({port_in}) frequency (GHz)"}[column]


def isolation_vs_frequency(run: RunFigures) -> Plot | None:
    """Each leakage figure (isolations, image rejection and an upconverter's LO leakage and
    suppressions) versus the frequency its study sweeps, in a panel of its own, one line per
    corner, its limits drawn; bounds (leakage in the noise) as open triangles, not joined to
    the line."""
    studies = list(dict.fromkeys(run.studies_with(ROLE_ISOLATION) + run.studies_with(ROLE_IMAGE)
                                 + run.studies_with(ROLE_SIDEBAND)))
    if not studies:
        return None
    frames: dict[str, tuple[pd.DataFrame, str]] = {}
    for name, (_, axes) in _ISOLATION.items():
        frame = _finite(figure_frame(run, name))
        frame = frame[frame["study"].isin(studies)]
        if frame.empty:
            continue
        # the first frequency some study sweeps (one frequency would be a vertical smear),
        # and only the studies that sweep it
        for axis in axes:
            counts = frame.groupby("study")[axis].nunique()
            keep = counts[counts > 1].index
            if len(keep):
                frames[name] = (frame[frame["study"].isin(keep)], axis)
                break
        else:
            frames[name] = (frame, axes[0])
    if not frames:
        return None
    fig, axes_list = _grid(len(frames), height_in=3.4, single_height_in=4.0, columns=2)
    corners: list[str] = []
    drawn: list[str] = []
    dense = False
    for ax, (name, (frame, axis)) in zip(axes_list, frames.items(), strict=False):
        text = _ISOLATION[name][0]
        unit = str(frame["unit"].iloc[0])
        drawn += [s for s in dict.fromkeys(frame["study"]) if s not in drawn]
        series = _groups(frame, _varying(frame, ("study", "temperature_c", "supply_v",
                                                 "lo_power_dbm")))
        for k, (label, rows) in enumerate(series):
            rows = rows.sort_values(axis)
            dense = dense or len(rows) > MARKER_POINTS
            _bounded_line(ax, rows[axis].to_numpy() / 1e9, rows,
                          colour=temperature_colour(_first(rows, "temperature_c")),
                          linestyle=LINE_STYLES[(k // 5) % len(LINE_STYLES)], label=label)
            corners += _corners(rows, CORNER_KEYS)
        _min_span(ax, 4.0)
        _limit_lines(ax, run, name, list(frame["study"].unique()))
        ax.set_xlabel(_frequency_axis_text(axis, run.conversion))
        ax.set_ylabel(f"{text} ({unit})")
    _legends(axes_list[:len(frames)], fontsize=7)
    return _finish(fig, "isolation", "Leakage and isolation versus frequency",
                   "Isolation = drive power at its port − the leaked power at the other port "
                   "(larger is better); image rejection = gain at the wanted input − gain at "
                   "the image; LO and sideband suppression = wanted output − the unwanted line "
                   "at the output (dBc, larger is better); LO leakage: the LO's level at the "
                   "output (dBm, smaller is better); one line per corner; dashed green: the "
                   "sequence's limits; open ▲/▼: a bound (a line in the noise), drawn apart "
                   "from the measured line." + (DENSE_SENTENCE if dense else ""),
                   corners=corners, corner_keys=CORNER_KEYS, studies=drawn)


def spur_chart(run: RunFigures) -> Plot | None:
    """Every m×n product over frequency (dBc, every point), the output band shaded and the
    products the worst-spur figure counts filled; beside it the m×n table of the worst level
    of each product over all points."""
    studies = run.studies_with(ROLE_SPURS)
    if not studies:
        return None
    table = spur_table(run.captures, study=studies)
    if table.empty:
        return None
    counted_frame = figure_frame(run, "spur_dbc")
    # (a large run has a spur figure for every product at every point: each figure's
    # points tuple read at C speed)
    points = counted_frame["points"].tolist()
    has_point = np.fromiter(map(len, points), dtype=np.int64, count=len(points)) > 0
    counted_frame = counted_frame[has_point]
    first_points = np.fromiter(map(operator.itemgetter(0), itertools.compress(points, has_point)),
                               dtype=np.int64, count=int(has_point.sum()))
    mn = [c for c in ("m", "n") if c in counted_frame]
    counted_keys = pd.DataFrame({
        "point": first_points,
        "m": (pd.to_numeric(counted_frame["m"], errors="coerce").fillna(0.0) if "m" in mn
              else pd.Series(0.0, index=counted_frame.index)).to_numpy(dtype=float),
        "n": (pd.to_numeric(counted_frame["n"], errors="coerce").fillna(0.0) if "n" in mn
              else pd.Series(0.0, index=counted_frame.index)).to_numpy(dtype=float),
    }).drop_duplicates()
    counted = set(zip(counted_keys["point"], counted_keys["m"].astype(int),
                      counted_keys["n"].astype(int), strict=True))
    keyed = pd.DataFrame({"point": table["point"].to_numpy(dtype=np.int64),
                          "m": table["m"].to_numpy(dtype=float).astype(int).astype(float),
                          "n": table["n"].to_numpy(dtype=float).astype(int).astype(float)})
    is_counted = keyed.merge(counted_keys.assign(hit=True), how="left",
                             on=["point", "m", "n"])["hit"].notna().to_numpy(dtype=bool)
    bands: set[tuple[float, float]] = set()
    if {"band_low_hz", "band_high_hz"} <= set(counted_frame.columns):
        edges = counted_frame[["band_low_hz", "band_high_hz"]].apply(
            pd.to_numeric, errors="coerce").dropna().drop_duplicates()
        bands = {(float(lo), float(hi)) for lo, hi in edges.itertuples(index=False)}
    fig, (ax, ax_table) = _figure(1, 2, height_in=4.6,  # type: ignore[misc]
                                  width_ratios=(1.6, 1.0), right=0.94, top_in=0.5)
    corners: list[str] = []
    for low, high in sorted(bands):
        ax.axvspan(low / 1e9, high / 1e9, color=MOSS, alpha=0.12, linewidth=0)
    marks = _one_per_pixel(table.assign(counted=is_counted,
                                        below=table["bound"].to_numpy() < 0),
                           x="freq_hz", y="dbc", by=("temperature_c", "counted", "below"))
    corners += _corners(table, CORNER_KEYS)
    for temp, rows in marks.groupby("temperature_c", dropna=False, sort=True):
        t = float(temp) if isinstance(temp, int | float) else None
        colour = temperature_colour(t)
        x = rows["freq_hz"].to_numpy(dtype=float) / 1e9
        y = rows["dbc"].to_numpy(dtype=float)
        below = rows["below"].to_numpy(dtype=bool)
        mine = rows["counted"].to_numpy(dtype=bool)
        label = f"{t:g} °C" if t is not None and math.isfinite(t) else "all"
        ax.plot(x[mine & ~below], y[mine & ~below], "o", color=colour, markersize=4,
                label=label)
        ax.plot(x[~mine & ~below], y[~mine & ~below], "o", color=colour, markersize=4,
                markerfacecolor="none")
        ax.plot(x[below], y[below], "v", color=colour, markersize=4, markerfacecolor="none",
                alpha=0.6)
    finite = counted_frame[np.isfinite(counted_frame["value"].to_numpy(dtype=float))]
    if len(counted) and len(finite):
        worst = finite.loc[finite["value"].idxmax()]
        at = float(worst["freq_hz"]) if "freq_hz" in worst else math.nan
        ax.annotate(f"worst counted {int(float(worst['m']))}×"
                    f"{int(float(worst['n']))}: {float(worst['value']):.1f} dBc",
                    (at / 1e9, float(worst["value"])),
                    textcoords="offset points", xytext=(6, 6), fontsize=8, color=INK)
    _limit_lines(ax, run, "spur_dbc", studies)
    ax.set_xlabel("product frequency (GHz)")
    ax.set_ylabel("level relative to the wanted output (dBc)")
    _title(ax, "every product at every point (● counted, ○ left out, ▽ in the noise)",
                 fontsize=8.5, color=MUTED)
    _legend(ax, fontsize=7)
    # the m×n table of each product's worst level over every point
    worst_cell = table.groupby(["n", "m"])["dbc"].max()
    ms = sorted({int(m) for m in table["m"]})
    ns = sorted({int(n) for n in table["n"]})
    grid = np.full((len(ns), len(ms)), np.nan)
    for (n, m), value in worst_cell.items():
        grid[ns.index(int(n)), ms.index(int(m))] = value
    norm = Normalize(*SPUR_RANGE_DBC)
    image = ax_table.imshow(grid, cmap=SPUR_MAP, norm=norm, aspect="auto", origin="lower")
    ax_table.grid(False)
    counted_mn = set(counted_keys[["m", "n"]].drop_duplicates().astype(int).itertuples(
        index=False, name=None))
    for (n, m), value in worst_cell.items():
        i, j = ns.index(int(n)), ms.index(int(m))
        text = "n/a" if not math.isfinite(value) else f"{value:.0f}"
        if (int(m), int(n)) not in counted_mn:
            text = f"({text})"
        shade = norm(value) if math.isfinite(value) else 0.0
        ax_table.text(j, i, text, ha="center", va="center", fontsize=6.5,
                      color="white" if shade > 0.55 else INK)
    ax_table.set_xticks(range(len(ms)), [str(m) for m in ms])
    ax_table.set_yticks(range(len(ns)), [str(n) for n in ns])
    ax_table.set_xlabel("m (LO multiplier)")
    ax_table.set_ylabel("n (input multiplier)")
    _title(ax_table, "worst level over every point, dBc\n(in brackets: not counted)",
                       fontsize=8.5, color=MUTED)
    bar = fig.colorbar(image, ax=ax_table, shrink=0.85)
    bar.set_label("dBc", fontsize=8)
    return _finish(fig, "spurs", "m×n spurs over the output band",
                   "Each product |m·f_LO + n·f_in| read at the output, in dBc of the wanted "
                   "output at the same point, at every point of the spur studies (colour: "
                   "temperature); shaded: the output band the sequence states; filled: the "
                   "products the worst-spur figure counts (inside the band, not named "
                   "expected); ▽: an upper bound (in the noise). The wanted product is not a "
                   "spur and is left out; markers that would fall on the same pixel are drawn "
                   "once.",
                   corners=corners, corner_keys=CORNER_KEYS, studies=studies)


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

#: A plot that draws a panel or a curve per input frequency (power sweeps, LO-drive sweeps)
#: draws at most this many frequencies: the lowest, the middle and the highest (the band edges
#: and centre a datasheet states).
FREQUENCIES_SHOWN = 3


def thin_frequencies(table: pd.DataFrame, column: str = "rf_freq_hz",
                     keep: int = FREQUENCIES_SHOWN) -> tuple[pd.DataFrame, str]:
    """The rows of at most ``keep`` of the table's input frequencies (the lowest, the highest
    and evenly spaced between), and a caption sentence saying so ("" when all are kept).

    A run that sweeps a hundred frequencies would otherwise draw a hundred panels or curves
    per plot, which nobody can read and which costs seconds each; the figures of every
    frequency are in figures.json, the tables and the plots versus frequency. No corner
    (:data:`CORNER_KEYS`) is dropped: a corner measured only at frequencies left out keeps
    its middle one."""
    if column not in table or table.empty:
        return table, ""
    freqs = np.unique(table[column].dropna().to_numpy(dtype=float))
    if freqs.size <= keep:
        return table, ""
    picks = (np.unique(np.round(np.linspace(0, freqs.size - 1, keep)).astype(int))
             if keep > 1 else np.array([freqs.size // 2]))
    shown = table[column].isin(freqs[picks]).to_numpy()
    present = [k for k in CORNER_KEYS if k in table]
    if present:
        extra: list[float] = []
        every = table[column].to_numpy(dtype=float)
        for at in table.groupby(present, dropna=False, sort=False).indices.values():
            if not shown[at].any():
                values = np.sort(every[at][np.isfinite(every[at])])
                if values.size:
                    extra.append(float(values[values.size // 2]))
        if extra:
            shown = shown | table[column].isin(extra).to_numpy()
    kept = int(np.unique(table.loc[shown, column].dropna()).size)
    which = "the middle one" if keep == 1 else "the lowest, the highest and evenly between"
    return (table[shown], f" Drawn at {kept} of the {freqs.size} input frequencies ({which}); "
            "every frequency's figures are in figures.json and the tables.")



#: What a shaded spread means, for the captions.
SPREAD_SENTENCE = ("Shaded in each curve's colour: the spread (lowest to highest) over every "
                   "input frequency at each drive step.")


def _spread_band(ax: Axes, rows: pd.DataFrame, *, step: str, x: str, y: str,
                 colour: str) -> None:
    """The lowest-to-highest spread of ``y`` over the rows of each ``step`` value (the
    frequencies a curve stands for), shaded against the mean ``x`` of that step: one
    artist however many frequencies it summarises."""
    steps = rows[step].to_numpy(dtype=float)
    xs = rows[x].to_numpy(dtype=float)
    ys = rows[y].to_numpy(dtype=float)
    keep = np.isfinite(steps) & np.isfinite(xs) & np.isfinite(ys)
    if not keep.any():
        return
    order = np.argsort(steps[keep], kind="stable")
    steps, xs, ys = steps[keep][order], xs[keep][order], ys[keep][order]
    _values, starts = np.unique(steps, return_index=True)
    if starts.size < 2:
        return
    low = np.minimum.reduceat(ys, starts)
    high = np.maximum.reduceat(ys, starts)
    middle = np.add.reduceat(xs, starts) / np.diff(np.append(starts, xs.size))
    ax.fill_between(middle, low, high, color=colour, alpha=0.16, linewidth=0)


#: The plot area's resolution in markers: a marker's position is rounded to 1/PIXELS_X of the
#: x range and 1/PIXELS_Y of the y range before duplicates are dropped (finer than a pixel of
#: the drawn axes, about 560 × 330 px).
PIXELS_X, PIXELS_Y = 1200, 800


def _one_per_pixel(table: pd.DataFrame, *, x: str, y: str,
                   by: Sequence[str]) -> pd.DataFrame:
    """The rows of ``table`` less those whose marker (same ``by`` values) would be drawn on
    the very same pixel as another's: the picture is unchanged and the drawing cost is bounded
    by the plot's area, not by the number of readings. Rows with a non-finite x or y stay."""
    xs = table[x].to_numpy(dtype=float)
    ys = table[y].to_numpy(dtype=float)
    finite = np.isfinite(xs) & np.isfinite(ys)
    if finite.sum() < 2:
        return table
    def cell(v: np.ndarray, steps: int) -> np.ndarray:
        low, high = float(v[finite].min()), float(v[finite].max())
        width = (high - low) / steps if high > low else 1.0
        return np.where(finite, np.floor((v - low) / width), -1.0)
    keys = table[list(by)].copy()
    keys["_x"], keys["_y"] = cell(xs, PIXELS_X), cell(ys, PIXELS_Y)
    return table[~keys.duplicated().to_numpy() | ~finite]


def _power_sweeps(rows: pd.DataFrame) -> Iterator[tuple[pd.DataFrame, str, str, np.ndarray]]:
    """Each temperature's power sweep in ``rows``, sorted by input power: (its rows, its
    colour, its label, the input powers in dBm)."""
    for _, sweep in rows.groupby("temperature_c", dropna=False, sort=True):
        sweep = sweep.sort_values("rf_power_dbm")
        yield (sweep, temperature_colour(_first(sweep, "temperature_c")),
               _label_of(sweep.iloc[0], ("temperature_c",)),
               sweep["rf_power_dbm"].to_numpy(dtype=float))


def _figure(rows: int, cols: int, *, height_in: float,
            width_ratios: Sequence[float] | None = None, right: float = 0.985,
            top_in: float = 0.35) -> tuple[MplFigure, object]:
    """A figure of rows × cols panels with fixed margins (in inches, so a tall grid keeps its
    titles and labels clear): a layout engine measures every label's box before drawing,
    which cost more than the drawing itself."""
    fig = MplFigure(figsize=(WIDTH_IN, height_in), dpi=DPI, facecolor=PAPER)
    FigureCanvasAgg(fig)
    panel_in = height_in / rows
    margins = {"left": 0.075, "right": right, "bottom": 0.55 / height_in,
               "top": 1.0 - top_in / height_in, "wspace": 0.3,
               "hspace": (0.9 / panel_in) if rows > 1 else 0.2}
    axes = fig.subplots(rows, cols, squeeze=True, gridspec_kw=margins,
                        width_ratios=list(width_ratios) if width_ratios else None)
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
    # a few labelled ticks (3 to 5 on a "nice" step): each tick is five artists made at the
    # first draw, and its label's layout and glyphs are most of a panel's drawing time
    # (4 bins instead of 5: about 10 % less drawing, measured on a six-panel figure)
    ax.xaxis.set_major_locator(MaxNLocator(nbins=4))
    ax.yaxis.set_major_locator(MaxNLocator(nbins=4))
    ax.xaxis.label.set_color(INK)
    ax.yaxis.label.set_color(INK)
    ax.xaxis.label.set_size(9)
    ax.yaxis.label.set_size(9)


def _title(ax: Axes, text: str, **style: object) -> None:
    """A panel title at a fixed height above the axes (an automatic one measures every tick
    label of the panel to clear them, a cost per panel)."""
    ax.set_title(text, y=1.0, pad=5.0, **style)  # type: ignore[arg-type]


def _legend(ax: Axes, fontsize: float = 8, loc: str = "best") -> None:
    handles, _labels = ax.get_legend_handles_labels()
    if handles:
        ax.legend(fontsize=fontsize, frameon=False, labelcolor=INK, loc=loc)


def _legends(axes: Sequence[Axes], fontsize: float = 8) -> None:
    """A legend in each panel, or in the first panel only when every panel draws the same
    series in the same colours and styles (small multiples: one key serves them all, and a
    legend is one of the costlier things to draw)."""
    def look(handle: object) -> tuple[object, ...]:
        if isinstance(handle, Line2D):
            return (handle.get_color(), handle.get_linestyle(), handle.get_marker())
        return (type(handle).__name__,)

    entries = [ax.get_legend_handles_labels() for ax in axes]
    first = [(label, look(h)) for h, label in zip(*entries[0], strict=True)] if entries else []
    if len(axes) > 1 and first and all(
            [(label, look(h)) for h, label in zip(*e, strict=True)] == first for e in entries):
        _legend(axes[0], fontsize)
        return
    for ax in axes:
        _legend(ax, fontsize)


def _grid(count: int, *, height_in: float, single_height_in: float,
          columns: int = GRID_COLUMNS) -> tuple[MplFigure, list[Axes]]:
    """A small-multiples grid of ``count`` panels (unused cells hidden), every panel drawn:
    nothing is left out for want of room."""
    cols = max(1, min(count, columns))
    rows = max(1, math.ceil(count / cols))
    height = single_height_in if count == 1 else height_in * rows
    fig, axes = _figure(rows, cols, height_in=height)
    axes_list = list(np.atleast_1d(axes).ravel())  # type: ignore[arg-type]
    for ax in axes_list[count:]:
        ax.set_visible(False)
    return fig, axes_list[:max(count, 1)]


def _note_block(ax: Axes, notes: Sequence[tuple[str, str]], loc: str = "lower left") -> None:
    """Per-curve notes (colour, text) stacked in a corner of the panel, each in its curve's
    colour: one line each, so labels never overlap one another."""
    if not notes:
        return
    left = loc.endswith("left")
    top = loc.startswith("upper")
    for i, (colour, text) in enumerate(notes):
        step = 0.065 * i
        ax.text(0.02 if left else 0.98, (0.96 - step) if top else (0.04 + step), text,
                transform=ax.transAxes, ha="left" if left else "right",
                va="top" if top else "bottom", fontsize=7, color=colour,
                bbox={"facecolor": "white", "edgecolor": "none", "alpha": 0.75, "pad": 0.6})


def _outer_labels(fig: MplFigure) -> None:
    """In a grid of panels that all carry the same axis title, keep the x title on the lowest
    panel of each column and the y title on the leftmost panel of each row: the same words
    once per row or column instead of once per panel (each text costs its layout and glyphs
    at every draw)."""
    panels = [ax for ax in fig.axes if ax.get_visible() and ax.get_subplotspec() is not None
              and ax.get_label() != "<colorbar>"]
    if len(panels) < 2:
        return
    cells = {ax: ax.get_subplotspec().get_topmost_subplotspec() for ax in panels}
    for axis in ("x", "y"):
        texts = {ax.get_xlabel() if axis == "x" else ax.get_ylabel() for ax in panels}
        if len(texts) != 1 or texts == {""}:
            continue
        for ax in panels:
            rows, cols = cells[ax].rowspan, cells[ax].colspan
            if axis == "x":
                covered = any(cells[o].rowspan.start >= rows.stop and
                              cells[o].colspan.start == cols.start for o in panels)
                if covered:
                    ax.set_xlabel("")
            else:
                covered = any(cells[o].colspan.stop <= cols.start and
                              cells[o].rowspan.start == rows.start for o in panels)
                if covered:
                    ax.set_ylabel("")


def _finish(fig: MplFigure, key: str, title: str, caption: str, *,
            corners: Sequence[str] = (), corner_keys: Sequence[str] = (),
            studies: Sequence[str] = ()) -> Plot:
    _outer_labels(fig)
    buffer = io.BytesIO()
    # zlib level 3: as small as the default level 6 for these flat-coloured images (within
    # 3 %), in about 60 % of the time (measured on the 10k-point report's plots); glyphs
    # without hinting: text is half of the drawing, and unhinted glyphs are made about a
    # tenth faster in all (the 100k-point report's plots: 2.44 -> 2.18 s), as legible
    with matplotlib.rc_context({"text.hinting": "no_hinting"}):
        fig.savefig(buffer, format="png", dpi=DPI, facecolor=PAPER,
                    metadata={"Software": None}, pil_kwargs={"compress_level": 3})
    width, height = fig.canvas.get_width_height()
    return Plot(key, title, caption, buffer.getvalue(), int(width), int(height),
                tuple(sorted(set(corners))), tuple(corner_keys), tuple(studies))


def _corners(rows: pd.DataFrame, keys: Sequence[str]) -> list[str]:
    """The corner labels of the rows drawn."""
    present = [k for k in keys if k in rows]
    if not present or rows.empty:
        return []
    corner_rows = rows[present]
    if len(corner_rows) > 4096:  # hashing in pandas pays off only on a long table
        corner_rows = corner_rows.drop_duplicates()
    unique = set(map(tuple, corner_rows.to_numpy(dtype=float).tolist()))
    return [corner_label(dict(zip(present, values, strict=True)), present) for values in unique]


def _min_span(ax: Axes, span_db: float) -> None:
    """Widen the y axis to at least ``span_db`` so readings scatter does not look like a
    trend (a flat 0.02 dB would otherwise fill the panel)."""
    low, high = ax.get_ylim()
    if high - low < span_db:
        middle = 0.5 * (low + high)
        ax.set_ylim(middle - span_db / 2.0, middle + span_db / 2.0)


def _limit_lines(ax: Axes, run: RunFigures, name: str, studies: Sequence[str],
                 band: bool = False) -> None:
    """The sequence's limits on figure ``name`` that apply to ``studies`` as dashed lines
    (and, with ``band``, the band between a min and a max shaded), the y axis widened so
    every edge is inside it."""
    edges: list[float] = []
    for limit in run.limits:
        if limit.name != name:
            continue
        study = limit.conditions.get("study")
        if study is not None and study not in studies:
            continue
        for edge, word in ((limit.min, "min"), (limit.max, "max")):
            if edge is not None and math.isfinite(edge):
                ax.axhline(edge, color=MOSS, linestyle="--", linewidth=1.0)
                ax.annotate(f"limit {word} {edge:g}", (1.0, edge), xycoords=("axes fraction",
                            "data"), textcoords="offset points", xytext=(-4, 2), ha="right",
                            fontsize=7, color=MOSS)
                edges.append(edge)
        if band and limit.min is not None and limit.max is not None:
            ax.axhspan(limit.min, limit.max, color=MOSS, alpha=0.10, linewidth=0)
    if edges:
        low, high = ax.get_ylim()
        span = max(high, *edges) - min(low, *edges)
        pad = 0.06 * span if span > 0 else 0.5
        ax.set_ylim(min(low, min(edges) - pad), max(high, max(edges) + pad))


#: A line of more points than this is drawn without markers: its markers would overlap
#: into a band (about 560 px of axes for hundreds of points), hiding the line they mark.
MARKER_POINTS = 120
#: Pixel columns a line is reduced to before drawing (finer than the drawn axes' width).
LINE_COLUMNS = 1200
#: What a dense line means, for the captions.
DENSE_SENTENCE = (f" A line of more than {MARKER_POINTS} points is drawn without markers, "
                  "through the first, last, lowest and highest point of each pixel column "
                  "(its extremes in every column kept: the picture of every point).")


def line_vertices(x: np.ndarray, y: np.ndarray, columns: int = LINE_COLUMNS) -> np.ndarray:
    """The indices of the points of a line (``x`` sorted) that draw the same picture at
    ``columns`` pixel columns over its x range: in each column the first, the last, the lowest
    and the highest point, in x order; a non-finite ``y`` (a break in the line) is kept with
    its neighbours, so no gap is bridged.

    The per-column first/last/min/max reduction is the M4 aggregation (Jugel et al., "M4: a
    visualization-oriented time series data aggregation", Proc. VLDB Endowment 7(10), 2014):
    a line rasterised from those four points per column keeps every column's extremes, so it
    is the line drawn from every point up to antialiasing (checked in the tests: under 1 % of
    the pixels differ by more than a quarter of full scale).
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    if x.size <= 4 * columns:
        return np.arange(x.size)
    finite = np.isfinite(x) & np.isfinite(y)
    segment = np.cumsum(~finite)  # a break starts a new segment
    low, high = (float(x[finite].min()), float(x[finite].max())) if finite.any() else (0, 1)
    width = (high - low) / columns if high > low else 1.0
    column = np.clip(np.floor((np.where(finite, x, low) - low) / width), 0, columns)
    key = segment.astype(float) * (columns + 1) + column
    starts = np.flatnonzero(np.r_[True, np.diff(key) != 0])
    ends = np.r_[starts[1:], key.size] - 1
    by_y = np.lexsort((np.where(finite, y, 0.0), key))  # within each key, by y
    keep = np.zeros(x.size, dtype=bool)
    keep[starts] = keep[ends] = True
    keep[by_y[starts]] = keep[by_y[ends]] = True
    keep |= ~finite
    return np.flatnonzero(keep)


def _line(ax: Axes, x: np.ndarray, y: np.ndarray, **style: object) -> None:
    """``ax.plot(x, y, marker="o", ...)`` of a line whose x is sorted, with markers only
    while they stay apart (:data:`MARKER_POINTS`) and through :func:`line_vertices`."""
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    if x.size > MARKER_POINTS:
        style = {**style, "marker": "None"}
        at = line_vertices(x, y)
        x, y = x[at], y[at]
    ax.plot(x, y, **style)  # type: ignore[arg-type]


def _bounded_line(ax: Axes, x: np.ndarray, rows: pd.DataFrame, *, colour: str,
                  linestyle: str | tuple, label: str) -> None:
    """Measured numbers joined by a line; bounds drawn apart as open triangles pointing the
    way the true value lies (▲ "&gt;", ▼ "&lt;"), never joined into the curve."""
    bound = rows["bound"].to_numpy()
    value = rows["value"].to_numpy(dtype=float)
    number = bound == ""
    _line(ax, np.where(number, x, np.nan), np.where(number, value, np.nan), marker="o",
          markersize=3.5, linewidth=1.4, color=colour, linestyle=linestyle, label=label)
    for symbol, marker in ((">", "^"), ("<", "v")):
        mine = bound == symbol
        if mine.any():
            bounds = pd.DataFrame({"x": np.asarray(x, dtype=float)[mine],
                                   "y": value[mine], "_": 0})
            bounds = _one_per_pixel(bounds, x="x", y="y", by=("_",))
            ax.plot(bounds["x"].to_numpy(), bounds["y"].to_numpy(), marker, color=colour,
                    markersize=5, markerfacecolor="none", linestyle="none")


def _swept_in_frequency(frame: pd.DataFrame) -> bool:
    """True when some study's figures (a :func:`figure_frame`) hold more than one input
    frequency."""
    if frame.empty:
        return False
    return bool(frame.groupby("study", dropna=False)["rf_freq_hz"].nunique().gt(1).any())


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


class _FiguresByConditions:
    """The figures of a :func:`figure_frame` by :func:`_condition_key` (the last one wins),
    made into :class:`Figure` objects only when asked for: a plot looks up a few curves'
    figures, while a many-frequency run has tens of thousands of them. ``asked_from``: a
    table holding the conditions of every key that will be asked (the curves shown); only
    the figures whose every key column takes a value of that table's are keyed."""

    def __init__(self, frame: pd.DataFrame, columns: Sequence[str],
                 asked_from: pd.DataFrame | None = None) -> None:
        self._frame = frame
        rows = np.arange(len(frame))
        coded = [_key_codes(frame, c) for c in columns]
        if asked_from is not None:
            keep = np.ones(len(frame), dtype=bool)
            for column, (keys, codes) in zip(columns, coded, strict=True):
                wanted = set(_key_column(asked_from, column))
                keep &= np.isin(codes, [j for j, key in enumerate(keys) if key in wanted])
            rows = rows[keep]
        spread = [list(map(keys.__getitem__, codes[rows].tolist())) for keys, codes in coded]
        self._rows: dict[tuple[object, ...], int] = {
            key: at for at, key in zip(rows.tolist(), zip(*spread, strict=True), strict=True)}

    def get(self, key: tuple[object, ...]) -> Figure | None:
        at = self._rows.get(key)
        if at is None:
            return None
        row = self._frame.iloc[at]
        return _frame_figure({c: row[c] for c in ("name", "value", "unit", "bound",
                                                  "uncertainty_db")})


def _key_column(frame: pd.DataFrame, column: str) -> list[object]:
    """One column of :func:`_condition_key` over every row of ``frame`` (None where the
    column is missing or not finite), numbers rounded to 9 significant digits as there."""
    keys, codes = _key_codes(frame, column)
    return list(map(keys.__getitem__, codes.tolist()))


def _key_codes(frame: pd.DataFrame, column: str) -> tuple[list[object], np.ndarray]:
    """:func:`_key_column` as its distinct keys and each row's number among them (int64):
    each distinct value keyed once (a run's conditions take a few values each)."""
    if column not in frame:
        return [None], np.zeros(len(frame), dtype=np.int64)
    values = frame[column]
    if pd.api.types.is_numeric_dtype(values) and not pd.api.types.is_bool_dtype(values):
        distinct, inverse = np.unique(values.to_numpy(dtype=float), return_inverse=True)
        keys = [float(f"{v:.9g}") if math.isfinite(v) else None for v in distinct.tolist()]
        return keys, inverse.reshape(-1).astype(np.int64)
    codes, uniques = pd.factorize(values, use_na_sentinel=True)
    keys = [_condition_key({column: v}, (column,))[0] for v in list(uniques)] + [None]
    return keys, np.where(codes < 0, len(keys) - 1, codes).astype(np.int64)


def _by_conditions(
    frame: pd.DataFrame, columns: Sequence[str] = _KEY_COLUMNS,
    asked_from: pd.DataFrame | None = None,
) -> _FiguresByConditions:
    """The figures of a :func:`figure_frame` by :func:`_condition_key` (the last one wins;
    ``asked_from``: see :class:`_FiguresByConditions`)."""
    return _FiguresByConditions(frame, columns, asked_from)


def _finite(frame: pd.DataFrame) -> pd.DataFrame:
    """The rows of a :func:`figure_frame` with a finite value (what a line can draw)."""
    return frame[np.isfinite(frame["value"].to_numpy(dtype=float))]
