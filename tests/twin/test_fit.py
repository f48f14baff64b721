"""The twin fit on a small run of the demo part (KX-2417, the default simulated bench):
it recovers the part's parameters within their stated intervals, says what it could not
constrain, and its part file loads as a part with every such key marked."""

from __future__ import annotations

import math
import tomllib

import numpy as np
import pytest

from sweeprig.sim.mixer import load_part
from sweeprig.twin.fit import _covariance
from sweeprig.twin.partfile import check_part_text

TRUTH = load_part("kx-2417")
TRUE_VALUES = {  # the shipped part's own values, SI
    "core.tail_current": TRUTH.tail_current_a,
    "core.emitter_degeneration": TRUTH.emitter_degeneration_ohm,
    "ports.lo.resistance": TRUTH.lo_port.resistance_ohm,
    "ports.rf.highpass": TRUTH.rf_port.highpass_hz,
    "ports.rf.lowpass": TRUTH.rf_port.lowpass_hz,
    "core.aux_current": TRUTH.aux_current_a,
    "isolation.lo_to_if": TRUTH.isolation_lo_if_db,
    "isolation.lo_to_rf": TRUTH.isolation_lo_rf_db,
    "mismatch.load": TRUTH.load_mismatch,  # from the run's im2 readings
    "isolation.lo_to_if_slope": 0.0,  # flat paths; the leakage read over 1.7-2.5 GHz of LO
    "isolation.lo_to_rf_slope": 0.0,
}


def test_the_fit_recovers_the_known_part_within_its_intervals(small_twin):
    fit = small_twin.fit
    assert fit.converged
    fitted = {p.key for p in fit.parameters}
    assert set(TRUE_VALUES) <= fitted, fitted
    for key, true_value in TRUE_VALUES.items():
        p = fit.parameter(key)
        assert math.isfinite(p.low) and math.isfinite(p.high), key
        assert p.covers(true_value), (key, p.low, p.value, p.high, true_value)


def test_the_fit_names_what_the_run_did_not_constrain(small_twin):
    unconstrained = dict(small_twin.fit.unconstrained)
    assert "supplies" in unconstrained["core.tail_supply_coeff"]
    assert "no usable noise_figure" in unconstrained["noise.figure"]
    assert "no usable rf_if_isolation" in unconstrained["isolation.rf_to_if"]


def test_the_residuals_are_within_the_twin_targets(small_twin):
    targets = {"conversion_gain": 0.1, "lo_drive_gain": 0.1, "compression_gain": 0.3,
               "iip3_point_low": 0.5, "iip3_point_high": 0.5, "iip2_point_low": 1.0,
               "lo_if_isolation": 1.0,
               "lo_rf_isolation": 1.0}
    worst = {r.name: abs(r.worst) for r in small_twin.fit.residuals}
    for name, target in targets.items():
        assert worst[name] <= target, (name, worst[name])


def test_the_part_file_loads_and_marks_every_unconstrained_key(small_twin):
    part = check_part_text(small_twin.text)
    assert part.tail_current_a == pytest.approx(small_twin.fit.part.tail_current_a, rel=1e-5)
    data = tomllib.loads(small_twin.text)
    assert data["part"]["conversion"] == "down"
    line = next(x for x in small_twin.text.splitlines() if x.startswith("tail_supply_coeff"))
    assert "not constrained by the run" in line
    line = next(x for x in small_twin.text.splitlines() if x.startswith("tail_current"))
    assert "95 % interval" in line
    line = next(x for x in small_twin.text.splitlines() if x.startswith("load ="))
    assert "95 % interval" in line  # the even-order products were read: the mismatch is fitted


def test_the_covariance_is_the_textbook_one_for_a_straight_line():
    """For y = a + b·x the least-squares covariance s²·(JᵀJ)⁻¹ gives
    σ_b² = s²/Σ(x − x̄)² (Press et al., Numerical Recipes, 3rd ed., §15.2, eq. 15.2.9 with
    σ estimated from the fit)."""
    x = np.array([0.0, 1.0, 2.0, 3.0, 4.0])
    jac = np.column_stack([np.ones_like(x), x])
    s2 = 0.3
    cov = _covariance(jac, s2)
    assert cov[1, 1] == pytest.approx(s2 / np.sum((x - x.mean()) ** 2))
    assert cov[0, 0] == pytest.approx(s2 * np.sum(x**2) / (len(x) * np.sum((x - x.mean()) ** 2)))


def test_a_sim_bench_description_serves_the_twin(small_twin, tmp_path):
    """`sim serve --sim-bench` and `run --sim --sim-bench` read the part from a description:
    a twin part file beside it is accepted like any part file."""
    from sweeprig.sim.bench import load_sim_bench_description, prepare_part
    from sweeprig.twin.partfile import write_part_file

    write_part_file(small_twin.text, tmp_path / "twin.toml")
    (tmp_path / "bench.toml").write_text('part = "twin.toml"\n', encoding="utf-8")
    description = load_sim_bench_description(tmp_path / "bench.toml")
    part = prepare_part(description)
    assert part.name == "KX-2417 (fictional) twin"  # the run's part id, as a twin
    assert part.tail_current_a == pytest.approx(small_twin.fit.part.tail_current_a, rel=1e-5)
