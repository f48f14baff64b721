"""Monte-Carlo check of the twin fit's intervals: figures made by the model itself at known
parameters, Gaussian scatter added, fitted again and again; a 95 % interval should hold the
true value in about 95 % of the repeats (the frequentist meaning of a confidence interval;
Press et al., Numerical Recipes, 3rd ed., §15.6, "Monte Carlo simulation of synthetic data
sets", is the same check)."""

from __future__ import annotations

from types import MappingProxyType

import numpy as np

from sweeprig.sim.bench import resolve_description
from sweeprig.sim.mixer import load_part
from sweeprig.twin.fit import fit_twin
from sweeprig.twin.forward import model_figures
from sweeprig.twin.observations import Observation, ObservationSet

#: Scatter added to each synthetic figure, in its unit (about a bench's repeatability;
#: common practice, no source).
SCATTER = {"conversion_gain": 0.05, "iip3_point_low": 0.15, "iip3_point_high": 0.15}


def _conditions() -> list[Observation]:
    base = {"temperature_c": 25.0, "supply_v": 3.3, "lo_power_dbm": 0.0}
    out = []
    for f in (2.0e9, 2.2e9, 2.4e9):
        for p in (-30.0, -25.0):
            c = dict(base, rf_freq_hz=f, lo_freq_hz=f - 100e6, rf_power_dbm=p)
            out.append(Observation("conversion_gain", 0.0, MappingProxyType(c)))
    for p in (-25.0, -20.0, -15.0):
        c = dict(base, rf_freq_hz=2.2e9, rf2_freq_hz=2.201e9, lo_freq_hz=2.1e9,
                 rf_power_dbm=p, rf2_power_dbm=p)
        out += [Observation("iip3_point_low", 0.0, MappingProxyType(c)),
                Observation("iip3_point_high", 0.0, MappingProxyType(c))]
    return out


def coverage(seeds: range) -> dict[str, int]:
    """How many of ``seeds`` repeats have each fitted parameter's true value in its 95 %
    interval (keys: part-file keys; plus ``"repeats"``)."""
    truth = load_part("kx-2417").with_changes(
        leakage_phases=resolve_description(None).leakage_phases())
    template = truth.with_changes(tail_current_a=10e-3, emitter_degeneration_ohm=30.0)
    conditions = _conditions()
    clean = model_figures(truth, conditions)
    true_values = {"core.tail_current": truth.tail_current_a,
                   "core.emitter_degeneration": truth.emitter_degeneration_ohm}
    hits = dict.fromkeys(true_values, 0)
    for seed in seeds:
        rng = np.random.default_rng(seed)
        noisy = [Observation(o.name, float(v + rng.normal(0.0, SCATTER[o.name])), o.conditions)
                 for o, v in zip(conditions, clean, strict=True)]
        fit = fit_twin(template, ObservationSet(tuple(noisy), MappingProxyType({})))
        for key, value in true_values.items():
            hits[key] += fit.parameter(key).covers(value)
    return {**hits, "repeats": len(seeds)}
