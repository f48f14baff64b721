"""A short sequence run end to end on the in-process simulated bench, for the engine tests of
what a run flags: the sequence (and any bench file or sim-bench description) written into the
test's folder, run into a SQLite store, the run reduced, and what the store holds beside it."""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from sweeprig.analysis.reduce import RunFigures, reduce_run
from sweeprig.engine.session import run_sequence
from sweeprig.store.base import BusRecord, EventRecord
from sweeprig.store.sqlite import SqliteRunStore
from tests.engine.noise_support import SIM_BENCH

#: The head of a small sequence on the demo part (the fictional KX-2417): low-side LO 100 MHz
#: below the RF, ``supply`` (its TOML value) and 20 ms of settling; studies follow.
_HEAD = """format = 1
[about]
title = "{title}"
[part]
id = "KX-2417"
expected_gain = "12 dB"
[mixing]
if_frequency = "100 MHz"
[conditions]
supply = {supply}
settle = "20 ms"
"""


def small_sequence(studies: str, *, title: str = "a small sequence",
                   supply: str = '"3.3 V"') -> str:
    """A sequence's text: :data:`_HEAD` with ``title`` and ``supply``, then ``studies`` (their
    ``[[study]]`` tables)."""
    return _HEAD.format(title=title, supply=supply) + studies


@dataclass(frozen=True)
class SimRun:
    """A completed run on the simulated bench, reduced, and what its store holds."""

    run: RunFigures
    events: list[EventRecord]
    #: Each point's record ``extra`` (JSON decoded), in point order.
    point_extras: list[dict[str, Any]]
    #: Each reading's ``extra`` (JSON decoded), in the store's order.
    reading_extras: list[dict[str, Any]]
    #: Its points table (as the store gives it).
    points: Any
    store: Path
    run_id: int

    def bus_log(self, role: str) -> list[BusRecord]:
        """The run's bus log of ``role`` (the run must have been made with ``bus_log``)."""
        with SqliteRunStore(self.store, create=False) as db:
            return db.bus_log(self.run_id, role=role)


def run_on_sim(tmp_path: Path, sequence: str | Path, *, bench: str | Path = SIM_BENCH,
               description: str | None = None, name: str = "run",
               **options: Any) -> SimRun:
    """Run ``sequence`` (a path, or a sequence's text) on the in-process simulated bench with
    ``bench`` (a path, or a bench file's text) and ``description`` (a sim-bench description's
    text; None: the built-in one), into ``tmp_path/<name>.sqlite``; the run must complete.
    ``options`` go to :func:`~sweeprig.engine.session.run_sequence`."""
    if isinstance(sequence, str):
        text, sequence = sequence, tmp_path / f"{name}-sequence.toml"
        sequence.write_text(text, encoding="utf-8")
    if isinstance(bench, str):
        text, bench = bench, tmp_path / f"{name}-bench.toml"
        bench.write_text(text, encoding="utf-8")
    described = None
    if description is not None:
        described = tmp_path / f"{name}-sim-bench.toml"
        described.write_text(description, encoding="utf-8")
    store = tmp_path / f"{name}.sqlite"
    outcome = run_sequence(sequence, bench, sim=True, sim_description=described,
                           store_path=store, **options)
    assert outcome.status == "complete", outcome.reason
    with SqliteRunStore(store, create=False) as db:
        points = db.points_frame(outcome.run_id)
        return SimRun(
            run=reduce_run(db, outcome.run_id),
            events=list(db.events(outcome.run_id)),
            point_extras=[json.loads(t) for t in points["extra_json"]],
            reading_extras=[json.loads(t)
                            for t in db.readings_frame(outcome.run_id)["extra_json"]],
            points=points, store=store, run_id=outcome.run_id)
