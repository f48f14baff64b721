"""Published worked uncertainty examples, reproduced with sweeprig's own budget machinery
(:mod:`sweeprig.analysis.uncertainty`): the same inputs must give the guide's result."""

from __future__ import annotations

import math

import pytest

from sweeprig.analysis.uncertainty import (
    Budget,
    Contribution,
    combine,
    mismatch_limits_db,
    standard_uncertainty,
)


def _vswr_to_gamma(vswr: float) -> float:
    # |Γ| = (VSWR − 1)/(VSWR + 1) (field notes: Pozar)
    return (vswr - 1.0) / (vswr + 1.0)


def test_ea_4_02_s7_coaxial_step_attenuator_at_30_db():
    # EA-4/02 M (European co-operation for Accreditation, "Evaluation of the Uncertainty of
    # Measurement in Calibration"), supplementary example S7: calibration of a coaxial step
    # attenuator at a setting of 30 dB (incremental loss) at 10 GHz, model
    #   L_X = L_S + δL_S + δL_D + δL_M + δL_K + δL_ib − δL_ia + δL_0b − δL_0a  (all in dB).
    # The guide states L_X = 30.043 dB ± 0.045 dB (k = 2), u_c = 0.0224 dB (the published
    # software example of the same case gives u_c = 0.022419 dB). The standard uncertainties
    # below are the guide's u(x_i) column as tabulated (rounded to two digits), read from a
    # secondary transcription of the guide, not the guide itself: check them against it.
    rows = [  # (input, u(x_i) dB, distribution as the guide names it, c_i)
        ("L_S   reference attenuator (calibration)", 0.0090, "normal", 1.0),
        ("δL_S  drift of the reference", 0.0025, "rectangular", 1.0),
        ("δL_D  linearity of the detector", 0.0011, "U-shaped", 1.0),
        ("δL_M  mismatch", 0.0200, "U-shaped", 1.0),
        ("δL_K  leakage", 0.0017, "U-shaped", 1.0),
        ("δL_ia resolution, 0 dB setting", 0.0003, "U-shaped", -1.0),
        ("δL_ib resolution, 30 dB setting", 0.0003, "rectangular", 1.0),
        ("δL_0a null detector, 0 dB setting", 0.0019, "rectangular", -1.0),
        ("δL_0b null detector, 30 dB setting", 0.0020, "normal", 1.0),
    ]
    budget = Budget(tuple(Contribution(name, name, u, "standard", c)
                          for name, u, _shape, c in rows))
    # JCGM 100:2008 eq. (10) and 6.2.1, through sweeprig's Budget
    assert budget.combined_db == pytest.approx(0.0224, rel=0.01)  # rounding of the rows
    assert round(budget.expanded_db, 3) == 0.045
    # the mismatch term dominates, as the guide says of RF attenuation measurements
    assert max(budget.contributions, key=lambda c: c.contribution_db).name.startswith("δL_M")
    # a U-shaped (arcsine) u of 0.0200 dB is a limit of ±0.0283 dB: u = a/√2
    assert standard_uncertainty(0.0200 * math.sqrt(2), "u-shaped") == pytest.approx(0.0200)


def test_wattmeter_manual_mismatch_and_rss_example():
    # A published user manual of a terminating RF wattmeter (its "measurement uncertainty"
    # section; maker not named here) works this example: a source of VSWR 1.50 into a
    # sensor of VSWR 1.20 gives a mismatch uncertainty of ±[(1 + |Γs||ΓL|)² − 1] = ±3.67 %;
    # a source of VSWR 1.30 gives ±2.39 %; VSWR 1.50 into a VSWR 1.03 sensor ±0.59 %. The
    # instrument's own RSS uncertainty of 5.00 % combined with the 3.67 % by root sum of
    # squares gives 6.20 % in total.
    def mismatch_percent(vswr_s: float, vswr_l: float) -> float:
        _low, high = mismatch_limits_db(_vswr_to_gamma(vswr_s), _vswr_to_gamma(vswr_l))
        return 100.0 * (10.0 ** (high / 10.0) - 1.0)  # dB → % of power

    assert mismatch_percent(1.50, 1.20) == pytest.approx(3.67, abs=0.005)
    assert mismatch_percent(1.30, 1.20) == pytest.approx(2.39, abs=0.005)
    assert mismatch_percent(1.50, 1.03) == pytest.approx(0.59, abs=0.005)
    assert combine([5.00, mismatch_percent(1.50, 1.20)]) == pytest.approx(6.20, abs=0.005)
