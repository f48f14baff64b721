"""A reading depends on the port the RF switch routes to the analyzer. The selection was sent
and the error queue read, but a command lost on the way (or one the switch did not act on)
left no error behind: the reading was then taken at the port before, an isolation read at
the IF port, say, and filed as the LO-to-RF isolation with nothing to show for it. Now every
selection that changes is read back (``ROUT:CLOS? (@n)``) where the profile can ask; a
channel that reads open raises, and the point is measured again.

Planted with the simulated bench's ``swallow`` fault: the message is lost without a trace."""

from __future__ import annotations

from pathlib import Path

from tests.engine.sim_run import run_on_sim, small_sequence

SEQUENCE = small_sequence("""[[study]]
name = "isolation"
rf_frequency = ["2.0 GHz", "2.2 GHz"]
rf_power = "-25 dBm"
lo_power = "0 dBm"
read = ["wanted", "lo_at_rf", "lo_at_if"]
""", title="isolations")

#: The first selection of the RF port (channel 2 of the built-in bench's switch) is lost.
LOST = """part = "kx-2417"
seed = 7
[[faults]]
role = "switch"
kind = "swallow"
match = "ROUT:CLOS (@2)"
max_count = 1
"""
CLEAN = """part = "kx-2417"
seed = 7
"""


def _isolations(tmp_path: Path, description: str, name: str):
    done = run_on_sim(tmp_path, SEQUENCE, description=description, name=name, bus_log=True)
    return done, {f.points: f for f in done.run.figures if f.name == "lo_rf_isolation"}


def test_a_lost_selection_is_caught_and_the_point_measured_again(tmp_path: Path) -> None:
    done, lost = _isolations(tmp_path, LOST, "lost")
    _, clean = _isolations(tmp_path, CLEAN, "clean")
    assert lost.keys() == clean.keys() and len(lost) == 2
    for points, figure in lost.items():
        # the same isolation as on a clean bench: read at the RF port, not the IF port
        assert abs(figure.value - clean[points].value) < 0.5, (figure.value, clean[points].value)
    retried = [e for e in done.events if "reads open" in e.message]
    assert retried, [e.message for e in done.events]
    sent = [r.sent for r in done.bus_log("switch")]
    assert sent.count("ROUT:CLOS? (@2)") >= 2  # read back after every selection of it


def test_an_unchanged_selection_is_not_read_again(tmp_path: Path) -> None:
    done, _ = _isolations(tmp_path, CLEAN, "clean")
    sent = [r.sent for r in done.bus_log("switch")]
    selections = [s for s in sent if s.startswith("ROUT:CLOS (@")]
    read_backs = [s for s in sent if s.startswith("ROUT:CLOS? (@")]
    assert len(read_backs) == len(selections)  # one read-back per selection sent, no more
