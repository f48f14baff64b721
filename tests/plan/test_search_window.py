"""The peak-search window from the references, and what a search finds in a trace."""

from __future__ import annotations

import numpy as np
import pytest

from sweeprig.formats.timebase import ResolvedTimebase
from sweeprig.plan import search_window as sw

RF, LO = 2.4e9, 2.33e9


def refs(**tolerance: float) -> ResolvedTimebase:
    reference = {role: f"{role}:crystal" for role in ("rf", "lo", "sa")}
    return ResolvedTimebase(reference, {f"{r}:crystal": t for r, t in tolerance.items()},
                            frozenset(), frozenset())


def test_bound_is_ppm_times_multiplier() -> None:
    # IF = RF − LO, each source on its own crystal, the analyzer perfect: the worst case is
    # 2e-6·2.4 GHz + 2e-6·2.33 GHz (ppm × frequency, the definition), the IF's own error
    # on the analyzer 0
    bound = sw.offset_bound_hz((-1, 1), LO, RF, None, refs(rf=2.0, lo=2.0, sa=0.0))
    assert bound == pytest.approx(2e-6 * (RF + LO))


def test_shared_reference_cancels() -> None:
    shared = ResolvedTimebase({"rf": "lab", "lo": "lab", "sa": "lab"}, {"lab": 1.0},
                              frozenset({"rf", "lo", "sa"}), frozenset())
    assert sw.offset_bound_hz((-1, 1), LO, RF, None, shared) == pytest.approx(0.0, abs=1e-6)


def test_window_never_reaches_half_way_to_a_neighbour() -> None:
    assert sw.search_half_width_hz(9e3, 1e3) == pytest.approx(9.5e3)
    assert sw.search_half_width_hz(9e3, 1e3, nearest_hz=8e3) == pytest.approx(4e3)


def line_trace(offset_hz: float, level_dbm: float = -20.0, rbw: float = 1e3,
               span: float = 40e3) -> tuple[np.ndarray, np.ndarray]:
    f = np.linspace(-span / 2, span / 2, 1001)
    # a Gaussian RBW filter's shape: −3 dB at ±RBW/2 (a line seen through it)
    shape = -3.0103 * ((f - offset_hz) / (rbw / 2)) ** 2
    return f, np.maximum(level_dbm + shape, -90.0)


def test_finds_an_offset_line_inside_the_window() -> None:
    f, y = line_trace(4e3)
    found = sw.search(f, y, 0.0, 6e3, 5e3, 1e3, -90.0)
    assert found.offset_hz == pytest.approx(4e3, abs=40.0)
    assert found.level_dbm == pytest.approx(-20.0, abs=0.01)
    assert found.flags == ()


def test_an_offset_beyond_the_references_is_flagged() -> None:
    f, y = line_trace(4e3)
    assert sw.search(f, y, 0.0, 6e3, 1e3, 1e3, -90.0).flags == (sw.FREQUENCY_OFFSET,)


def test_a_line_outside_the_window_puts_the_peak_on_its_edge() -> None:
    f, y = line_trace(6.6e3)  # its skirt rises towards the border
    found = sw.search(f, y, 0.0, 6e3, 6e3, 1e3, -90.0)
    assert sw.WINDOW_EDGE in found.flags


def test_noise_alone_is_not_found() -> None:
    f, _ = line_trace(0.0)
    rng = np.random.default_rng(1)
    noise = -90.0 + 10 * np.log10(rng.exponential(size=f.size))
    assert sw.search(f, noise, 0.0, 6e3, 5e3, 1e3, -91.6).freq_hz is None


def test_a_wide_rbw_line_is_centred_by_the_whole_filter_top_and_says_how_well() -> None:
    """A 1 MHz RBW line 22 dB above its floor, 1001 points over 20 MHz (20 kHz apart), with
    0.3 dB of trace noise: the three points around the highest one place its centre anywhere
    along the flat top; the least-squares fit over the top (50 points) lands within three of
    its own standard errors of the truth, and the search's resolution covers the error, so a
    line exactly where computed is never flagged ``frequency_offset``. The filter: Gaussian,
    −3.01 dB at ±RBW/2 (10·log10(2), the definition of a half-power point)."""
    rbw, true_offset = 1e6, 3e3
    f = np.linspace(2.1e9 - 10e6, 2.1e9 + 10e6, 1001)
    clean = -63.0 - sw.GAUSSIAN_DB_PER_UNIT * (2.0 * (f - 2.1e9 - true_offset) / rbw) ** 2
    rng = np.random.default_rng(11)
    misses = 0
    for _ in range(200):
        y = np.maximum(clean + rng.normal(0.0, 0.3, f.size), -85.0)
        best = int(np.argmax(y))
        centre, se = sw.filter_top_fit(f, y, best, rbw)
        assert abs(centre - 2.1e9 - true_offset) <= 4.0 * se
        found = sw.search(f, y, 2.1e9 + true_offset, 0.5 * rbw, 0.0, rbw, -85.0)
        misses += sw.FREQUENCY_OFFSET in found.flags
        assert se < 10e3  # about RBW/200 at this noise
    assert misses <= 2  # 3 standard errors: about 0.3 % of trials by chance


def test_too_few_points_on_the_top_keep_the_three_point_parabola() -> None:
    f, y = line_trace(0.0, rbw=1e3, span=200e3)  # 1 kHz RBW, 200 Hz points: 5 on the top
    assert sw.filter_top_fit(f, y, int(np.argmax(y)), 1e3) is None
