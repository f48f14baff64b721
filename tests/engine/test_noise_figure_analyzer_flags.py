"""A noise-figure reading asks the analyzer what it says of its own sweeps: overloaded, and
uncalibrated (in one message with the overload flag where the profile joins them). Planted
on the simulated bench: a strong line in the noise band above the reference level the noise
readings set (the simulated analyzer flags a sweep uncalibrated when its trace passes its
reference level); the system calibration's flags are kept for the figures it corrects."""

from __future__ import annotations

import pytest

from sweeprig.clock import VirtualClock
from sweeprig.sim.bench import InterfererSpec, resolve_description, start_sim_bench
from tests.engine.noise_support import IF_HZ, open_noise_bench


def _bench(line_dbm: float | None):
    desc = resolve_description(None)
    if line_dbm is None:
        return desc
    return desc.model_copy(update={"interferers": (InterfererSpec(frequency=101e6,
                                                                  level=line_dbm),)})


@pytest.mark.parametrize(("line_dbm", "expected"), [(None, False), (-80.0, False),
                                                     (-22.0, True)])
def test_the_noise_sweeps_flags_are_read(line_dbm: float | None, expected: bool) -> None:
    with start_sim_bench(_bench(line_dbm), clock=VirtualClock()) as sim:
        nb, drivers = open_noise_bench(sim)
        try:
            nb.system_calibration([IF_HZ])
            reading = nb.read(IF_HZ)
            point = nb.hot_cold(IF_HZ, check_compression=True)
        finally:
            nb.off()
            drivers.close()
    assert reading.uncalibrated is expected
    assert point.uncalibrated is expected
    assert point.hot.uncalibrated is expected and point.cold.uncalibrated is expected
    # the line reaches the calibration's sweeps too (it is on the analyzer's input path)
    assert nb.calibration_flags[IF_HZ] == (False, expected)
    assert not point.overload


def test_a_run_flags_the_noise_figures_of_uncalibrated_sweeps(tmp_path) -> None:
    # end to end: the reading stores what the analyzer said, the reduction flags both figures
    from tests.engine.noise_support import noise_sequence
    from tests.engine.sim_run import run_on_sim

    planted = ('part = "kx-2417"\nseed = 7\n[noise_source]\ndrive_on = "20 V"\n'
               '[[interferers]]\nfrequency = "101 MHz"\nlevel = "-22 dBm"\n')
    done = run_on_sim(tmp_path, noise_sequence(), description=planted)
    noise = [x["noise"] for x in done.reading_extras if "noise" in x]
    assert noise and all(n["uncalibrated"] and n["cal_uncalibrated"] for n in noise)
    assert all(not n["cal_overload"] for n in noise)
    figures = [f for f in done.run.figures if f.name.startswith("noise_figure")]
    assert figures and all("analyzer_uncalibrated" in f.flags for f in figures)
    clean = run_on_sim(tmp_path, noise_sequence(), name="clean")
    assert all("analyzer_uncalibrated" not in f.flags for f in clean.run.figures)
    assert all(not x["noise"]["uncalibrated"] for x in clean.reading_extras if "noise" in x)
