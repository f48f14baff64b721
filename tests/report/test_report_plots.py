"""The plots: one per kind of study, real PNG images with something drawn on them, and
nothing drawn for a run without the data."""

from __future__ import annotations

import dataclasses
import io

import matplotlib.image
import numpy as np

from sweeprig.report.plots import all_plots, temperature_colour

PLOT_KEYS = ["gain_vs_frequency", "compression", "two_tone", "intermod_dbc", "lo_drive",
             "isolation", "spurs"]


def test_every_plot_is_drawn(report_plots):
    plots = report_plots
    assert [p.key for p in plots] == PLOT_KEYS
    for plot in plots:
        image = matplotlib.image.imread(io.BytesIO(plot.png), format="png")
        assert image.shape[:2] == (plot.height_px, plot.width_px)
        assert float(np.std(image[..., :3])) > 0.05, plot.key  # not a blank canvas
        assert plot.title and plot.caption


def test_plot_text_is_drawn_unhinted_and_the_users_settings_are_left_alone(
        report_run, monkeypatch):
    """The plots' glyphs are drawn without hinting (a tenth faster in all) inside the
    drawing only: matplotlib's settings are as they were before and after."""
    import matplotlib
    from matplotlib.backends.backend_agg import RendererAgg

    from sweeprig.report.plots import gain_vs_lo_drive

    seen: list[str] = []
    draw_text = RendererAgg.draw_text

    def noted(self, *args, **kwargs):
        seen.append(matplotlib.rcParams["text.hinting"])
        return draw_text(self, *args, **kwargs)

    monkeypatch.setattr(RendererAgg, "draw_text", noted)
    before = matplotlib.rcParams["text.hinting"]
    assert gain_vs_lo_drive(report_run) is not None
    assert seen and set(seen) == {"no_hinting"}
    assert matplotlib.rcParams["text.hinting"] == before


def test_every_drawn_figure_is_let_go_while_the_collector_is_paused(report_run):
    """all_plots collects each plot's figure (reference cycles holding its pixel buffer)
    when it is drawn: while a large report's tables are fed to their helper the cyclic
    collector is paused (sweeprig.report.table_writing), and no figure may stay until the
    end."""
    import gc

    from matplotlib.figure import Figure

    from sweeprig.analysis.figures import collector_paused

    gc.collect()
    with collector_paused():
        plots = all_plots(report_run)
        left = [o for o in gc.get_objects() if isinstance(o, Figure)]
    assert len(plots) >= 3 and left == []


def test_a_run_without_studies_draws_nothing(report_run):
    assert all_plots(dataclasses.replace(report_run, studies=())) == []


def test_cold_is_bluer_and_hot_is_redder():
    def rgb(colour: str) -> tuple[int, int, int]:
        return tuple(int(colour[i:i + 2], 16) for i in (1, 3, 5))  # type: ignore[return-value]

    cold, hot = rgb(temperature_colour(-40.0)), rgb(temperature_colour(85.0))
    assert cold[2] > cold[0] and hot[0] > hot[2]
    assert temperature_colour(None) == temperature_colour(float("nan"))


def test_a_run_of_many_frequencies_draws_a_few_and_every_corner():
    """Power-sweep plots draw at most FREQUENCIES_SHOWN input frequencies (lowest, highest,
    evenly between) and say so; a corner measured only at a frequency left out keeps one."""
    import pandas as pd

    from sweeprig.report.plots import FREQUENCIES_SHOWN, thin_frequencies

    freqs = [1.0e9 + 0.1e9 * k for k in range(12)]
    rows = [{"rf_freq_hz": f, "temperature_c": t, "supply_v": 3.3, "lo_power_dbm": 0.0}
            for f in freqs for t in (-40.0, 25.0)]
    rows.append({"rf_freq_hz": freqs[1], "temperature_c": 85.0, "supply_v": 3.3,
                 "lo_power_dbm": 0.0})  # the hot corner: one dropped frequency only
    table = pd.DataFrame(rows)
    shown, caption = thin_frequencies(table)
    kept = sorted(shown["rf_freq_hz"].unique())
    assert kept[0] == freqs[0] and kept[-1] == freqs[-1]
    assert len(kept) == FREQUENCIES_SHOWN + 1  # + the hot corner's own frequency
    assert set(shown["temperature_c"]) == {-40.0, 25.0, 85.0}
    assert f"of the {len(freqs)} input frequencies" in caption
    few = table[table["rf_freq_hz"].isin(freqs[:FREQUENCIES_SHOWN])]
    same, text = thin_frequencies(few)
    assert same is few and text == ""


def test_figure_frame_holds_every_named_figure_with_its_uncertainty_and_flags(report_run):
    """The plots' one accessor: a row per figure, in reduction order, value, bound, k = 2
    uncertainty, flags, points and the conditions as columns."""
    import math

    from sweeprig.report.plots import FRAME_COLUMNS, FRAME_CONDITIONS, figure_frame

    names = ("conversion_gain", "input_p1db")
    frame = figure_frame(report_run, names)
    expected = [f for f in report_run.figures if f.name in names]
    assert len(frame) == len(expected) > 0
    assert list(frame.columns[:len(FRAME_COLUMNS)]) == list(FRAME_COLUMNS)
    assert set(FRAME_CONDITIONS) <= set(frame.columns)
    for row, figure in zip(frame.to_dict("records"), expected, strict=True):
        assert row["name"] == figure.name and row["unit"] == figure.unit
        assert row["value"] == figure.value or not math.isfinite(figure.value)
        assert row["bound"] == (figure.bound or "")
        assert row["flags"] == tuple(figure.flags) and row["points"] == tuple(figure.points)
        assert row["study"] == figure.conditions.get("study")
        u = figure.uncertainty_db
        assert row["uncertainty_db"] == u or not (math.isfinite(u) or
                                                  math.isfinite(row["uncertainty_db"]))
        for key in FRAME_CONDITIONS:
            if key in figure.conditions:
                assert row[key] == float(figure.conditions[key])  # type: ignore[arg-type]
    assert figure_frame(report_run, "no_such_figure").empty


def test_the_plots_read_figures_through_their_one_accessor():
    """No plot reaches into run.figures itself: a columnar figure source can replace the one
    function that does."""
    import inspect

    from sweeprig.report import noise_plot, plots

    for module in (plots, noise_plot):
        source = inspect.getsource(module)
        assert "figures_named(" not in source, module.__name__
    # the one function of the plots that reads them (from the columns of a run's figures:
    # no figure of a block is made)
    source = inspect.getsource(plots)
    reader = inspect.getsource(plots.figure_frame)
    assert source.count("run.figures") == reader.count("run.figures") == 1


def test_a_figure_frame_is_the_figures_it_holds(report_run):
    """figure_frame reads the run's columns: each row is its figure, field by field, and
    its conditions as the figure's mapping gives them."""
    import math

    from sweeprig.report.plots import FRAME_CONDITIONS, figure_frame

    names = ("spur_dbc", "conversion_gain", "iip3")
    frame = figure_frame(report_run, names)
    figures = report_run.figures.named(names)[1]
    assert len(frame) == len(figures) > 10
    keys = {k for f in figures for k in f.conditions}
    assert keys <= set(frame.columns) and set(FRAME_CONDITIONS) <= set(frame.columns)
    for row, f in zip(frame.to_dict("records"), figures, strict=True):
        assert (row["name"], row["unit"], row["bound"] or None, row["flags"], row["points"]) \
            == (f.name, f.unit, f.bound, f.flags, f.points)
        for got, want in ((row["value"], f.value), (row["uncertainty_db"], f.uncertainty_db)):
            assert got == want or (math.isnan(got) and math.isnan(want))
        assert row["study"] == f.conditions.get("study")
        for key in keys - {"study"}:
            want = f.conditions.get(key)
            got = row[key]
            if want is None:
                assert got is None or (isinstance(got, float) and math.isnan(got))
            else:
                assert got == want


def test_markers_on_the_same_pixel_are_drawn_once_and_nothing_else_is_dropped():
    import pandas as pd

    from sweeprig.report.plots import PIXELS_X, _one_per_pixel

    span = 10.0
    rows = pd.DataFrame({
        "x": [0.0, 1e-9, 0.0, span, 5.0, 5.0 + 2 * span / PIXELS_X, float("nan")],
        "y": [-50.0, -50.0, -50.0, -20.0, -30.0, -30.0, -40.0],
        "t": [25.0, 25.0, 85.0, 25.0, 25.0, 25.0, 25.0],
    })
    kept = _one_per_pixel(rows, x="x", y="y", by=("t",))
    # the second row shares the first's pixel and colour; the 85 °C one has its own colour,
    # the two at 5.0 are two pixels apart, the NaN row stays (nothing is dropped silently)
    assert list(kept.index) == [0, 2, 3, 4, 5, 6]


def test_a_spread_is_shaded_from_the_lowest_to_the_highest_value_of_each_step():
    import pandas as pd
    from matplotlib.figure import Figure as MplFigure

    from sweeprig.report.plots import _spread_band

    rows = pd.DataFrame({"step": [0, 0, 0, 1, 1, 1], "x": [-10.0, -10.2, -9.8, 0.0, 0.2, 0.4],
                         "y": [5.0, 6.0, 4.0, 3.0, 2.5, 3.5]})
    ax = MplFigure().subplots()
    _spread_band(ax, rows, step="step", x="x", y="y", colour="#2d5f8a")
    (band,) = ax.collections
    vertices = band.get_paths()[0].vertices
    assert vertices[:, 1].min() == 2.5 and vertices[:, 1].max() == 6.0
    assert set(np.round(vertices[:, 0], 9)) == {-10.0, 0.2}  # the mean input of each step


def test_one_frequency_kept_is_the_middle_one_and_every_corner_stays():
    import pandas as pd

    from sweeprig.report.plots import thin_frequencies

    freqs = [1.0e9, 1.1e9, 1.2e9, 1.3e9, 1.4e9]
    rows = [{"rf_freq_hz": f, "temperature_c": 25.0} for f in freqs]
    rows.append({"rf_freq_hz": freqs[0], "temperature_c": 85.0})  # hot: the lowest only
    shown, caption = thin_frequencies(pd.DataFrame(rows), keep=1)
    assert sorted(shown["rf_freq_hz"].unique()) == [freqs[0], freqs[2]]
    assert set(shown["temperature_c"]) == {25.0, 85.0}
    assert "of the 5 input frequencies (the middle one)" in caption


def test_a_plot_that_summarises_frequencies_says_so_in_its_caption(monkeypatch):
    """Four input frequencies at two temperatures: the power-sweep plots draw the middle one
    (compression with the spread over all four shaded) and say so; the dBc plot draws the
    median and the spread; every temperature is drawn."""
    from matplotlib.figure import Figure as MplFigure

    from sweeprig.analysis.synthetic import synthetic_run
    from sweeprig.report import plots
    from tests.report.synthetic_runs import reduced_synthetic_run

    captures = synthetic_run(3_200, seed=3, temperatures_c=(25.0, 85.0), supplies_v=(3.3,),
                             lo_powers_dbm=(0.0,))
    assert captures.groupby("study")["rf_freq_hz"].nunique().min() == 4
    run = reduced_synthetic_run(captures, serial="SYN-4F")
    monkeypatch.setattr(MplFigure, "savefig", lambda self, buffer, **kwargs: None)
    made = {p.key: p for p in (plots.compression_curves(run), plots.two_tone_plot(run),
                               plots.intermod_dbc_plot(run)) if p is not None}
    assert set(made) == {"compression", "two_tone", "intermod_dbc"}
    for key in ("compression", "two_tone"):
        assert "Drawn at 1 of the 4 input frequencies (the middle one)" in made[key].caption
    assert "spread (lowest to highest) over every input frequency" in made["compression"].caption
    assert "median over the 4 input frequencies" in made["intermod_dbc"].caption
    for plot in made.values():
        assert {c.split("|")[0] for c in plot.corners} == {"temperature_c=25",
                                                           "temperature_c=85"}, plot.key


def _line_pixels(x: np.ndarray, y: np.ndarray, y_range: tuple[float, float]) -> np.ndarray:
    """A black line drawn over a whole 600 × 300 px Agg canvas, as RGB integers."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure as MplFigure

    fig = MplFigure(figsize=(6, 3), dpi=100)
    FigureCanvasAgg(fig)
    ax = fig.add_axes((0, 0, 1, 1))
    ax.set_axis_off()
    ax.plot(x, y, color="black", linewidth=1.4)
    ax.set_xlim(0.0, 1.0)
    ax.set_ylim(*y_range)
    fig.canvas.draw()
    return np.asarray(fig.canvas.buffer_rgba())[..., :3].astype(int)


def test_a_dense_line_is_drawn_from_its_extremes_per_pixel_column_and_looks_the_same():
    """M4 (Jugel et al., Proc. VLDB Endowment 7(10), 2014): the first, last, lowest and
    highest point of each pixel column draw the line of every point; a break (NaN) stays a
    break."""
    from sweeprig.report.plots import line_vertices

    rng = np.random.default_rng(1)
    x = np.sort(rng.uniform(0.0, 1.0, 20_000))
    y = np.cumsum(rng.normal(size=x.size))
    y[5_000:5_003] = np.nan
    kept = line_vertices(x, y)
    assert kept.size < x.size / 3
    assert {0, x.size - 1, 5_000, 5_001, 5_002, 4_999, 5_003} <= set(kept.tolist())
    assert int(np.nanargmax(y)) in kept and int(np.nanargmin(y)) in kept
    y_range = (float(np.nanmin(y)) - 1.0, float(np.nanmax(y)) + 1.0)
    every, reduced = _line_pixels(x, y, y_range), _line_pixels(x[kept], y[kept], y_range)
    differ = np.abs(every - reduced).max(axis=2) > 64
    assert differ.mean() < 0.01
    short = np.arange(50.0)
    assert line_vertices(short, short).tolist() == list(range(50))


def test_a_dense_frequency_line_has_no_markers_and_its_caption_says_so():
    """Figures at 200 input frequencies: the line is drawn without markers (they would merge
    into a band) and the caption says how it is drawn; bounds keep their triangles."""
    import pandas as pd
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure as MplFigure

    from sweeprig.report.plots import DENSE_SENTENCE, MARKER_POINTS, _bounded_line

    fig = MplFigure()
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()
    count = 200
    assert count > MARKER_POINTS
    bound = np.where(np.arange(count) % 50 == 7, "<", "")
    rows = pd.DataFrame({"value": np.linspace(30.0, 40.0, count), "bound": bound})
    _bounded_line(ax, np.linspace(1.8, 2.7, count), rows, colour="#000000", linestyle="-",
                  label="x")
    line, triangles = ax.lines
    assert line.get_marker() in ("None", "none", None, "")
    assert triangles.get_marker() == "v" and len(triangles.get_xdata()) == 4
    assert "without markers" in DENSE_SENTENCE


def test_panels_of_a_grid_share_their_axis_titles_on_the_outer_edge(monkeypatch):
    from matplotlib.figure import Figure as MplFigure

    from sweeprig.report.plots import _finish, _grid

    monkeypatch.setattr(MplFigure, "savefig", lambda self, buffer, **kwargs: None)
    fig, axes = _grid(5, height_in=6.0, single_height_in=4.0)
    for ax in axes:
        ax.plot([0, 1], [0, 1])
        ax.set_xlabel("input power (dBm)")
        ax.set_ylabel("gain (dB)")
    _finish(fig, "k", "t", "c")
    # 2 rows of 3, the last cell hidden: the third panel of row 1 keeps its x title
    assert [ax.get_xlabel() != "" for ax in axes] == [False, False, True, True, True]
    assert [ax.get_ylabel() != "" for ax in axes] == [True, False, False, True, False]


def test_a_noise_figure_line_of_many_frequencies_shades_its_uncertainty(monkeypatch):
    """More than MARKER_POINTS frequencies: the k = 2 uncertainty is a shaded band instead of
    merged bars, the caption says so; a flagged figure keeps its cross."""
    import types

    import pandas as pd
    from matplotlib.figure import Figure as MplFigure

    from sweeprig.report import noise_plot
    from sweeprig.report.plots import MARKER_POINTS

    count = MARKER_POINTS + 80
    frame = pd.DataFrame({
        "value": np.linspace(9.0, 11.0, count), "uncertainty_db": 0.5,
        "flags": [("noise_limited",) if k == 40 else () for k in range(count)],
        "temperature_c": 25.0, "lo_power_dbm": 0.0,
        "rf_freq_hz": np.linspace(1.7e9, 2.7e9, count), "study": "nf"})
    monkeypatch.setattr(noise_plot, "figure_frame", lambda run, name: frame)
    drawn: list[MplFigure] = []
    monkeypatch.setattr(MplFigure, "savefig", lambda self, buffer, **kw: drawn.append(self))
    plot = noise_plot.noise_figure_plot(types.SimpleNamespace(limits=()))  # type: ignore[arg-type]
    assert plot is not None and "shaded instead of barred" in plot.caption
    ax_f = drawn[0].axes[0]
    assert len(ax_f.collections) == 1  # the band, no error bars
    line, cross = ax_f.lines
    assert line.get_marker() in ("None", "none", None, "")
    assert cross.get_marker() == "x" and len(cross.get_xdata()) == 1


def test_a_stored_run_s_point_levels_are_its_point_table_s(report_run):
    """point_levels (the dBc plot's every two-tone point) on a stored run's captures: the
    rows, conditions and levels of point_table."""
    from tests.analysis.test_captures import assert_point_levels_match

    studies = sorted(set(report_run.captures["study"]))
    assert_point_levels_match(report_run.captures,
                              ("if", "im3_low", "im3_high", "im2_low", "lo_at_if"), studies)


def test_a_condition_key_column_is_each_value_rounded_as_one_key_rounds_it() -> None:
    """:func:`_key_column` rounds each distinct value once: the keys are those of
    :func:`_condition_key` row by row (9 significant digits; None where not finite)."""
    import numpy as np
    import pandas as pd

    from sweeprig.report.plots import _condition_key, _key_column

    values = [2.4e9, 2.4e9 + 0.3, 25.0, -0.0, 0.0, float("nan"), float("inf"), 2.4e9,
              1 / 3, -40.0, 1 / 3]
    frame = pd.DataFrame({"rf_freq_hz": np.array(values * 20)})
    expected = [_condition_key({"rf_freq_hz": v}, ("rf_freq_hz",))[0] for v in values * 20]
    assert _key_column(frame, "rf_freq_hz") == expected
    assert _key_column(frame, "missing") == [None] * len(frame)


def test_a_text_key_column_is_each_text_keyed_as_one_key_keys_it() -> None:
    import pandas as pd

    from sweeprig.report.plots import _condition_key, _key_column

    values = ["band", None, "two-tone", "band", None, "lo drive"]
    frame = pd.DataFrame({"study": pd.Series(values * 5, dtype=object)})
    assert _key_column(frame, "study") == [_condition_key({"study": v}, ("study",))[0]
                                           for v in values * 5]


def test_figures_looked_up_among_the_shown_curves_are_those_of_the_whole_frame() -> None:
    """Keying only the figures whose conditions the shown curves take (``asked_from``) finds
    for every shown curve the figure the whole frame finds (the last of its key), and keys
    fewer figures."""
    import numpy as np
    import pandas as pd

    from sweeprig.report.plots import _KEY_COLUMNS, _by_conditions, _condition_key

    rng = np.random.default_rng(3)
    n = 3000
    freqs = np.array([2.3e9, 2.4e9, 2.4e9 + 0.3, 2.5e9, np.nan])  # (+0.3 Hz: the same key)
    frame = pd.DataFrame({
        "name": "iip3", "value": rng.normal(10.0, 3.0, n), "unit": "dBm", "bound": "",
        "uncertainty_db": rng.uniform(0.1, 0.5, n),
        "study": rng.choice(np.array(["two-tone", "band", None], dtype=object), n),
        "temperature_c": rng.choice([-40.0, 25.0, 85.0], n),
        "supply_v": rng.choice([3.0, 3.3, np.nan], n),
        "lo_freq_hz": rng.choice(freqs, n) - 1e8, "lo_power_dbm": rng.choice([0.0, 4.0], n),
        "rf_freq_hz": rng.choice(freqs, n)})
    shown = frame[frame["rf_freq_hz"].isin([2.4e9]) & (frame["supply_v"] == 3.3)]
    shown = shown.sample(frac=1.0, random_state=1)  # (any order, other columns alike)
    whole = _by_conditions(frame)
    only = _by_conditions(frame, asked_from=shown)
    asked = {_condition_key(row) for _, row in shown.iterrows()}
    assert len(asked) > 5
    for key in asked:
        a, b = whole.get(key), only.get(key)
        assert a is not None and b is not None and a == b, key
    assert len(only._rows) < len(whole._rows) / 3
    # the last figure of a key wins (a curve measured again: its later figure)
    again = frame.iloc[[int(shown.index[0])]].assign(value=123.0)
    later = pd.concat([frame, again], ignore_index=True)
    key = _condition_key(again.iloc[0])
    for table in (_by_conditions(later), _by_conditions(later, asked_from=shown)):
        found = table.get(key)
        assert found is not None and found.value == 123.0
    # a curve's figure the frame lacks is missing both ways
    missing = ("two-tone", 60.0, 3.3, 2.3e9, 0.0, 2.4e9)
    assert whole.get(missing) is None and only.get(missing) is None
    # (the key columns are those of the plots' lookups)
    assert _KEY_COLUMNS[0] == "study" and "rf_freq_hz" in _KEY_COLUMNS
