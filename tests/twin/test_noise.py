"""The twin fit's noise figure: a short run of the demo part (KX-2417) that measured the
single-sideband noise figure by the Y-factor method on the simulated bench is fitted, and the
part's ``noise.figure`` comes back within its stated 95 % interval, the fitted model repeating
the measured figures as the Y-factor method sees them (the signal band's gain against the
image band's, band edges included: sweeprig.sim.noise_truth)."""

from __future__ import annotations

from pathlib import Path

from sweeprig.sim.mixer import load_part
from sweeprig.twin.from_run import fit_stored_run
from tests.twin.runs import run_on_sim

NOISE = Path(__file__).parent / "data" / "noise.toml"


def test_a_run_that_measured_noise_figure_gives_it_back(tmp_path):
    twin = fit_stored_run(run_on_sim(NOISE, tmp_path), 1)
    truth = load_part("kx-2417").noise_figure_db
    p = twin.fit.parameter("noise.figure")
    assert p.covers(truth), (p.low, p.value, p.high, truth)
    # an interval that says something: the level term's u = 0.1 dB is a Type B input of
    # infinite degrees of freedom (Welch–Satterthwaite, GUM G.4.1), not stretched by
    # Student's t of the fit's one degree of freedom (12.7)
    assert p.high - p.low < 1.0
    nf = next(r for r in twin.fit.residuals if r.name == "noise_figure")
    assert nf.count == 2 and abs(nf.worst) < 0.2, nf
    line = next(x for x in twin.text.splitlines() if x.startswith("figure ="))
    assert "95 % interval" in line
    # one temperature: the tempco keeps the template's value, and says why
    assert "1 temperatures" in dict(twin.fit.unconstrained)["noise.figure_tempco"]
    # the bench levels the run cannot show (the noise source's ENR, the LO level; 0.1 dB
    # each, GUM §5.1.2) are in the interval: with two figures they are most of it, and the
    # part file says the figure is weakly identified, as for the core's parameters
    assert p.level_share >= 0.5 and p.weakly_identified
    assert "weakly identified" in line and "level errors" in line
