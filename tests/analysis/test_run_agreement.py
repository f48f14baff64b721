"""Two runs' figures are held against each other by name and conditions, never by position.

The case is the demo's two-tone study at −40 °C as two benches read it (the first simulated
family without a [timebase], marker at the computed frequency, and with one, windowed
search): identical levels, but the first bench flags the two lowest drives
``analyzer_distortion`` and the second does not. Pairing the k-th unflagged figure of a name
then compared −58.0 with −68.0 dBc (two 2.5 dB drive steps of a slope-3 product: 15 dB) and
reported a 10 dB disagreement that is not there.
"""

from __future__ import annotations

import math

from sweeprig.analysis.figures import ANALYZER_DISTORTION, IN_NOISE, Figure
from sweeprig.analysis.run_agreement import agreement, claimed_figures, figure_key

DRIVES = (-35.0, -32.5, -30.0, -27.5, -25.0)  # dBm per tone at the DUT
IM3_DBC = (-77.35, -72.14, -67.96, -63.12, -58.04)  # read at those drives, dBc
U_DB = (5.9, 2.7, 1.45, 1.37, 0.67)  # their expanded uncertainties (k = 2), dB


def _im3(drive: float, value: float, u: float, flags: tuple[str, ...] = (),
         point: int = 0) -> Figure:
    conditions = {"study": "two-tone", "temperature_c": -40.0, "rf_freq_hz": 2.2e9,
                  "rf_power_dbm": drive, "rf2_power_dbm": drive, "lo_power_dbm": 0.0}
    return Figure("im3_high", value, "dBc", conditions=conditions, flags=flags,
                  points=(point,), uncertainty_db=u)


def _runs() -> tuple[list[Figure], list[Figure]]:
    flagged = {-35.0, -32.5}
    plain = [_im3(p, v, u, (ANALYZER_DISTORTION,) if p in flagged else (), i)
             for i, (p, v, u) in enumerate(zip(DRIVES, IM3_DBC, U_DB, strict=True))]
    searched = [_im3(p, v + 0.05, u, (), i)
                for i, (p, v, u) in enumerate(zip(DRIVES, IM3_DBC, U_DB, strict=True))]
    return plain, searched


def test_figures_of_the_same_conditions_are_paired_when_one_run_flags_more():
    plain, searched = _runs()
    result = agreement(plain, searched)
    assert [a.conditions["rf_power_dbm"] for a, _ in result.pairs] == [-30.0, -27.5, -25.0]
    assert all(a.conditions == b.conditions for a, b in result.pairs)
    assert result.beyond == ()
    assert result.worst_ratio < 0.1


def test_pairing_by_position_would_report_the_drive_step_as_a_disagreement():
    # the mechanism the pairing by conditions removes: the k-th unflagged figure of each run
    plain, searched = _runs()
    kept = [f for f in plain if not f.flags]
    by_position = list(zip(kept, searched, strict=False))
    assert len(by_position) == 3
    assert all(abs(a.value - b.value) > max(a.uncertainty_db, b.uncertainty_db)
               for a, b in by_position)  # every pair "disagrees" ...
    assert all(a.conditions != b.conditions for a, b in by_position)  # ... being two drives


def test_a_real_disagreement_is_reported():
    plain, searched = _runs()
    searched[4] = _im3(-25.0, -55.0, 0.67, (), 4)  # 3 dB off with U 0.67 dB
    result = agreement(plain, searched)
    assert [a.conditions["rf_power_dbm"] for a, _ in result.beyond] == [-25.0]
    assert math.isclose(result.worst_ratio, 3.04 / 0.67, rel_tol=1e-3)


def test_bounds_flagged_figures_and_figures_without_a_budget_claim_nothing():
    figures = [_im3(-40.0, -80.0, math.nan, (IN_NOISE,)),
               _im3(-37.5, -79.0, 2.0, (ANALYZER_DISTORTION,)),
               _im3(-35.0, -77.0, math.nan),
               _im3(-30.0, -68.0, 1.4)]
    bound = Figure("im3_high", -81.0, "dBc", bound="<", conditions={"rf_power_dbm": -42.5},
                   uncertainty_db=1.0)
    claimed = claimed_figures([*figures, bound])
    assert [f.conditions["rf_power_dbm"] for f in claimed.values()] == [-30.0]


def test_conditions_recomputed_by_another_path_are_the_same_and_a_repeated_key_is_dropped():
    assert figure_key("x", {"f": 2.2e9, "s": "a"}) == \
        figure_key("x", {"s": "a", "f": 2.2e9 * (1 + 1e-17) + 1e-9})
    twice = [_im3(-30.0, -68.0, 1.4), _im3(-30.0, -60.0, 1.4)]
    assert claimed_figures(twice) == {}
