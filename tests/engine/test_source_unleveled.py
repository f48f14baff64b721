"""A signal source asked for more than it can level: it delivers less than its setting and
says so in its questionable status (SCPI-99 POWer, bit 3), and nothing else on the bench
shows it (the analyzer reads a lower product, which looks like the part's own gain). The
source's status read after each point asks that state in the same message (no exchange
more); a point found so carries ``unleveled_sources`` in its record, the run says so once
in its events, and every figure of the point is flagged ``source_unleveled`` (suspect).

On the simulated bench, ``[sources.leveled_max]`` plants the limit (an output amplifier
short of headroom: an invented fault of the fictional source)."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import pytest

from sweeprig.instruments.source import UNLEVELED_SOURCES
from tests.engine.sim_run import SimRun, run_on_sim, small_sequence

#: The sim-bench description: a clean bench whose LO source levels no more than ``{max}``.
DESCRIPTION = """part = "kx-2417"
seed = 7
[cables]
lo = "2.0 dB"
[sources]
level_error = false
harmonics = []
family = "{family}"
[sources.leveled_max]
lo = "{max}"
"""

#: Gain at two LO drives: 3 then 6 dBm at the part (5 and 8 dBm set, through the 2 dB).
SWEEP = small_sequence("""[[study]]
name = "gain-3dBm"
rf_frequency = ["2.0 GHz", "2.2 GHz"]
rf_power = "-35 dBm"
lo_power = "3 dBm"
read = ["wanted"]
[[study]]
name = "gain-6dBm"
rf_frequency = ["2.0 GHz", "2.2 GHz"]
rf_power = "-35 dBm"
lo_power = "6 dBm"
read = ["wanted"]
""", title="gain at two LO drives")


def _run(tmp_path: Path, leveled_max: str, family: str = "tarnwick", *, also: str = "",
         **options: Any) -> SimRun:
    """The sweep on the simulated bench with the LO source (of ``family``) leveled up to
    ``leveled_max``, ``also`` added to the sim-bench description."""
    return run_on_sim(tmp_path, SWEEP, **options,
                      description=DESCRIPTION.format(max=leveled_max, family=family) + also)


@pytest.mark.parametrize("family", ["tarnwick", "farrowmere"])
def test_only_the_points_the_source_could_not_level_are_flagged(tmp_path, family):
    """A 6 dBm limit: the 5 dBm setting is leveled, the 8 dBm one is not. Each point's
    status is read after it (with the next point's settings, or at the run's end), so the
    flag lands on the points whose setting the source could not reach, not a neighbour (the
    last 3 dBm point is read with the first 6 dBm point's settings, before they run). A
    source family whose profile takes no compound messages is asked apart, after the point
    as well."""
    done = _run(tmp_path, "6 dBm", family)
    run, events = done.run, done.events
    gains = sorted(run.figures_named("conversion_gain"),
                   key=lambda f: (f.conditions["lo_power_dbm"], f.conditions["rf_freq_hz"]))
    assert [f.conditions["lo_power_dbm"] for f in gains] == [3.0, 3.0, 6.0, 6.0]
    assert ["source_unleveled" in f.flags for f in gains] == [False, False, True, True]
    assert [e.get(UNLEVELED_SOURCES) for e in done.point_extras] == \
        [None, None, ["lo"], ["lo"]]
    # the part got 2 dB less LO drive at the 6 dBm points than the run states
    told = [e for e in events if e.kind == "source"]
    assert len(told) == 1 and "'lo'" in told[0].message and "not leveled" in told[0].message
    assert any("flagged 'source_unleveled'" in note for note in run.notes)
    # a suspect figure cannot pass a limit
    judged = [j for j in run.assessment.judgements
              if j.figure.name == "conversion_gain" and "source_unleveled" in j.figure.flags]
    assert all(j.verdict != "pass" for j in judged)


def test_a_source_that_levels_every_setting_flags_nothing(tmp_path):
    done = _run(tmp_path, "20 dBm")
    assert not any("source_unleveled" in f.flags for f in done.run.figures)
    assert not [e for e in done.events if e.kind == "source"]
    assert not any(UNLEVELED_SOURCES in e for e in done.point_extras)


TWO_THEN_ONE = small_sequence("""[[study]]
name = "two-tone"
rf_frequency = "2.2 GHz"
tone_spacing = "1 MHz"
rf_power = ["-30 dBm", "-28 dBm"]
lo_power = "0 dBm"
read = ["wanted"]
[[study]]
name = "gain"
rf_frequency = ["2.0 GHz", "2.2 GHz"]
rf_power = "-35 dBm"
lo_power = "0 dBm"
read = ["wanted"]
""", title="two tones, then one")


def test_the_second_tone_is_read_before_it_goes_off(tmp_path):
    """The second tone's source, short of its level, goes off when the single-tone study
    begins: its state after the last two-tone point is read before it is switched off (read
    after, an output off is never unleveled, and that point passed unflagged)."""
    done = run_on_sim(tmp_path, TWO_THEN_ONE,
                      description=DESCRIPTION.format(max="20 dBm", family="tarnwick")
                      + 'rf2 = "-40 dBm"\n')
    points = done.points
    marks = {(study, round(power)): extra.get(UNLEVELED_SOURCES)
             for study, power, extra in zip(points["study"], points["rf_power_dbm"],
                                            done.point_extras, strict=True)}
    assert marks == {("two-tone", -30): ["rf2"], ("two-tone", -28): ["rf2"],
                     ("gain", -35): None}, marks


@pytest.mark.parametrize("kind", ["error", "swallow"])
def test_a_source_that_refuses_its_level_query_at_connect_is_run_without_it(tmp_path, kind):
    """A source that answers its level query with an error, or not at all (an instrument
    without it, on a generic profile): the query is left out for the run with a warning
    that says which flags it cannot raise, and every point's status read goes without it,
    rather than failing the run at its first point."""
    # the fault hits the LO source's first STAT:QUES:COND?: the connect's check of it
    done = _run(tmp_path, "6 dBm", also=f'[[faults]]\nrole = "lo"\nkind = "{kind}"\n'
                'match = "STAT:QUES:COND?"\nmax_count = 1\n', bus_log=True)
    events = done.events
    told = [e for e in events if e.kind == "status"]
    assert len(told) == 1 and "STAT:QUES:COND?" in told[0].message \
        and "unleveled and reference_unlocked are not read" in told[0].message, \
        [e.message for e in events]
    log = done.bus_log("lo")
    assert sum("STAT:QUES:COND?" in r.sent for r in log) == 1  # the check at connect only
    # and the reduction says which flags the role's figures could not get
    assert any("role 'lo'" in note and "source_unleveled or reference_unlocked" in note
               for note in done.run.notes), done.run.notes
