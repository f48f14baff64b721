"""A bench whose supply current limit sits just below the part's draw: the supply holds the
current and its voltage sinks, so the part runs below the supply the run states. On the
simulated bench (its supply goes from constant voltage to constant current, and reports it
in its questionable status) a 29 mA limit under the demo part's 30 mA moved the gain by
0.07 dB and the IIP3 by 0.28 dB with no flag; now every figure of a point whose supply
reading found it is flagged ``supply_limited``, the run says so once in its events, and the
reduction in its notes. The points without a supply reading (the two-tone study's) are
caught by the supply's status read after each point, which asks its current-limit state in
the same message as its ``*ESR?`` (no exchange more)."""

from __future__ import annotations

from pathlib import Path

from sweeprig.engine.session import shipped_sequences_dir
from tests.engine.noise_support import SIM_BENCH, noise_sequence
from tests.engine.sim_run import run_on_sim, small_sequence

QUICK = shipped_sequences_dir() / "demo" / "quick.toml"


def _run(tmp_path: Path, limit: str, sequence: Path | str = QUICK):
    """``sequence`` (a path, or a sequence's text) on the simulated bench with the built-in
    bench file's supply current limit set to ``limit``: (the reduced run, its events)."""
    text = SIM_BENCH.read_text(encoding="utf-8")
    assert 'supply_max_current = "200 mA"' in text
    done = run_on_sim(tmp_path, sequence, name=limit.replace(" ", ""),
                      bench=text.replace('supply_max_current = "200 mA"',
                                         f'supply_max_current = "{limit}"'))
    return done.run, done.events


def test_a_supply_in_current_limit_flags_the_figures_of_its_points(tmp_path):
    run, events = _run(tmp_path, "29 mA")
    gains = run.figures_named("conversion_gain")
    currents = run.figures_named("supply_current")
    assert gains and currents
    assert all("supply_limited" in f.flags for f in [*gains, *currents])
    iip3 = run.figures_named("iip3")  # the two-tone study reads no supply current
    assert iip3 and all("supply_limited" in f.flags for f in iip3)
    assert all("supply_limited" in f.flags for f in run.figures)  # every point held it
    assert all(abs(f.value - 0.029) < 0.0005 for f in currents)  # held at the limit
    told = [e for e in events if e.kind == "supply"]
    assert len(told) == 1 and "current limit" in told[0].message
    assert any("flagged 'supply_limited'" in note for note in run.notes)
    # a suspect figure cannot pass its limit (the same gains pass it on a good supply)
    judged = [j for j in run.assessment.judgements if j.figure.name == "conversion_gain"]
    assert judged and all(j.verdict == "inconclusive" and "supply_limited" in j.suspect
                          for j in judged)


def test_a_supply_below_its_limit_flags_nothing(tmp_path):
    run, events = _run(tmp_path, "200 mA")
    assert not any("supply_limited" in f.flags for f in run.figures)
    assert not [e for e in events if e.kind == "supply"]
    judged = [j for j in run.assessment.judgements if j.figure.name == "conversion_gain"]
    assert judged and all(j.verdict == "pass" for j in judged)


SWEEP = small_sequence("""[[study]]
name = "gain"
rf_frequency = ["2.0 GHz", "2.2 GHz", "2.4 GHz"]
rf_power = "-35 dBm"
lo_power = "0 dBm"
read = ["wanted"]
""", title="a supply sweep", supply='["3.3 V", "2.9 V"]')


def test_in_a_supply_sweep_every_point_of_the_limited_setting_is_flagged(tmp_path):
    """No supply reading at all: the supply's status after each point tells. The first point
    of a setting (its own settings' check read the status) and the last (the next setting
    changes the supply) are read too, before the supply moves: at 3.3 V the part's 30 mA
    hits the 29 mA limit, at 2.9 V it draws less."""
    run, _ = _run(tmp_path, "29 mA", SWEEP)
    flagged = {f.conditions["supply_v"]: [] for f in run.figures_named("conversion_gain")}
    for f in run.figures_named("conversion_gain"):
        flagged[f.conditions["supply_v"]].append("supply_limited" in f.flags)
    assert flagged == {3.3: [True] * 3, 2.9: [False] * 3}


def test_the_noise_figures_of_a_limited_point_are_flagged_too(tmp_path):
    """The noise figures are made apart from the other figures (and added last): a point's
    supply state holds for them as for the rest (they were left unflagged)."""
    run, _ = _run(tmp_path, "29 mA", noise_sequence('["1.8 GHz", "2.6 GHz"]'))
    noise = run.figures_named("noise_figure")
    assert len(noise) == 2 and all("supply_limited" in f.flags for f in noise)


def test_the_noise_sources_supply_is_not_asked_a_limit_nothing_reads(tmp_path):
    """Only the part's supply marks a point: the noise source's supply (a supply too) is not
    asked its current-limit state after every point (on a profile without compound messages
    each would be an exchange a point for nothing)."""
    done = run_on_sim(tmp_path, noise_sequence('["1.8 GHz", "2.6 GHz"]'), bus_log=True)
    assert not [r.sent for r in done.bus_log("nsdc") if "QUES" in r.sent]
    assert any("QUES" in r.sent for r in done.bus_log("dc"))
