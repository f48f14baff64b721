"""A 10 MHz reference lost in the night: the instruments locked to it run on their own
crystals from then on, their frequencies off by those crystals' errors, and a reading at a
narrow RBW can miss the product. The lock was checked only at connect; now each source's
status read after every point asks its reference lock in the same query as its level state
(SCPI-99 questionable FREQuency, bit 5: one register), and each analyzer reading reads the
analyzer's from the same answer as its overload flag. A point found so carries
``reference_unlocked`` (role names) in its record, the run says so once in its events, and
every figure of the point is flagged ``reference_unlocked`` (suspect).

On the simulated bench an ``unlock`` fault takes a role's reference input away."""

from __future__ import annotations

from pathlib import Path

from tests.engine.noise_support import SIM_BENCH
from tests.engine.sim_run import run_on_sim, small_sequence

#: The built-in bench with the sources and the analyzer locked to the lab's reference.
TIMEBASE = """
[timebase]
rf = { lock = "lab" }
lo = { lock = "lab" }
sa = { lock = "lab" }

[timebase.external]
lab = "0.001 ppm"
"""

#: The LO's crystal 3 ppm off; its reference input lost on the message that tunes it to
#: 2.3 GHz (the third point), or on none.
DESCRIPTION = """part = "kx-2417"
seed = 7
[sources]
level_error = false
harmonics = []
[references]
crystal = {{ lo = "3 ppm" }}
{fault}"""

FAULT = """[[faults]]
role = "{role}"
kind = "unlock"
{trigger}
"""

SEQUENCE = small_sequence("""[[study]]
name = "gain"
rf_frequency = ["2.0 GHz", "2.2 GHz", "2.4 GHz", "2.6 GHz"]
rf_power = "-35 dBm"
lo_power = "0 dBm"
read = ["wanted"]
""", title="gain across the band")


def _run(tmp_path: Path, fault: str = ""):
    """The gain sweep on a bench locked to one reference, with ``fault`` planted:
    (the conversion gains' reference_unlocked flags in RF order, the run's events, each
    point's reference_unlocked mark in point order, the reduction's notes)."""
    done = run_on_sim(tmp_path, SEQUENCE,
                      bench=SIM_BENCH.read_text(encoding="utf-8") + TIMEBASE,
                      description=DESCRIPTION.format(fault=fault))
    marks = [extra.get("reference_unlocked") for extra in done.point_extras]
    gains = sorted(done.run.figures_named("conversion_gain"),
                   key=lambda f: f.conditions["rf_freq_hz"])
    assert len(gains) == 4
    return ["reference_unlocked" in f.flags for f in gains], done.events, marks, done.run.notes


def test_a_source_losing_its_reference_flags_the_points_from_then_on(tmp_path):
    """The LO's reference goes on the message that tunes it for the third point, whose
    leading status read is the second point's: that read already finds it unlocked (the
    loss came after the second point's reading or during it: it cannot tell which, so the
    second point is flagged too, on the safe side); the first point is not."""
    flags, events, marks, notes = _run(
        tmp_path, FAULT.format(role="lo", trigger='match = "SOUR:FREQ:CW 2300000000"'))
    assert flags == [False, True, True, True]
    assert marks == [None, ["lo"], ["lo"], ["lo"]]
    told = [e for e in events if e.kind == "timebase" and "unlocked" in e.message]
    assert len(told) == 1 and "'lo'" in told[0].message
    assert any("flagged 'reference_unlocked'" in note for note in notes)


def test_the_analyzer_losing_its_reference_flags_the_reading_that_found_it(tmp_path):
    """The analyzer's lock is read with each reading, in the same message: lost on its first
    message after the third point begins (each point takes 25 ms of the simulator's time,
    from 0), it flags that point and the next, not the two before."""
    flags, events, marks, _ = _run(tmp_path, FAULT.format(role="sa", trigger="at_time_s = 0.051"))
    assert marks == [None, None, ["sa"], ["sa"]]
    assert flags == [False, False, True, True]
    assert [e for e in events if e.kind == "timebase" and "'sa'" in e.message]


def test_a_bench_that_keeps_its_reference_flags_nothing(tmp_path):
    flags, events, marks, _ = _run(tmp_path)
    assert flags == [False] * 4 and marks == [None] * 4
    assert not [e for e in events if e.kind == "timebase" and "unlocked" in e.message]
