"""A chamber that loses hold of the part during the points: its limiter trips, a door is
left open, the compressor fails at cold. The engine soaks until the DUT probe is within the
sequence's ``temperature_tolerance`` of the set point and then measures; it read the probe
at every point and stored it, but nothing looked at it again, so figures measured tens of
degrees away were filed under the set point. Now a point whose probe reading is outside the
tolerance gets one warning event a run (kind ``chamber``) and its figures the flag
``temperature_off`` (suspect).

On the simulated bench a ``trip`` fault on the chamber trips its over-temperature limiter:
the air drifts to ambient while the controller still reads control on."""

from __future__ import annotations

from pathlib import Path

from tests.engine.sim_run import run_on_sim, small_sequence

SEQUENCE = small_sequence("""[[study]]
name = "gain"
rf_frequency = { start = "1.8 GHz", stop = "2.5 GHz", points = 8 }
rf_power = "-35 dBm"
lo_power = "0 dBm"
read = ["wanted"]
""", title="gain at 85 degC").replace(
    'settle = "20 ms"', 'settle = "20 s"\ntemperature = ["85 degC"]\nsoak = "10 min"')

#: The chamber's limiter trips during the points (about 1,620 s of the bench's clock: the
#: travel from 23 °C at 5 °C/min, the probe's lag, the soak; each point takes 20 s).
DESCRIPTION = """part = "kx-2417"
seed = 7
{fault}"""
TRIP = """[[faults]]
role = "chamber"
kind = "trip"
at_time_s = 1700
"""


def _run(tmp_path: Path, fault: str):
    done = run_on_sim(tmp_path, SEQUENCE, description=DESCRIPTION.format(fault=fault),
                      name="tripped" if fault else "clean")
    points = done.points.set_index("point_index")
    off = {int(i) for i, row in points.iterrows()
           if abs(row["probe_temperature_c"] - row["temperature_c"]) > 1.0}
    gains = {f.points[0]: f for f in done.run.figures if f.name == "conversion_gain"}
    return done, points, off, gains


def test_points_the_chamber_no_longer_held_are_flagged(tmp_path: Path) -> None:
    done, points, off, gains = _run(tmp_path, TRIP)
    assert len(gains) == 8
    # the first points were measured held; the later ones drifted out (toward 23 °C)
    assert 2 <= len(off) <= 6, points["probe_temperature_c"].tolist()
    assert min(off) > 0 and max(off) == 7
    for index, figure in gains.items():
        assert ("temperature_off" in figure.flags) == (index in off), (index, figure.flags)
    warned = [e for e in done.events if e.kind == "chamber" and e.severity == "warning"]
    assert len(warned) == 1 and f"point {min(off)}:" in warned[0].message
    assert any("temperature_off" in note for note in done.run.notes)


def test_a_chamber_that_holds_raises_nothing(tmp_path: Path) -> None:
    done, _points, off, gains = _run(tmp_path, "")
    assert not off and len(gains) == 8
    assert all("temperature_off" not in f.flags for f in done.run.figures)
    assert not [e for e in done.events if e.kind == "chamber" and e.severity == "warning"]
