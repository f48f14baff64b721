"""The second simulated analyzer family (Farrowmere FR-SA20, sim-bench ``[analyzer] family =
"farrowmere"``): its profile ``fr-sa20`` passes every operation in the probe, the generic
profile fails there loudly, and the quick demo gives the same figures on it as on the
default family (real pyvisa over loopback)."""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

import pytest
import pyvisa

from sweeprig.analysis.reduce import reduce_run
from sweeprig.cli.probe_cmd import run_probe
from sweeprig.clock import VirtualClock
from sweeprig.engine.session import run_sequence, served_bench_text, shipped_sequences_dir
from sweeprig.instruments.profile import load_profile
from sweeprig.sim.bench import SimBenchDescription, resolve_description, start_sim_bench
from sweeprig.store.sqlite import SqliteRunStore

QUICK = shipped_sequences_dir() / "demo" / "quick.toml"


@contextmanager
def _session(resource: str) -> Iterator[pyvisa.resources.MessageBasedResource]:
    """A pyvisa session to one served instrument, closed (with its manager) on the way out."""
    rm = pyvisa.ResourceManager("@py")
    try:
        inst = rm.open_resource(resource, read_termination="\n", write_termination="\n",
                                timeout=2000)
        try:
            yield inst
        finally:
            inst.close()
    finally:
        rm.close()


def _family(name: str) -> SimBenchDescription:
    base = resolve_description(None)
    return base.model_copy(update={"analyzer": base.analyzer.model_copy(
        update={"family": name})})


@pytest.fixture(scope="module")
def farrowmere():
    with start_sim_bench(_family("farrowmere"), clock=VirtualClock()) as bench:
        yield bench


def test_the_family_is_chosen_by_the_sim_bench_file(tmp_path: Path) -> None:
    path = tmp_path / "fr.toml"
    path.write_text('[analyzer]\nfamily = "farrowmere"\n', encoding="utf-8")
    assert resolve_description(str(path)).analyzer.family == "farrowmere"
    assert resolve_description(None).analyzer.family == "tarnwick"


def test_every_operation_of_its_profile_works(farrowmere) -> None:
    report = run_probe(farrowmere.resources["sa"], "fr-sa20", timeout_s=2.0)
    assert report.idn is not None and report.idn.startswith("Farrowmere Instruments,FR-SA20,")
    assert report.counts()["fail"] == 0, [s for s in report.steps if s.result != "ok"]
    assert report.counts()["differs"] == 0
    assert {s.op for s in report.steps} == set(load_profile("fr-sa20").ops) - {"next_error"}


def test_the_generic_profile_fails_loudly_on_it(farrowmere) -> None:
    report = run_probe(farrowmere.resources["sa"], "scpi-analyzer", timeout_s=0.5)
    failed = {s.op: s for s in report.failed}
    # the dialect's differences, each named with the instrument's own error (SCPI-99:
    # -113 undefined header, -108 parameter not allowed)
    assert {"prepare", "rbw", "vbw", "attenuation", "marker_level", "peak",
            "trace_real32"} <= set(failed)
    assert failed["rbw"].errors[0].startswith("-113")
    assert "spells it differently" in failed["rbw"].fix
    assert failed["trace_real32"].errors[0].startswith("-108")
    assert report.counts()["fail"] >= 10


def test_its_binary_trace_is_little_endian_and_read_so(farrowmere) -> None:
    import numpy as np
    with _session(farrowmere.resources["sa"]) as inst:
        inst.write("*RST;:INIT:CONT OFF;:INIT:IMM")
        assert inst.query("*OPC?").strip() == "1"
        assert inst.query("FORM?").strip() == "REAL,32"  # its power-on format
        # pyvisa's own IEEE 488.2 block reader as the reference decoder
        little = np.asarray(inst.query_binary_values("TRAC1?", datatype="f",
                                                     is_big_endian=False))
        inst.write("FORM ASC")
        text = np.array([float(v) for v in inst.query("TRAC1?").split(",")])
        np.testing.assert_allclose(little, text, atol=1e-3)
        assert inst.query("SYST:ERR?").startswith("0,")


def _whole_family(name: str) -> SimBenchDescription:
    """Every instrument that has a second family (analyzer, sources, power meter) of it."""
    base = _family(name)
    return base.model_copy(update={
        "sources": base.sources.model_copy(update={"family": name}),
        "power_meter": base.power_meter.model_copy(update={"family": name})})


def _quick_figures(tmp_path: Path, family: str) -> dict[str, list[tuple[float, float]]]:
    description = _whole_family(family)
    with start_sim_bench(description, clock=VirtualClock()) as sim:
        # the served bench file with the family's profiles and [timebase] (its sources run on
        # their own crystals unless the bench file locks them)
        text = served_bench_text(sim.resources, description)
        if family == "farrowmere":
            for profile in ("fr-sa20", "fr-sg8", "fr-pm4"):
                assert f'profile = "{profile}"' in text
            assert "[timebase]" in text
        bench = tmp_path / f"bench-{family}.toml"
        bench.write_text(text, encoding="utf-8")
        store = tmp_path / f"{family}.sqlite"
        outcome = run_sequence(QUICK, bench, store_path=store)
        assert outcome.status == "complete", outcome.reason
    with SqliteRunStore(store, create=False) as s:
        run = reduce_run(s, outcome.run_id)
    return {name: [(f.value, f.uncertainty_db) for f in run.figures_named(name)]
            for name in ("conversion_gain", "iip3")}


def test_the_quick_demo_gives_the_same_figures_on_a_whole_second_family_bench(
        tmp_path: Path) -> None:
    first = _quick_figures(tmp_path, "tarnwick")
    second = _quick_figures(tmp_path, "farrowmere")
    assert first["conversion_gain"] and first["iip3"]
    for name in first:
        assert len(first[name]) == len(second[name])
        for (a, ua), (b, ub) in zip(first[name], second[name], strict=True):
            # within the stated expanded uncertainty (JCGM 100:2008 6.2, k = 2) of either run
            assert abs(a - b) <= max(ua, ub), (name, a, b, ua, ub)


def test_its_overload_bit_is_read_through_its_profile() -> None:
    """An input 10 dB over the first mixer's overload level with 0 dB attenuation: the FR-SA20
    sets its bit 10, the fr-sa20 profile's mask reads it, the SCPI-99 POWer bit 3 (the generic
    profile's mask) stays clear."""
    from sweeprig.instruments import make_driver
    from sweeprig.sim.analyzer_display import InputSpectrum
    from sweeprig.sim.instruments.analyzer_fr import QUES_OVERLOAD_FR, FarrowmereAnalyzer
    from sweeprig.sim.server import serve
    from sweeprig.transport.visa import VisaTransport

    inst = FarrowmereAnalyzer(VirtualClock(), lambda: InputSpectrum(lines=((1e9, 10.0),),
                                                                    noise_dbm_per_hz=-174.0))
    profile = load_profile("fr-sa20")
    with serve({"sa": inst}) as served:
        transport = VisaTransport(served.resources["sa"], visa_library="@py", timeout_s=2.0,
                                  settings=profile.connection)
        try:
            driver = make_driver(profile, "sa", transport)
            driver.prepare()
            driver.enable_status()
            for op, value in (("centre", 1e9), ("span", 1e6), ("attenuation", 0.0),
                              ("ref_level", 10.0)):
                driver.set_value(op, value)
            driver.sweep()
            assert driver.sweep_flags()[0] is True
            bits = int(transport.query("STAT:QUES:COND?"))
            assert bits & QUES_OVERLOAD_FR and not bits & 8
        finally:
            transport.close()


def test_run_sim_on_the_second_family_takes_its_profile(tmp_path: Path) -> None:
    """``run --sim --sim-bench`` with a farrowmere description: the built-in bench file's
    generic analyzer profile is swapped for fr-sa20, so the demo runs unchanged."""
    outcome = run_sequence(QUICK, sim=True, sim_description=_family("farrowmere"),
                           store_path=tmp_path / "s.sqlite")
    assert outcome.status == "complete", outcome.reason
    with SqliteRunStore(tmp_path / "s.sqlite", create=False) as s:
        sa = [i for i in s.run(outcome.run_id).instruments if i.role == "sa"]
    assert sa and sa[0].idn.startswith("Farrowmere Instruments,FR-SA20,")


@pytest.fixture(scope="module")
def whole_farrowmere():
    with start_sim_bench(_whole_family("farrowmere"), clock=VirtualClock()) as bench:
        yield bench


@pytest.mark.parametrize(("role", "profile", "model"), [
    ("lo", "fr-sg8", "FR-SG8"), ("pm", "fr-pm4", "FR-PM4")])
def test_its_source_and_meter_pass_the_probe_with_their_profiles(
        whole_farrowmere, role: str, profile: str, model: str) -> None:
    # the driver polls for completion on the bench's own (virtual) clock
    report = run_probe(whole_farrowmere.resources[role], profile, timeout_s=2.0,
                       clock=whole_farrowmere.clock)
    assert report.idn is not None and f"Farrowmere Instruments,{model}," in report.idn
    assert report.counts()["fail"] == 0, [s for s in report.steps if s.result != "ok"]


def test_the_generic_source_profile_fails_loudly_on_it(whole_farrowmere) -> None:
    report = run_probe(whole_farrowmere.resources["rf"], "scpi-source", timeout_s=0.5)
    failed = {s.op: s for s in report.failed}
    # no :CW and no :IMMediate node (SCPI-99 -113 undefined header)
    assert {"frequency", "power"} <= set(failed)
    assert failed["frequency"].errors[0].startswith("-113")


def test_its_source_applies_a_setting_late_unless_synchronised(whole_farrowmere) -> None:
    """Over pyvisa: the query answers the new frequency at once, the output keeps the old one
    while OPERation bit 1 (SCPI-99 SETTling) is set; *OPC then *ESR? bit 0 (IEEE 488.2-1992,
    10.18; from memory) is set only once the output has it."""
    clock = whole_farrowmere.clock
    source = whole_farrowmere.instruments["rf2"]
    with _session(whole_farrowmere.resources["rf2"]) as inst:
        inst.write("*RST;*CLS")
        inst.write("SOUR:FREQ 2.5E9")
        assert float(inst.query("SOUR:FREQ?")) == 2.5e9
        assert source.freq_hz == 1e9  # still the power-on frequency at the output
        assert int(inst.query("STAT:OPER:COND?")) & 2
        inst.write("*OPC")
        assert not int(inst.query("*ESR?")) & 1
        clock.sleep(0.05)
        assert int(inst.query("*ESR?")) & 1
        assert source.freq_hz == 2.5e9 and int(inst.query("STAT:OPER:COND?")) == 0
        assert inst.query("SYST:ERR?").startswith("0,")


def test_its_meter_needs_status_polling_not_opc_to_finish_a_zeroing(whole_farrowmere) -> None:
    """Over pyvisa: after CAL:AUTO ONCE a *OPC? answers 1 at once while the zeroing still runs
    (a reading then is refused, -230); OPERation bit 0 (SCPI-99 CALibrating) says when it
    ends, and only then is a reading given (docs/instruments.md, FR-PM4)."""
    clock = whole_farrowmere.clock
    with _session(whole_farrowmere.resources["pm"]) as inst:
        inst.write("*CLS")
        inst.write("CAL:AUTO ONCE")
        started = clock.now()
        assert inst.query("*OPC?") == "1" and clock.now() - started < 0.1
        assert int(inst.query("STAT:OPER:COND?")) & 1
        assert float(inst.query("MEAS?")) > 9e37  # SCPI-99 NaN: not zeroed yet
        assert inst.query("SYST:ERR?").startswith("-230")
        while int(inst.query("STAT:OPER:COND?")) & 1:  # as the fr-pm4 profile polls
            clock.sleep(0.5)
        assert 3.9 <= clock.now() - started <= 4.6
        assert float(inst.query("MEAS?")) < 9e37
        assert inst.query("SYST:ERR?").startswith("0,")


def test_the_probe_on_a_served_bench_file_waits_on_the_simulators_clock(
        whole_farrowmere, tmp_path: Path) -> None:
    """``sweeprig probe RESOURCE --bench FILE`` on a bench served by the simulator: the meter's
    4 s zeroing, completed by polling its status, ends in simulated time (the bench file's
    simctl role gives the clock) instead of polling a frozen simulator until the zero's own
    60 s timeout, which would fail its step (no wall-time assertion: the step's result says it)."""
    bench = tmp_path / "served.toml"
    bench.write_text(served_bench_text(whole_farrowmere.resources,
                                       _whole_family("farrowmere")), encoding="utf-8")
    report = run_probe(whole_farrowmere.resources["pm"], "fr-pm4", bench_path=bench,
                       timeout_s=2.0)
    assert report.counts()["fail"] == 0, [s for s in report.steps if s.result != "ok"]


def test_its_sweeps_are_slower_and_it_says_so(farrowmere) -> None:
    """``SWEep:TIME?`` over pyvisa: 1.6 times the receiver's k·span/RBW² (the TW-SA13's), and
    a sweep holds ``*OPC?`` that long in simulated time."""
    from sweeprig.sim.analyzer_display import sweep_time_s
    from sweeprig.sim.instruments.analyzer_fr import SWEEP_TIME_SCALE_FR

    analyzer = farrowmere.instruments["sa"]
    with _session(farrowmere.resources["sa"]) as inst:
        inst.write("*RST;:INIT:CONT OFF;:FREQ:SPAN 1E6;:BWID 1E3")
        stated = float(inst.query("SWE:TIME?"))
        assert stated == pytest.approx(SWEEP_TIME_SCALE_FR
                                       * sweep_time_s(analyzer.sweep_settings()), rel=1e-6)
        t0 = farrowmere.clock.now()
        inst.write("INIT:IMM")
        assert inst.query("*OPC?").strip() == "1"
        assert farrowmere.clock.now() - t0 == pytest.approx(stated, rel=1e-3)
