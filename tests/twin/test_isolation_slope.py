"""Isolation paths that change with frequency: the part model's slope (dB per octave about
the reference frequency) and the twin fit recovering it from leakage read across a band."""

from __future__ import annotations

import math
from types import MappingProxyType

import numpy as np
import pytest

from sweeprig.sim.bench import resolve_description
from sweeprig.sim.mixer import load_part
from sweeprig.sim.mixer.reference import line_power_dbm
from sweeprig.sim.mixer.types import OperatingPoint, ToneInput
from sweeprig.twin.fit import fit_twin
from sweeprig.twin.forward import model_figures
from sweeprig.twin.observations import Observation, ObservationSet
from sweeprig.twin.partfile import check_part_text, part_file_text

OP = OperatingPoint(temperature_c=25.0, supply_v=3.3)


def test_a_path_slope_moves_the_leaked_line_by_its_db_per_octave():
    """A leakage path alone (the ideal part: no offsets, so no core leakage) through a
    coupling capacitance: the admittance doubles per octave, so the leaked power rises by
    20·log10(2) = 6.02 dB per octave (a −6.02 dB per octave isolation slope)."""
    slope = -20.0 * math.log10(2.0)
    part = load_part("ideal").with_changes(isolation_lo_rf_db=30.0,
                                           isolation_lo_rf_slope_db_per_octave=slope,
                                           isolation_reference_hz=1e9)
    levels = []
    for f_lo in (1e9, 2e9, 4e9):
        resp = part.evaluate(OP, ToneInput(f_lo, 0.0), [])
        levels.append(line_power_dbm(resp.rf_port, f_lo))
    assert levels[0] == pytest.approx(-30.0, abs=1e-9)
    assert np.diff(levels) == pytest.approx([6.0206, 6.0206], abs=1e-3)


def test_the_fit_recovers_a_sloped_leakage_path_from_a_band_sweep():
    phases = resolve_description(None).leakage_phases()
    truth = load_part("kx-2417").with_changes(leakage_phases=phases,
                                              isolation_lo_if_slope_db_per_octave=-4.0)
    template = truth.with_changes(isolation_lo_if_slope_db_per_octave=0.0,
                                  isolation_lo_if_db=40.0)
    base = {"temperature_c": 25.0, "supply_v": 3.3, "lo_power_dbm": 0.0, "rf_power_dbm": -25.0}
    conditions = [("conversion_gain", dict(base, rf_freq_hz=f, lo_freq_hz=f - 100e6))
                  for f in (2.1e9, 2.2e9, 2.3e9)]  # too close for the band corners: one
    conditions += [("lo_if_isolation", dict(base, rf_freq_hz=f + 100e6, lo_freq_hz=f))
                   for f in (1.6e9, 2.0e9, 2.4e9, 2.8e9, 3.2e9)]  # an octave of LO
    obs = [Observation(n, 0.0, MappingProxyType(c)) for n, c in conditions]
    clean = model_figures(truth, obs)
    scatter = np.random.default_rng(1).normal(0.0, 0.2, len(obs))  # a bench's repeatability
    noisy = ObservationSet(tuple(Observation(o.name, float(v + e), o.conditions)
                                 for o, v, e in zip(obs, clean, scatter, strict=True)),
                           MappingProxyType({}))
    fit = fit_twin(template, noisy)
    slope = fit.parameter("isolation.lo_to_if_slope")
    assert slope.covers(-4.0) and slope.high - slope.low < 3.0, slope
    assert fit.parameter("isolation.lo_to_if").covers(truth.isolation_lo_if_db)
    text = part_file_text(fit, name="t", source="synthetic", template="kx-2417")
    assert check_part_text(text).isolation_lo_if_slope_db_per_octave == pytest.approx(
        slope.value, rel=1e-3)
    line = next(x for x in text.splitlines() if x.startswith("lo_to_if_slope"))
    assert "95 % interval" in line
    line = next(x for x in text.splitlines() if x.startswith("lo_to_rf_slope"))
    assert "not constrained" in line
