"""An output that switches itself off in the night: a supply's over-voltage or over-current
protection, a generator's reverse-power protection. Before, the points after it were read
with that output off: the gains came out as "< x dB, in the noise, unpowered" all night,
the flags pointing at the supply, not at the cause. Now each source's and the supply's
status read after every point asks ``OUTP:PROT:TRIP?`` in the same message: a trip stops
the run at once, never retried (a retry would switch the output on into whatever tripped
it), the point it may have spoiled is not stored, every output ends off, and the run's
reason names the role and the fix. A bench tripped already is refused at connect.

On the simulated bench a ``trip`` fault trips a role's protection."""

from __future__ import annotations

from pathlib import Path

import pytest

from sweeprig.engine.connect import OutputTripped
from sweeprig.engine.session import run_sequence
from sweeprig.sim.bench import start_sim_bench
from sweeprig.store.sqlite import SqliteRunStore
from tests.engine.noise_support import SIM_BENCH
from tests.engine.sim_run import small_sequence

SEQUENCE = small_sequence("""[[study]]
name = "gain"
rf_frequency = ["2.0 GHz", "2.1 GHz", "2.2 GHz", "2.3 GHz", "2.4 GHz", "2.5 GHz"]
rf_power = "-35 dBm"
lo_power = "0 dBm"
read = ["wanted"]
""", title="gain across the band")

#: The protection of ``role`` trips during the fourth point (2.3 GHz; each point takes 25 ms
#: of the simulated bench's clock), on the first message it gets from then on.
DESCRIPTION = """part = "kx-2417"
seed = 7
[[faults]]
role = "{role}"
kind = "trip"
at_time_s = 0.08
"""


def _run(tmp_path: Path, role: str | None):
    sequence = tmp_path / "sequence.toml"
    sequence.write_text(SEQUENCE, encoding="utf-8")
    described = None
    if role is not None:
        described = tmp_path / "sim-bench.toml"
        described.write_text(DESCRIPTION.format(role=role), encoding="utf-8")
    store = tmp_path / "runs.sqlite"
    outcome = run_sequence(sequence, SIM_BENCH, sim=True, sim_description=described,
                           store_path=store)
    with SqliteRunStore(store, create=False) as db:
        points = db.points_frame(outcome.run_id)
        events = db.events(outcome.run_id)
    return outcome, points, events


@pytest.mark.parametrize("role", ["rf", "lo", "dc"])
def test_a_tripped_output_stops_the_run(tmp_path: Path, role: str) -> None:
    outcome, points, events = _run(tmp_path, role)
    assert outcome.status == "aborted", outcome.status
    assert f"role {role!r} tripped its output protection" in (outcome.reason or "")
    assert "OUTP:PROT:CLE" in (outcome.reason or "")
    # the points before the trip are stored; the one it may have spoiled (read before the
    # status read that found the trip) is not, and no later point was measured
    assert points["rf_freq_hz"].tolist() == [2.0e9, 2.1e9, 2.2e9]
    kinds = [e.kind for e in events]
    assert "tripped" in kinds
    # never retried, and the bench ends safe (every output read back off)
    assert not any(e.kind == "error" and "attempt" in e.message for e in events)
    safe = [e for e in events if e.kind == "safe_state"]
    assert safe and safe[-1].severity == "info", safe


def test_a_bench_without_a_trip_runs_whole(tmp_path: Path) -> None:
    outcome, points, events = _run(tmp_path, None)
    assert outcome.status == "complete", outcome.reason
    assert len(points) == 6
    assert "tripped" not in [e.kind for e in events]


def test_a_bench_tripped_before_the_run_is_refused(tmp_path: Path) -> None:
    from sweeprig.engine.session import served_bench_text

    with start_sim_bench(None) as sim:
        sim.instruments["dc"].protection.trip()  # type: ignore[attr-defined]
        bench = tmp_path / "bench.toml"
        bench.write_text(served_bench_text(dict(sim.resources)), encoding="utf-8")
        sequence = tmp_path / "sequence.toml"
        sequence.write_text(SEQUENCE, encoding="utf-8")
        with pytest.raises(OutputTripped) as caught:
            run_sequence(sequence, bench, store_path=tmp_path / "runs.sqlite")
        # refused before anything was set: no output switched on, no run recorded
        assert not any(sim.instruments[r].value("output_on") for r in ("rf", "lo", "dc"))
    if (tmp_path / "runs.sqlite").exists():
        with SqliteRunStore(tmp_path / "runs.sqlite", create=False) as db:
            assert db.runs() == []
    message = caught.value.message()
    assert "role 'dc' has its output protection tripped" in message
    assert "OUTP:PROT:CLE" in message
