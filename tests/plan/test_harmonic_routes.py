"""The planner's source-harmonic route tables give the lines of
:func:`sweeprig.plan.margins.source_harmonic_lines` (the reference, one line object per route),
in its order, at the same frequencies and levels (within 1e-9 dB: the table adds the same
terms in another grouping), for random drives, source harmonics, gains and isolations; and
the vectorised loss estimate equals the loss's own ``estimate_at``."""

from __future__ import annotations

import numpy as np
import pytest

from sweeprig.formats.pathloss import ConstantLoss, TableLoss
from sweeprig.plan import harmonic_routes as hr
from sweeprig.plan import margins as mg


def _random_tone(rng: np.random.Generator, label: str) -> mg.HarmonicTone:
    n_harm = int(rng.integers(0, 4))
    return mg.HarmonicTone(float(rng.uniform(1e8, 6e9)), float(rng.uniform(-60, 10)),
                           tuple(float(x) for x in rng.uniform(-80, -10, n_harm)), label)


@pytest.mark.parametrize("seed", range(12))
def test_route_table_lines_equal_the_reference_lines(seed: int) -> None:
    rng = np.random.default_rng(seed)
    tones = [_random_tone(rng, "rf")] + ([_random_tone(rng, "rf2")] if seed % 2 else [])
    lo_h = tuple(float(x) for x in rng.uniform(-60, -15, int(rng.integers(0, 4))))
    f_lo = float(rng.uniform(1e8, 6e9)) if seed != 3 else tones[0].freq_hz / 2  # lines at 0 Hz
    gain, even = float(rng.uniform(-10, 20)), float(rng.uniform(-60, 0))
    iip2 = float(rng.uniform(10, 50))
    reference = mg.source_harmonic_lines(f_lo, lo_h, tones, gain, even, iip2_dbm=iip2)
    routes = [hr.tone_routes(t.harmonics_dbc, lo_h, gain, even, iip2_dbm=iip2) for t in tones]
    freq, level = hr.source_harmonic_arrays(routes, f_lo, tones)
    assert freq.tolist() == [ln.freq_hz for ln in reference]  # same lines, same order
    np.testing.assert_allclose(level, [ln.level_dbm for ln in reference], rtol=0, atol=1e-9)


def test_an_absurd_frequency_gives_the_reference_lines_without_an_overflow_warning() -> None:
    """A fuzzed file's 6e307 Hz reaches the planner before the limits refuse it: the lines
    are inf as the reference's (Python floats), not a numpy overflow (warnings are errors)."""
    tone = mg.HarmonicTone(5.99e307, -20.0, (-35.0, -45.0), "rf")
    lo_h = (-35.0, -45.0)
    reference = mg.source_harmonic_lines(5.7e9, lo_h, [tone], 13.0, -30.0)
    routes = [hr.tone_routes(tone.harmonics_dbc, lo_h, 13.0, -30.0)]
    freq, _level = hr.source_harmonic_arrays(routes, 5.7e9, [tone])
    assert freq.tolist() == [ln.freq_hz for ln in reference]
    assert np.isinf(freq).any()


def test_clean_sources_give_no_lines() -> None:
    tone = mg.HarmonicTone(2.2e9, -10.0, (), "rf")
    routes = [hr.tone_routes((), (), 10.0, -30.0)]
    freq, level = hr.source_harmonic_arrays(routes, 2.1e9, [tone])
    assert freq.size == level.size == 0 == len(mg.source_harmonic_lines(2.1e9, (), [tone],
                                                                         10.0, -30.0))


def test_vectorised_loss_estimate_equals_estimate_at() -> None:
    freqs = np.array([1e6, 5e8, 1.234e9, 3e9, 9e9])
    table = TableLoss(np.array([1e8, 1e9, 4e9]), np.array([0.5, 1.5, 4.0]))
    for loss in (ConstantLoss(2.5), table):
        assert hr.estimate_losses_db(loss, freqs).tolist() == [loss.estimate_at(f)
                                                               for f in freqs]
