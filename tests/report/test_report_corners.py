"""No plot drops a corner: every combination of temperature, supply and LO drive the captures
hold is drawn, for a grid of 5 temperatures × 3 supplies × 3 LO drives."""

from __future__ import annotations

import pytest
from matplotlib.figure import Figure as MplFigure

from sweeprig.report.plots import all_plots, corner_label


@pytest.fixture
def plots_without_pixels(corner_run, monkeypatch):
    """Every plot of the corner run drawn but not rasterised (the glyph rendering of 150
    panels is what takes time; the corners a plot lists are those of the lines it drew)."""
    monkeypatch.setattr(MplFigure, "savefig", lambda self, buffer, **kwargs: None)
    return all_plots(corner_run)


def test_no_plot_drops_a_corner_of_five_temperatures_three_supplies_three_lo_drives(
        corner_run, corner_grid, plots_without_pixels):
    grid = len(corner_grid["temperatures_c"]) * len(corner_grid["supplies_v"])
    keys = {p.key for p in plots_without_pixels}
    assert {"compression", "two_tone", "intermod_dbc", "lo_drive", "isolation",
            "spurs"} <= keys
    captures = corner_run.captures
    for plot in plots_without_pixels:
        assert plot.corner_keys and plot.studies, plot.key
        rows = captures[captures["study"].isin(plot.studies)]
        # computed here from the raw captures, not by the plot's own bookkeeping
        wanted = {corner_label(r, plot.corner_keys)
                  for _, r in rows[list(plot.corner_keys)].drop_duplicates().iterrows()}
        assert set(plot.corners) == wanted, plot.key
        expected = grid * (len(corner_grid["lo_powers_dbm"])
                           if "lo_power_dbm" in plot.corner_keys else 1)
        assert len(plot.corners) == expected, plot.key

