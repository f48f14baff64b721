"""What an earlier user can leave set on a signal generator: a level offset (the level set and
shown is the output's plus the offset), a frequency offset, modulation. sweeprig set its
levels and frequencies as if none were there, so every reading of the run was off by them,
with nothing to show for it. On the simulated bench (without the check): an LO left with a
10 dB level offset made every gain 0.8 dB low, an RF source with 3 dB made it 3 dB low, and
an RF source with a 1 MHz frequency offset moved the product off its reading: 12 dB low,
all unflagged. An analyzer left with a 10 dB reference level offset made every gain 10 dB
high. Now each profile asks them once at connect (a source's ``SOUR:POW:OFFS?``,
``SOUR:FREQ:OFFS?``, ``OUTP:MOD:STAT?``; an analyzer's ``DISP:WIND:TRAC:Y:SCAL:RLEV:OFFS?``
and ``SENS:CORR:CSET:STAT?``) and a run on an instrument with any of them set is refused
before anything is set."""

from __future__ import annotations

from pathlib import Path

import pytest

from sweeprig.engine.session import run_sequence
from sweeprig.errors import InstrumentError
from sweeprig.store.sqlite import SqliteRunStore
from tests.engine.noise_support import SIM_BENCH
from tests.engine.sim_run import small_sequence

SEQUENCE = small_sequence("""[[study]]
name = "gain"
rf_frequency = ["2.0 GHz", "2.2 GHz"]
rf_power = "-35 dBm"
lo_power = "0 dBm"
read = ["wanted"]
""", title="gain")

DESCRIPTION = """part = "kx-2417"
seed = 7
[sources]
level_error = false
harmonics = []
{left}"""


def _run(tmp_path: Path, left: str = ""):
    sequence = tmp_path / "sequence.toml"
    sequence.write_text(SEQUENCE, encoding="utf-8")
    described = tmp_path / "sim-bench.toml"
    described.write_text(DESCRIPTION.format(left=left), encoding="utf-8")
    return run_sequence(sequence, SIM_BENCH, sim=True, sim_description=described,
                        store_path=tmp_path / "runs.sqlite")


@pytest.mark.parametrize(("left", "fragments"), [
    ('[sources.left_set]\nlo = { power_offset = "10 dB" }\n',
     ["role 'lo'", "power offset of 10 dB", "SOUR:POW:OFFS?"]),
    ('[sources.left_set]\nrf = { frequency_offset = "1 MHz" }\n',
     ["role 'rf'", "frequency offset of 1e+06 Hz", "SOUR:FREQ:OFFS?"]),
    ('[sources.left_set]\nrf = { modulation = true }\n',
     ["role 'rf'", "modulation on", "OUTP:MOD:STAT?", "switch it off"]),
    # an analyzer's reference level offset moves every level it reports
    ('[analyzer.left_set]\nref_level_offset = "10 dB"\n',
     ["role 'sa'", "ref level offset of 10 dB", "DISP:WIND:TRAC:Y:SCAL:RLEV:OFFS?"]),
    ("[analyzer.left_set]\ncorrections = true\n",
     ["role 'sa'", "corrections on", "SENS:CORR:CSET:STAT?"]),
])
def test_an_instrument_left_set_by_an_earlier_user_is_refused(tmp_path: Path, left: str,
                                                             fragments: list[str]) -> None:
    with pytest.raises(InstrumentError) as caught:
        _run(tmp_path, left)
    message = caught.value.message()
    for fragment in fragments:
        assert fragment in message, (fragment, message)
    assert caught.value.exit_code == 4
    # refused before anything was recorded
    store = tmp_path / "runs.sqlite"
    if store.exists():
        with SqliteRunStore(store, create=False) as db:
            assert db.runs() == []


def test_a_source_set_as_sweeprig_needs_it_runs(tmp_path: Path) -> None:
    neutral = ('[sources.left_set]\nlo = { power_offset = "0 dB", frequency_offset = "0 Hz", '
               'modulation = false }\n')
    assert _run(tmp_path, neutral).status == "complete"


@pytest.mark.parametrize(("left", "fragment"), [
    ('offset = "3 dB"', "display offset on"),
    ("duty_cycle = 50.0", "duty cycle on"),  # every reading 3 dB high
])
def test_a_power_meter_left_set_refuses_the_calibration(tmp_path: Path, left: str,
                                                        fragment: str) -> None:
    # a 3 dB display offset or a 50 % duty-cycle correction left on goes into every path loss
    # the calibration measures: without the check it passed, its RF path loss 0.05 dB for a
    # true 3.05 dB, so every run calibrated with it drives the part 3 dB under what it
    # records. Refused before any RF
    from sweeprig.engine.calibrate import calibrate_sources
    from sweeprig.engine.session import shipped_sequences_dir

    described = tmp_path / "sim-bench.toml"
    described.write_text(f'part = "kx-2417"\n[power_meter]\n{left}\n', encoding="utf-8")
    with pytest.raises(InstrumentError) as caught:
        calibrate_sources(shipped_sequences_dir() / "demo" / "quick.toml", None,
                          tmp_path / "cal.toml", sim=True, repeats=1,
                          sim_description=described)
    message = caught.value.message()
    assert "role 'pm'" in message and fragment in message, message
    assert not (tmp_path / "cal.toml").exists()


@pytest.mark.parametrize("family", ["tarnwick", "farrowmere"])
def test_a_trace_left_frozen_is_written_again(tmp_path: Path, family: str) -> None:
    # sweeprig owns the trace it reads: its profiles' prepare sets it written by every sweep.
    # Left frozen (VIEW), every gain read the first sweep's level (12.56 dB at every RF
    # frequency on the simulated bench), and the LO-to-IF isolation read a trace tuned to
    # the IF: 78 dB, "in the noise".
    from tests.engine.sim_run import run_on_sim

    sequence = small_sequence("""[[study]]
name = "gain"
rf_frequency = ["1.8 GHz", "2.0 GHz", "2.2 GHz", "2.4 GHz"]
rf_power = "-35 dBm"
lo_power = "0 dBm"
read = ["wanted", "lo_at_if"]
""")
    head = f'part = "kx-2417"\nseed = 7\n[analyzer]\nfamily = "{family}"\n'
    frozen = run_on_sim(tmp_path, sequence, name="frozen",
                        description=head + 'left_set = { trace_mode = "view" }\n')
    clean = run_on_sim(tmp_path, sequence, name="clean", description=head)

    def figures(done):
        return [(f.name, f.points, f.value, f.flags) for f in done.run.figures
                if f.name in ("conversion_gain", "lo_if_isolation")]

    assert figures(frozen) == figures(clean)
    assert len({v for n, _p, v, _f in figures(clean) if n == "conversion_gain"}) == 4


@pytest.mark.parametrize("family", ["tarnwick", "farrowmere"])
def test_a_detector_left_on_power_is_set_back_to_sample(tmp_path: Path, family: str) -> None:
    # every reading's noise floor is estimated for the sample (log envelope) detector: one an
    # earlier user left on the power detector (or a peak one) is set back at prepare
    from sweeprig.clock import VirtualClock
    from sweeprig.engine.connect import open_bench
    from sweeprig.engine.session import served_bench_text
    from sweeprig.formats.bench import load_bench
    from sweeprig.sim.bench import resolve_description, start_sim_bench

    desc = resolve_description(None)
    analyzer = desc.analyzer.model_copy(update={
        "family": family, "left_set": desc.analyzer.left_set.model_copy(
            update={"detector": "rms"})})
    desc = desc.model_copy(update={"analyzer": analyzer})
    with start_sim_bench(desc, clock=VirtualClock()) as sim:
        sa = sim.instruments["sa"]
        assert sa.value("detector") != "SAMPLE"  # as left
        bench_file = tmp_path / "bench.toml"
        bench_file.write_text(served_bench_text(dict(sim.resources), desc), encoding="utf-8")
        drivers = open_bench(load_bench(bench_file), {"sa": "readings"}, clock=sim.clock)
        try:
            drivers.sa.prepare()  # type: ignore[union-attr]
            drivers.sa.check_errors()  # a reply: every message before it has been handled
            assert sa.value("detector") == "SAMPLE"
        finally:
            drivers.close()
