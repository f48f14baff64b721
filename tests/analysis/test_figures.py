"""The Figure type, flag masks and bound arithmetic."""

import math

import numpy as np
import pytest

from sweeprig.analysis.figures import (
    BOUND_ABOVE,
    BOUND_BELOW,
    BOUND_NONE,
    FIGURE_CATALOGUE,
    FLAGS,
    IN_NOISE,
    OVERLOAD,
    SLOPE_OFF,
    SUSPECT_FLAGS,
    Figure,
    bound_difference,
    bound_sum,
    flag_bit,
    flags_from_mask,
    make_figures,
    mask_where,
    with_changes,
    worst_of,
)


def test_figure_text_and_number():
    assert Figure("iip3", 12.345, "dBm").text() == "12.35 dBm"
    assert Figure("spur_dbc", -80.0, "dBc", "<").text(1) == "< -80.0 dBc"
    assert Figure("input_p1db", 12.0, "dBm", ">").text(0) == "> 12 dBm"
    assert Figure("iip3", math.nan, "dBm").text() == "n/a"
    assert Figure("iip3", 1.0, "dBm").is_number
    assert not Figure("iip3", 1.0, "dBm", ">").is_number
    assert not Figure("iip3", math.nan, "dBm").is_number


def test_figure_is_frozen_and_hashable():
    f = Figure("iip3", 1.0, "dBm", conditions={"temperature_c": 25.0})
    with pytest.raises(AttributeError):
        f.value = 2.0  # type: ignore[misc]
    assert hash(f) == hash(Figure("iip3", 1.0, "dBm", conditions={"temperature_c": 85.0}))


def test_flag_masks_round_trip():
    mask = flag_bit(IN_NOISE) | flag_bit(OVERLOAD)
    assert flags_from_mask(mask) == (IN_NOISE, OVERLOAD)
    assert flags_from_mask(0) == ()
    assert set(SUSPECT_FLAGS) <= set(FLAGS)
    masks = mask_where(np.array([True, False]), OVERLOAD)
    assert masks.tolist() == [flag_bit(OVERLOAD), 0]


def test_make_figures_matches_the_constructor():
    figs = make_figures(
        "iip3", "dBm", [1.0, 2.0], [BOUND_NONE, BOUND_ABOVE], [0, flag_bit(IN_NOISE)],
        [{"temperature_c": 25.0}, {"temperature_c": 85.0}], [(1,), (2, 3)],
    )
    assert figs[0] == Figure("iip3", 1.0, "dBm", None, {"temperature_c": 25.0}, (), (1,))
    assert figs[1] == Figure("iip3", 2.0, "dBm", ">", {"temperature_c": 85.0}, (IN_NOISE,), (2, 3))
    with pytest.raises(TypeError):
        figs[0].conditions["temperature_c"] = 0.0  # read-only mapping


def test_catalogue_units_are_known():
    assert {unit for unit, _ in FIGURE_CATALOGUE.values()} <= {
        "dB", "dBc", "dBm", "dB/°C", "dB/dB", "A", "W",
    }


def test_worst_of_keeps_bounds_honest():
    # number vs a ">" bound above it: the number is the minimum
    v, b = worst_of(np.array([10.0, 12.0]), np.array([BOUND_NONE, BOUND_ABOVE]))
    assert (float(v), int(b)) == (10.0, BOUND_NONE)
    # the smallest is a ">" bound: the minimum is only known to exceed it
    v, b = worst_of(np.array([10.0, 12.0]), np.array([BOUND_ABOVE, BOUND_NONE]))
    assert (float(v), int(b)) == (10.0, BOUND_ABOVE)
    # a "<" bound anywhere makes the minimum a "<" bound
    v, b = worst_of(np.array([10.0, 12.0]), np.array([BOUND_NONE, BOUND_BELOW]))
    assert (float(v), int(b)) == (10.0, BOUND_BELOW)
    v, b = worst_of(np.array([10.0, math.nan]), np.array([BOUND_NONE, BOUND_NONE]))
    assert math.isnan(float(v))


def test_bound_arithmetic():
    # isolation = drive − leakage; leakage "< -60" → isolation "> 60"
    v, b = bound_difference(np.array(0.0), np.array(BOUND_NONE), np.array(-60.0),
                            np.array(BOUND_BELOW))
    assert (float(v), int(b)) == (60.0, BOUND_ABOVE)
    v, b = bound_difference(np.array(-70.0), np.array(BOUND_BELOW), np.array(-10.0),
                            np.array(BOUND_NONE))
    assert (float(v), int(b)) == (-60.0, BOUND_BELOW)
    v, b = bound_difference(np.array(1.0), np.array(BOUND_BELOW), np.array(1.0),
                            np.array(BOUND_BELOW))
    assert math.isnan(float(v))
    v, b = bound_sum(np.array(1.0), np.array(BOUND_ABOVE), np.array(2.0), np.array(BOUND_ABOVE))
    assert (float(v), int(b)) == (3.0, BOUND_ABOVE)


def test_with_changes_is_dataclasses_replace():
    """The fast copy gives exactly what dataclasses.replace gives, and refuses a field the
    figure does not have."""
    import dataclasses

    from sweeprig.analysis.figures import with_changes

    figure = Figure("iip3", 12.5, "dBm", None, {"temperature_c": 25.0}, ("slope_off",), (3, 4))
    for changes in ({}, {"name": "oip3"}, {"uncertainty_db": 0.7, "flags": ()},
                    {"conditions": {"temperature_c": 85.0}, "bound": ">"}):
        made = with_changes(figure, **changes)
        expected = dataclasses.replace(figure, **changes)
        assert made == expected and made is not figure
        assert all(getattr(made, s) == getattr(expected, s) or s == "uncertainty_db"
                   for s in Figure.__slots__)
        assert made.uncertainty_db == expected.uncertainty_db or (
            math.isnan(made.uncertainty_db) and math.isnan(expected.uncertainty_db))
    with pytest.raises(TypeError, match="no field valu"):
        with_changes(figure, valu=1.0)


def test_with_conditions_is_dataclasses_replace():
    """The one-field copy the output-frequency pass uses gives, slot for slot, what
    dataclasses.replace gives (a field added to Figure must be copied there too)."""
    import dataclasses

    from sweeprig.analysis.figures import with_conditions

    figure = Figure("iip3", 12.5, "dBm", ">", {"temperature_c": 25.0}, ("slope_off",), (3, 4),
                    uncertainty_db=0.4)
    made = with_conditions(figure, {"temperature_c": 85.0})
    expected = dataclasses.replace(figure, conditions={"temperature_c": 85.0})
    assert type(made) is Figure and made == expected and made is not figure
    assert all(getattr(made, s) == getattr(expected, s) for s in Figure.__slots__)
    with pytest.raises(dataclasses.FrozenInstanceError):
        made.value = 1.0  # type: ignore[misc]


def test_with_uncertainty_is_dataclasses_replace():
    """The copy the budget pass uses gives, slot for slot, what dataclasses.replace gives
    (conditions kept when None)."""
    import dataclasses

    from sweeprig.analysis.figures import with_uncertainty

    figure = Figure("iip3", 12.5, "dBm", ">", {"temperature_c": 25.0}, ("slope_off",), (3, 4))
    budget = object()
    for conditions in (None, {"temperature_c": 85.0}):
        made = with_uncertainty(figure, 0.4, budget, conditions)  # type: ignore[arg-type]
        expected = dataclasses.replace(figure, uncertainty_db=0.4, budget=budget,
                                       conditions=conditions or figure.conditions)
        assert type(made) is Figure and made == expected and made is not figure
        assert all(getattr(made, s) == getattr(expected, s) for s in Figure.__slots__)
        assert made.conditions is (conditions or figure.conditions)
    with pytest.raises(dataclasses.FrozenInstanceError):
        made.value = 1.0  # type: ignore[misc]


def test_built_figures_are_plain_frozen_figures():
    """make_figures and with_changes fill the slots without the frozen __init__: what they
    give is a Figure like any other (same type, equal, hashable, still frozen)."""
    import dataclasses

    built = make_figures("iip3", "dBm", [12.5], BOUND_NONE, flag_bit(SLOPE_OFF),
                         [{"temperature_c": 25.0}], [(3, 4)])[0]
    made = Figure("iip3", 12.5, "dBm", None, {"temperature_c": 25.0}, (SLOPE_OFF,), (3, 4))
    assert type(built) is Figure and built == made and hash(built) == hash(made)
    changed = with_changes(built, value=13.0)
    assert type(changed) is Figure and changed == dataclasses.replace(made, value=13.0)
    for figure in (built, changed):
        with pytest.raises(dataclasses.FrozenInstanceError):
            figure.value = 1.0  # type: ignore[misc]
