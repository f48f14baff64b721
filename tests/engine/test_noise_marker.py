"""Noise readings on an analyzer without a power (RMS) detector that offers the marker's noise
function (profile operation ``noise_marker``): through real pyvisa on the simulated bench, the
figure lands on the model's truth as with the RMS detector."""

from __future__ import annotations

import math
import re
from pathlib import Path

from sweeprig.clock import VirtualClock
from sweeprig.engine.noise_figure import NoiseBench
from sweeprig.instruments import make_driver
from sweeprig.instruments.analyzer import AnalyzerDriver
from sweeprig.instruments.profile import load_profile_file
from sweeprig.sim.bench import start_sim_bench
from sweeprig.transport.visa import VisaTransport
from tests.engine.noise_support import IF_HZ, measure, open_noise_bench

ROOT = Path(__file__).resolve().parents[2]


def marker_profile(tmp: Path) -> Path:
    """The generic analyzer profile without its detector operation, with a noise marker."""
    text = (ROOT / "drivers" / "scpi-analyzer.toml").read_text(encoding="utf-8")
    text = re.sub(r"\n\[ops\.detector\]\n(?:[^\[\n].*\n)*", "\n", text)
    assert "[ops.detector]" not in text
    text = text.replace('name = "scpi-analyzer"', 'name = "lab-sa-noise-marker"')
    text += ('\n[ops.noise_marker]\ncommand = "CALC:MARK1:X {value}"\n'
             'query = "CALC:MARK1:DENS?"\n')
    path = tmp / "lab-sa-noise-marker.toml"
    path.write_text(text, encoding="utf-8")
    return path


def test_the_noise_marker_reads_density_and_the_figure_matches_the_model(tmp_path: Path
                                                                         ) -> None:
    profile = load_profile_file(marker_profile(tmp_path))
    assert profile.has("noise_marker") and not profile.has("detector")
    # the clean bench: the figure is judged against the model without a calibration
    with start_sim_bench("clean", clock=VirtualClock()) as sim:
        nb, drivers = open_noise_bench(sim)
        transport = VisaTransport(sim.resources["sa"], visa_library="@py", timeout_s=5.0,
                                  settings=profile.connection)
        try:
            sa = make_driver(profile, "sa", transport, clock=sim.clock)
            assert isinstance(sa, AnalyzerDriver)
            sa.identify()
            sa.prepare()
            drivers.sa = sa
            nb = NoiseBench(nb.bench, drivers, sim.clock)
            nb.system_calibration([IF_HZ])
            # the cold reading's density: kT0·F_receiver, well above kT0 = -174 dBm/Hz
            cold = nb.calibration[IF_HZ].cold_mw / (1.0645 * nb.settings.rbw_hz)
            assert -174.0 < 10.0 * math.log10(cold) < -150.0
            assert sim.instruments["sa"].value("detector").upper().startswith("SAMP")
            outcome = measure(sim, nb, drivers, 2.2e9, 0.0)
            assert abs(outcome.error_db) <= 0.2 and outcome.result.flags == ()
        finally:
            nb.off()
            transport.close()
            drivers.close()
