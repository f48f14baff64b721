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
