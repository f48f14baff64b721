"""The even-order products (IIP2) in the twin fit: fitted through the load mismatch when the
run read im2 (the recovery of the demo part's value is in test_fit.py), kept from the
template, and said so in the part file, when it did not, or when the template gives the
mismatch nothing to act on."""

from __future__ import annotations

from types import MappingProxyType

from sweeprig.sim.bench import resolve_description
from sweeprig.sim.mixer import load_part
from sweeprig.twin.fit import fit_twin
from sweeprig.twin.forward import model_figures
from sweeprig.twin.observations import Observation, ObservationSet
from sweeprig.twin.parameters import catalogue
from sweeprig.twin.partfile import check_part_text, part_file_text

PART = load_part("kx-2417").with_changes(
    leakage_phases=resolve_description(None).leakage_phases())


def _gain_only() -> ObservationSet:
    """Gain at three RF frequencies too close to say anything about the band corners: only
    the tail current is constrained (a one-parameter fit takes a fraction of a second)."""
    obs = []
    for f in (2.1e9, 2.2e9, 2.3e9):
        c = {"temperature_c": 25.0, "supply_v": 3.3, "lo_power_dbm": 0.0, "rf_freq_hz": f,
             "lo_freq_hz": f - 100e6, "rf_power_dbm": -25.0}
        obs.append(Observation("conversion_gain", 0.0, MappingProxyType(c)))
    values = model_figures(PART, obs)
    return ObservationSet(tuple(Observation(o.name, float(v), o.conditions)
                                for o, v in zip(obs, values, strict=True)), MappingProxyType({}))


def _iip2_point() -> Observation:
    c = {"temperature_c": 25.0, "supply_v": 3.3, "lo_power_dbm": 0.0, "rf_freq_hz": 2.2e9,
         "rf2_freq_hz": 2.22e9, "lo_freq_hz": 2.1e9, "rf_power_dbm": -20.0,
         "rf2_power_dbm": -20.0}
    return Observation("iip2_point_low", 50.0, MappingProxyType(c))


def test_without_im2_readings_the_mismatch_keeps_the_template_value_and_says_so():
    obs = _gain_only()
    fit = fit_twin(PART, obs)
    assert "no usable iip2_point_low or iip2_point_high" in dict(fit.unconstrained)[
        "mismatch.load"]
    assert fit.part.load_mismatch == PART.load_mismatch
    text = part_file_text(fit, name="t", source="synthetic", template="kx-2417")
    line = next(x for x in text.splitlines() if x.startswith("load ="))
    assert "not constrained by the run" in line and "iip2_point_low" in line, line
    assert check_part_text(text).load_mismatch == PART.load_mismatch


def test_a_template_without_common_mode_current_cannot_fit_the_mismatch():
    obs = ObservationSet((*_gain_only().observations, _iip2_point()), MappingProxyType({}))
    ideal_tail = PART.with_changes(cm_second_order=0.0)
    load = next(p for p in catalogue(ideal_tail, obs) if p.key == "mismatch.load")
    assert "cm_second_order = 0" in str(load.needs(obs))
    load = next(p for p in catalogue(PART, obs) if p.key == "mismatch.load")
    assert load.needs(obs) is None

