"""After a recovery the engine trusts nothing it remembered about the bench's state: a fault
planted mid-run on the simulated bench (over real pyvisa/TCP) must leave the figures where a
clean run puts them, or flag them; never a reading taken in a state the engine only assumed.

Each faulted run is compared with the same sequence run on a clean bench: the noise figure
within its expanded uncertainty (k = 2), and the raw hot and cold noise powers within 0.5 dB
(a cold reading taken with the source hot reads the ENR, about 15 dB, high: common practice,
no source, for the margin)."""

from __future__ import annotations

import json
import math
from collections.abc import Callable
from pathlib import Path

import pytest

from sweeprig.analysis.reduce import reduce_run
from sweeprig.clock import VirtualClock
from sweeprig.engine.runner import PointResult
from sweeprig.engine.session import run_sequence, served_bench_text
from sweeprig.sim.bench import SimBench, resolve_description, start_sim_bench
from sweeprig.sim.faults import FaultSpec
from sweeprig.store.sqlite import SqliteRunStore
from tests.engine.test_noise_figure_run import SEQUENCE

#: Raw hot/cold powers of a point agree with the clean run's within this (dB).
RAW_TOLERANCE_DB = 0.5


def _run(folder: Path, plant: Callable[[SimBench, PointResult], None] | None = None,
         faults: tuple[FaultSpec, ...] = (), before: Callable[[SimBench], None] | None = None
         ) -> tuple[dict[int, object], dict[int, dict[str, float]], list[object], SimBench]:
    """The noise sequence on a clean simulated bench (with ``faults`` planned from the
    start, ``before`` done to it first), ``plant`` called after each stored point; returns
    the noise figures and the raw noise readings by point (with the point's wanted and image
    levels), the run's events and the bench."""
    folder.mkdir(parents=True, exist_ok=True)
    sequence = folder / "noise.toml"
    sequence.write_text(SEQUENCE.format(if_="100 MHz"), encoding="utf-8")
    store_path = folder / "runs.sqlite"
    description = resolve_description("clean").model_copy(update={"faults": faults})
    with start_sim_bench(description, clock=VirtualClock()) as sim:
        if before is not None:
            before(sim)
        bench = folder / "bench.toml"
        bench.write_text(served_bench_text(sim.resources), encoding="utf-8")
        hook = None if plant is None else (lambda result: plant(sim, result))
        outcome = run_sequence(sequence, bench, store_path=store_path, on_point=hook)
        assert outcome.status == "complete", outcome.reason
        assert outcome.safe is not None and outcome.safe.ok
    with SqliteRunStore(store_path, create=False) as store:
        run = reduce_run(store, outcome.run_id)
        events = store.events(outcome.run_id)
        readings = store.readings_frame(outcome.run_id)
    figures = {f.points[0]: f for f in run.figures_named("noise_figure")}
    raw: dict[int, dict[str, float]] = {}
    for row in readings[readings["kind"] == "noise_figure"].itertuples(index=False):
        raw[int(row.point_index)] = json.loads(row.extra_json)["noise"]
    for row in readings[readings["kind"].isin(("wanted", "image"))].itertuples(index=False):
        raw[int(row.point_index)][f"{row.kind}_mw"] = 10 ** (float(row.level_dbm) / 10)
    return figures, raw, events, sim


@pytest.fixture(scope="module")
def clean(tmp_path_factory: pytest.TempPathFactory):
    figures, raw, _events, _sim = _run(tmp_path_factory.mktemp("clean"))
    assert len(figures) == 9 and all(f.flags == () for f in figures.values())
    return figures, raw


def _agrees(clean, faulted) -> None:
    clean_figures, clean_raw = clean
    figures, raw = faulted
    assert set(figures) == set(clean_figures)
    for index, figure in figures.items():
        reference = clean_figures[index]
        for key in ("hot_mw", "cold_mw", "cal_hot_mw", "cal_cold_mw", "wanted_mw", "image_mw"):
            step_db = 10 * math.log10(raw[index][key] / clean_raw[index][key])
            assert abs(step_db) < RAW_TOLERANCE_DB, (index, key, step_db)
        if figure.flags:
            continue  # flagged: not presented as the part's figure
        assert abs(figure.value - reference.value) <= figure.uncertainty_db, (
            index, figure.value, reference.value, figure.flags)


def _after_point(index: int, spec: FaultSpec) -> Callable[[SimBench, PointResult], None]:
    def plant(sim: SimBench, result: PointResult) -> None:
        if result.point.index == index:
            sim.faults.add(spec)

    return plant


@pytest.mark.parametrize("command", ["OUTP:STAT ON", "OUTP:STAT OFF"])
def test_a_noise_source_supply_timeout_mid_run_leaves_the_figures_as_a_clean_run(
        tmp_path: Path, clean, command: str) -> None:
    # after point 3: the supply's next switching command runs, but the reply to the query
    # after it is lost (the engine times out, recovers and measures the point again; the
    # source is then in the state commanded, not in the one the engine last confirmed)
    spec = FaultSpec(role="nsdc", kind="timeout", match=command, max_count=1)
    figures, raw, events, sim = _run(tmp_path, _after_point(3, spec))
    assert len(sim.faults.log.events("nsdc")) == 1
    assert any(e.kind == "link" for e in events)  # the timeout was seen and recovered
    _agrees(clean, (figures, raw))


def test_a_recovery_forgets_the_noise_source_state_it_had_confirmed(tmp_path: Path,
                                                                    clean) -> None:
    # after point 3 (the source confirmed cold), the supply's output comes on behind the
    # engine's back (a supply that recalls its output state after a glitch), and the
    # analyzer's next reply is lost: the recovery that follows must not keep "cold"
    def plant(sim: SimBench, result: PointResult) -> None:
        if result.point.index == 3:
            sim.instruments["nsdc"].put_value("output_on", True)
            sim.faults.add(FaultSpec(role="sa", kind="timeout", at_command=1))

    figures, raw, events, sim = _run(tmp_path, plant)
    assert [e.role for e in sim.faults.log.events()] == ["sa"]
    assert any(e.kind == "link" for e in events)
    _agrees(clean, (figures, raw))


def test_an_off_not_read_back_leaves_the_source_state_unknown() -> None:
    # the noise bench alone on a served bench (real pyvisa): an "off" that is lost on the way
    # (not run, nothing answered) must not let the next cold reading take the source as cold
    from tests.engine.noise_support import open_noise_bench

    with start_sim_bench(resolve_description("clean"), clock=VirtualClock()) as sim:
        nb, drivers = open_noise_bench(sim)
        supply = sim.instruments["nsdc"]
        try:
            nb.source(True)
            assert supply.output_on
            sim.faults.add(FaultSpec(role="nsdc", kind="swallow", match="OUTP:STAT OFF",
                                     max_count=1))
            nb.off()
            assert supply.output_on  # the "off" was lost
            nb.source(False)  # commanded again and read back
            assert not supply.output_on
            nb.source(True)
            nb.forget_state()
            supply.put_value("output_on", False)  # behind its back, then forgotten
            nb.source(True)
            assert supply.output_on
        finally:
            nb.off()
            for _role, driver in drivers.items():
                driver.close()


def _assert_part_in_place(sim: SimBench) -> None:
    assert not sim.world.thru_fitted(), "the calibration thru is still in the part's place"


@pytest.mark.parametrize(("kind", "match", "count"), [
    ("timeout", "(@7)", 1), ("swallow", "(@6)", 1), ("swallow", "(@6)", 2)])
def test_a_switch_fault_on_the_calibration_thru_puts_the_part_back_before_measuring(
        tmp_path: Path, clean, kind: str, match: str, count: int) -> None:
    # timeout: closing the thru (channel 7) runs, the reply after it is lost: the engine
    # recovers with the thru still in the part's place. swallow: the message closing the part
    # (channel 6) again after the system calibration is lost without a trace (nothing fails:
    # only reading the route back finds it); twice: the first recovery's own attempt is lost
    # too, and the point is measured again only once the part reads back in. Either way every
    # later reading must be of the part, not of the thru.
    spec = FaultSpec(role="switch", kind=kind, match=match, max_count=count)
    figures, raw, _events, sim = _run(tmp_path, faults=(spec,))
    assert len(sim.faults.log.events("switch")) == count
    _agrees(clean, (figures, raw))
    assert all(f.flags == () for f in figures.values()), {
        i: f.flags for i, f in figures.items()}
    _assert_part_in_place(sim)


def test_a_run_starts_with_the_part_in_place_even_if_a_thru_was_left_in(tmp_path: Path,
                                                                       clean) -> None:
    # a calibration that stopped (or a person) left the calibration thru in the DUT position
    figures, raw, _events, sim = _run(tmp_path, before=lambda sim: sim.instruments[
        "switch"].move_by_hand(7))
    _agrees(clean, (figures, raw))
    assert all(f.flags == () for f in figures.values())
    _assert_part_in_place(sim)
