"""The twin fit's intervals hold the bench's unseen level errors: a run whose LO source sits
0.15 dB off what the bench file says (the simulated bench's level error reaches ±0.15 dB)
moves the fitted LO port resistance by more than the scatter says; the bench-level term of
the covariance (GUM law of propagation, see sweeprig.twin.fit._with_bench_levels) widens the
interval to hold the truth, and without it the interval misses (the cause of the misses on
the full demo run)."""

from __future__ import annotations

from types import MappingProxyType

import numpy as np
import pytest

from sweeprig.sim.bench import resolve_description
from sweeprig.sim.mixer import load_part
from sweeprig.twin import fit as fit_module
from sweeprig.twin.fit import fit_twin
from sweeprig.twin.forward import model_figures
from sweeprig.twin.observations import Observation, ObservationSet

LO_ERROR_DB = 0.15


def _run_with_lo_error() -> tuple[ObservationSet, float]:
    truth = load_part("kx-2417").with_changes(
        leakage_phases=resolve_description(None).leakage_phases())
    base = {"temperature_c": 25.0, "supply_v": 3.3, "rf_power_dbm": -25.0}
    conditions = [("conversion_gain", dict(base, rf_freq_hz=f, lo_freq_hz=f - 100e6,
                                           lo_power_dbm=0.0)) for f in (2.1e9, 2.2e9, 2.3e9)]
    conditions += [("lo_drive_gain", dict(base, rf_freq_hz=2.2e9, lo_freq_hz=2.1e9,
                                          lo_power_dbm=p)) for p in (-9.0, -6.0, -3.0, 0.0, 3.0)]
    said = [Observation(n, 0.0, MappingProxyType(c)) for n, c in conditions]
    # what the part really saw: every LO level 0.15 dB above what the run records
    real = [Observation(o.name, 0.0, MappingProxyType(
        {**o.conditions, "lo_power_dbm": o.conditions["lo_power_dbm"] + LO_ERROR_DB}))
        for o in said]
    values = model_figures(truth, real)
    # a quiet bench (0.002 dB repeatability), so the bias stands out against the scatter
    scatter = np.random.default_rng(4).normal(0.0, 0.002, len(said))
    obs = tuple(Observation(o.name, float(v + e), o.conditions)
                for o, v, e in zip(said, values, scatter, strict=True))
    return ObservationSet(obs, MappingProxyType({})), truth.lo_port.resistance_ohm


def test_the_bench_level_term_holds_an_unseen_lo_level_error(monkeypatch):
    obs, true_r = _run_with_lo_error()
    with_levels = fit_twin(load_part("kx-2417").with_changes(
        leakage_phases=resolve_description(None).leakage_phases()), obs)
    r = with_levels.parameter("ports.lo.resistance")
    assert r.covers(true_r), (r.low, r.value, r.high, true_r)
    monkeypatch.setattr(fit_module, "BENCH_LEVEL_U_DB", 0.0)
    monkeypatch.setattr(fit_module._with_bench_levels, "__defaults__", (0.0,))
    scatter_only = fit_twin(load_part("kx-2417").with_changes(
        leakage_phases=resolve_description(None).leakage_phases()), obs)
    narrow = scatter_only.parameter("ports.lo.resistance")
    assert narrow.value == pytest.approx(r.value, rel=1e-6)  # the same estimate...
    assert not narrow.covers(true_r), (narrow.low, narrow.high, r.low, r.high)
    assert narrow.high - narrow.low < 0.5 * (r.high - r.low)


def test_a_parameter_set_mostly_by_the_bench_levels_is_called_weakly_identified():
    """On a quiet run with an unseen LO level error, the LO port resistance's interval is
    mostly the bench-level term: the part file says it is weakly identified, and why."""
    from sweeprig.twin.partfile import part_file_text

    obs, _ = _run_with_lo_error()
    fit = fit_twin(load_part("kx-2417").with_changes(
        leakage_phases=resolve_description(None).leakage_phases()), obs)
    r = fit.parameter("ports.lo.resistance")
    assert r.level_share > 0.5 and r.weakly_identified, r
    assert r.correlated_with == "core.tail_current"
    text = part_file_text(fit, name="t", source="synthetic", template="kx-2417")
    lo = text.split("[ports.lo]")[1]
    line = next(x for x in lo.splitlines() if x.startswith("resistance"))
    assert "weakly identified" in line and "bench's level errors" in line, line


def test_the_effective_degrees_of_freedom_follow_welch_satterthwaite():
    """GUM G.4.1: ν_eff = u_c⁴ / Σ u_i⁴/ν_i; a Type B term of stated u has ν = ∞. Worked by
    hand: u_A² = 1 (ν = 4) and u_B² = 1 give u_c⁴ = 4, ν_eff = 4/(1/4) = 16."""
    from sweeprig.twin.fit import effective_dof

    assert effective_dof(2.0, 1.0, 4) == 16.0
    assert effective_dof(2.0, 0.0, 4) == 4.0  # no level term: the fit's own
    assert effective_dof(1.0, 1.0, 4) == float("inf")  # all of it the level term
