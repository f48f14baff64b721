"""The demo upconverter runs end to end on the simulated bench, in the trade's words.

The sequence names its simulated part (``[part] sim_part = "kx-5860u"``), so ``--sim`` serves
the upconverter it is written for; the measured gain is judged against the model's own truth
(:func:`sweeprig.sim.truth.part_figures`), and the figures carry an upconverter's names.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from sweeprig.analysis.reduce import reduce_run
from sweeprig.engine.session import load_run_files, run_sequence, shipped_sequences_dir
from sweeprig.sim import truth
from sweeprig.sim.bench import resolve_description
from sweeprig.store.sqlite import SqliteRunStore

DEMO = shipped_sequences_dir() / "demo" / "kx5860u-upconverter.toml"
DOWN_DEMO = shipped_sequences_dir() / "demo" / "quick.toml"


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory: pytest.TempPathFactory):
    folder = tmp_path_factory.mktemp("upconverter")
    # the clean bench: the gain is judged against the model's truth without a calibration
    outcome = run_sequence(DEMO, sim=True, store_path=folder / "runs.sqlite",
                           sim_description="clean")
    store = SqliteRunStore(folder / "runs.sqlite")
    try:
        yield outcome, reduce_run(store, outcome.run_id), list(store.events(outcome.run_id))
    finally:
        store.close()


def test_the_demo_upconverter_passes_its_own_limits(demo_run):
    outcome, run, events = demo_run
    assert outcome.status == "complete", outcome.reason
    assert run.verdict == "pass", [c for c in run.assessment.checks if c.outcome != "pass"][:3]
    assert not [e for e in events if e.kind == "sim_part"]  # the right part: no warning


def test_the_gain_is_the_simulated_parts_own(demo_run):
    """Gain at each output frequency within 0.3 dB of the model's truth at the LO level that
    reaches the part (the source's level error and the typed path losses are the bench's
    uncertainty, well inside the figure's own ± budget)."""
    _outcome, run, _events = demo_run
    desc = resolve_description("clean").model_copy(update={"part": "kx-5860u"})
    gains = [f for f in run.figures_named("conversion_gain")
             if f.conditions["study"] == "output-band"]
    assert len(gains) == 9
    for figure in gains:
        c = figure.conditions
        drive = truth.Drive(lo_freq_hz=c["lo_freq_hz"], lo_power_dbm=c["lo_power_dbm"] + 2.0,
                            rf_freq_hz=c["rf_freq_hz"], rf_power_dbm=c["rf_power_dbm"] + 3.0,
                            supply_v=5.0)
        expected = truth.part_figures(desc, drive).conversion_gain_db
        assert figure.value == pytest.approx(expected, abs=0.3), c


def test_figures_are_named_for_an_upconverter(demo_run):
    _outcome, run, _events = demo_run
    names = {f.name for f in run.figures}
    assert {"lo_rf_isolation", "lo_if_isolation", "if_rf_isolation", "sideband_suppression",
            "lo_suppression", "lo_leakage"} <= names
    assert not names & {"rf_if_isolation", "image_rejection"}
    # LO→RF isolation of an upconverter is the LO at its output (the RF port): the part file
    # puts 35 dB there plus what the core leaks, and 40 dB towards the IF input
    lo_rf = np.median([f.value for f in run.figures_named("lo_rf_isolation")])
    lo_if = np.median([f.value for f in run.figures_named("lo_if_isolation")])
    assert lo_rf < lo_if
    # an unfiltered double-balanced mixer makes both sidebands alike (common practice, no
    # source): the unwanted sideband is within a dB of the wanted one
    assert all(abs(f.value) < 1.0 for f in run.figures_named("sideband_suppression"))


def test_gain_carries_the_output_frequency_it_was_measured_at(demo_run):
    """output_freq_hz = f_LO + f_IF for a low-side upconverter (field notes, frequency plan:
    the wanted output of an upconversion is the sum); the output band 5.6-6.0 GHz."""
    _outcome, run, _events = demo_run
    band = [f for f in run.figures_named("conversion_gain")
            if f.conditions["study"] == "output-band"]
    outputs = sorted(f.conditions["output_freq_hz"] for f in band)
    assert outputs == pytest.approx(np.arange(5.6e9, 6.0e9 + 1.0, 50e6))
    for f in band:
        assert f.conditions["output_freq_hz"] == pytest.approx(
            f.conditions["lo_freq_hz"] + f.conditions["rf_freq_hz"])
    assert "output_freq_hz" in run.captures.columns
    from sweeprig.analysis import gain_table

    table = gain_table(run.captures, study="output-band")
    assert sorted(table["output_freq_hz"]) == pytest.approx(outputs)


def test_a_downconverter_sequence_on_the_upconverter_part_is_warned(tmp_path: Path):
    text = DOWN_DEMO.read_text(encoding="utf-8").replace(
        'serial = "S0001"\n', 'serial = "S0001"\nsim_part = "kx-5860u"\n', 1)
    path = tmp_path / "quick.toml"
    path.write_text(text, encoding="utf-8")
    files = load_run_files(path, None, sim=True)
    assert len(files.sim_warnings) == 1
    assert "KX-5860U is an upconverter, but the sequence is written for a downconverter" in \
        files.sim_warnings[0]


def test_an_upconverter_on_the_default_downconverter_is_warned_and_recorded(tmp_path: Path):
    """Without sim_part the simulated bench serves its own downconverter: the run warns
    (event ``sim_part``) instead of silently reporting a gain tens of dB low."""
    text = DEMO.read_text(encoding="utf-8").replace('sim_part = "kx-5860u"', "")
    text = text[:text.index("# Gain across the IF input band")]  # the first study only
    path = tmp_path / "up.toml"
    path.write_text(text, encoding="utf-8")
    files = load_run_files(path, None, sim=True)
    assert any("downconverter, but the sequence is written for an upconverter" in w
               for w in files.sim_warnings), files.sim_warnings
    outcome = run_sequence(path, sim=True, store_path=tmp_path / "runs.sqlite")
    store = SqliteRunStore(tmp_path / "runs.sqlite")
    try:
        events = [e for e in store.events(outcome.run_id) if e.kind == "sim_part"]
    finally:
        store.close()
    assert events and events[0].severity == "warning"


def test_ports_outside_the_simulated_parts_band_are_warned(tmp_path: Path):
    text = DEMO.read_text(encoding="utf-8").replace(
        'if_frequency = "100 MHz"\nrf_frequency = { start', 'if_frequency = "700 MHz"\n'
        'rf_frequency = { start', 1)
    path = tmp_path / "up.toml"
    path.write_text(text, encoding="utf-8")
    warnings = load_run_files(path, None, sim=True).sim_warnings
    assert any("IF port (input)" in w and "700 MHz" in w for w in warnings), warnings


def test_the_report_reads_an_upconverters_conditions_in_its_words(demo_run):
    """The summary names the 100 MHz input the IF and the 5.6-6.0 GHz output the RF."""
    from sweeprig.report.tables import summary_rows

    _outcome, run, _events = demo_run
    assert run.conversion == "up"
    rows = {(r.name, r.study): r for r in summary_rows(run)}
    band = rows[("conversion_gain", "output-band")].conditions_text
    assert "RF 5.6 GHz–6 GHz" in band, band  # the output swept across the RF band
    assert "RF 100 MHz" not in band
    single = rows[("conversion_gain", "if-band")].conditions_text
    assert "IF 50 MHz–150 MHz" in single, single
    assert rows[("lo_rf_isolation", "output-band")].label == "LO→RF isolation"
    assert rows[("sideband_suppression", "output-band")].label == "Unwanted-sideband suppression"


def test_the_datasheet_rows_name_an_upconverters_ports(demo_run):
    """The electrical-characteristics table states the 100 MHz input as the IF, the swept
    5.6-6.0 GHz output as the RF, and leaves out the LO frequency that follows it."""
    from sweeprig.report.datasheet import datasheet_rows

    _outcome, run, _events = demo_run
    rows = {(r.name, r.study): r for r in datasheet_rows(run)}
    band = rows[("conversion_gain", "output-band")].conditions_text
    assert "IF 100 MHz" in band and "RF 5.6 GHz–6 GHz" in band, band
    assert "RF 100 MHz" not in band and "LO 5.5" not in band, band
    assert "IF −20 dBm" in band, band  # the input drive is the IF's
    fixed = rows[("input_p1db", "compression")].conditions_text
    assert "IF 100 MHz" in fixed and "RF 5.8 GHz" in fixed, fixed


def test_the_output_band_has_a_flatness_and_every_upconverter_figure_a_budget(demo_run):
    """Gain flatness across the output band (the LO moves the output, the IF stays put), and
    an expanded uncertainty on the upconverter's own figures (LO leakage as an absolute
    level; the suppressions as two lines compared on one analyzer)."""
    _outcome, run, _events = demo_run
    flat = [f for f in run.figures_named("gain_flatness")
            if f.conditions["study"] == "output-band"]
    assert len(flat) == 1
    gains = [f.value for f in run.figures_named("conversion_gain")
             if f.conditions["study"] == "output-band"]
    assert flat[0].value == pytest.approx(max(gains) - min(gains), abs=1e-9)
    for name in ("lo_leakage", "lo_suppression", "sideband_suppression"):
        numbers = [f for f in run.figures_named(name) if f.is_number]
        assert numbers, name
        assert all(np.isfinite(f.uncertainty_db) and f.uncertainty_db > 0
                   for f in numbers), name
        terms = {t.name for t in numbers[0].budget.contributions}
        if name == "lo_leakage":
            assert "analyzer_absolute" in terms, terms
        else:
            assert "analyzer_linearity" in terms and "analyzer_absolute" not in terms, terms


def test_the_report_plots_gain_against_the_output_and_every_leakage_figure(demo_run):
    """The output-band study's gain is drawn against the output (RF) frequency, the IF band's
    against the input (IF) frequency; the leakage plot has a panel for each upconverter
    figure; the compression axis names the IF port."""
    from sweeprig.report import plots

    _outcome, run, _events = demo_run
    gain = plots.gain_vs_frequency(run)
    assert gain is not None and set(gain.studies) == {"output-band", "if-band"}
    leak = plots.isolation_vs_frequency(run)
    assert leak is not None
    import matplotlib

    matplotlib.use("Agg")
    texts = _axis_texts(plots.gain_vs_frequency, run)
    assert "output (RF) frequency (GHz)" in texts and "input (IF) frequency (GHz)" in texts
    texts = _axis_texts(plots.isolation_vs_frequency, run)
    for label in ("LO leakage at the RF port (dBm)", "LO (carrier) suppression (dBc)",
                  "unwanted-sideband suppression (dBc)", "IF→RF isolation (dB)"):
        assert label in texts, texts
    assert "input power at the IF port (dBm)" in _axis_texts(plots.compression_curves, run)


def _axis_texts(maker, run) -> set[str]:
    """The axis labels of the figure ``maker`` draws (captured before it is closed)."""
    from matplotlib.figure import Figure as MplFigure

    from sweeprig.report import plots

    seen: set[str] = set()
    original = plots._finish

    def spy(fig: MplFigure, *args, **kwargs):
        for ax in fig.axes:
            seen.update({ax.get_xlabel(), ax.get_ylabel()})
        return original(fig, *args, **kwargs)

    plots._finish = spy
    try:
        maker(run)
    finally:
        plots._finish = original
    return seen
