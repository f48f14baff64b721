"""A reading the analyzer itself flags uncalibrated (its questionable status' CALibration
bit: on the simulated bench a trace above the reference level; on a real analyzer also a
sweep too fast for its RBW, and more) was stored as a good number: the flag was never read.
Now the reading's own message reads it from the same answer as its overload flag (one
register, nothing more on the bus), the reading records ``status_flags``, and its figures
are flagged ``analyzer_uncalibrated`` (suspect)."""

from __future__ import annotations

import pytest

from sweeprig.analysis import figures
from sweeprig.engine import runner
from tests.engine.sim_run import run_on_sim, small_sequence

SEQUENCE = small_sequence("""[[study]]
name = "gain"
rf_frequency = ["2.0 GHz", "2.2 GHz"]
rf_power = "-25 dBm"
lo_power = "0 dBm"
read = [{{ kind = "wanted", analyzer = {{ reference_level = "{ref}" }} }}]
""", title="gain, the analyzer's reference level set by hand")


@pytest.mark.parametrize(("ref", "flagged"), [("-30 dBm", True), ("5 dBm", False)])
def test_a_reading_the_analyzer_calls_uncalibrated_flags_its_figures(tmp_path, ref, flagged):
    """The product about −13.5 dBm at the analyzer: a reference level of −30 dBm puts the
    trace above it (the analyzer flags the reading, and its IF clips 10 dB above the
    reference level: the gain reads 6 dB low), +5 dBm does not."""
    done = run_on_sim(tmp_path, SEQUENCE.format(ref=ref))
    run, extras = done.run, done.reading_extras
    assert all(("status_flags" in e) is flagged for e in extras), extras
    gains = run.figures_named("conversion_gain")
    assert len(gains) == 2
    assert all(("analyzer_uncalibrated" in f.flags) is flagged for f in gains)
    judged = [j for j in run.assessment.judgements if j.figure.name == "conversion_gain"]
    if flagged:  # a suspect figure cannot pass its limit
        assert all(j.verdict != "pass" for j in judged)


def test_the_recorded_name_is_the_figure_flag():
    """The runner writes the flag's name into the reading; the analysis reads it as a
    figure flag: two layers that do not import each other, pinned together here."""
    assert runner.ANALYZER_UNCALIBRATED == figures.ANALYZER_UNCALIBRATED
    assert runner.REFERENCE_UNLOCKED == figures.REFERENCE_UNLOCKED
    assert runner.TEMPERATURE_OFF == figures.TEMPERATURE_OFF


def test_each_companion_names_the_flag_it_raises():
    """The reduction's note on a companion left out names the figure flag it would have
    raised: each companion the drivers ask is in the table, and each flag is a figure flag."""
    from sweeprig.analysis.reduce import COMPANION_FLAGS, COMPANION_WATCHES
    from sweeprig.instruments.source import SourceDriver
    from sweeprig.instruments.supply import SupplyDriver

    asked = {*SourceDriver.status_companions, *SupplyDriver.status_companions}
    assert set(COMPANION_FLAGS) | set(COMPANION_WATCHES) == asked
    assert not set(COMPANION_FLAGS) & set(COMPANION_WATCHES)
    assert set(COMPANION_FLAGS.values()) <= set(figures.FLAGS)
