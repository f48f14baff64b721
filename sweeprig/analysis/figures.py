"""The result type of the analysis: a :class:`Figure`, and the vocabulary of its flags.

A figure is one datasheet number (or bound) with everything needed to judge it: the value,
its unit, whether it is a bound, the fixed conditions it was measured under, the validity
flags raised while computing it and the run-store point indices it came from.

Bounds
------
``bound=None``: ``value`` is a measured number.
``bound="<"``: the true value is below ``value`` (e.g. a spur in the analyzer noise,
"< -80 dBc": the displayed level is an upper bound of the product).
``bound=">"``: the true value is above ``value`` (e.g. "> +12 dBm" when the power sweep did
not reach 1 dB compression, or an isolation whose leakage was in the noise).

Internally the maths carries bounds as small integers (:data:`BOUND_NONE`,
:data:`BOUND_BELOW` for "<", :data:`BOUND_ABOVE` for ">") and flags as bit masks, so whole
tables can be judged at once; :func:`make_figures` turns those arrays into figures.

Flags (sweeprig's own names)
----------------------------
``in_noise``
    A contributing product was within 6 dB of its noise floor: its displayed level is only an
    upper bound, so the figure is reported as a bound, not a number.
``overload``
    The analyzer reported input overload on a contributing reading.
``analyzer_distortion``
    Attenuation test: in the repeat with 10 dB more input attenuation the product moved by
    more than 1 dB while the carrier stayed within 0.3 dB, so the analyzer made (part of) it.
    Without a repeat: the planner predicted the analyzer's own product within the distortion
    margin (20 dB) of it (a prediction keeps the drive in an intercept fit, which carries
    the flag; a measured one leaves it out).
``atten_carrier_moved``
    In the attenuation repeat the carrier itself moved by more than 0.3 dB: the test cannot
    tell the analyzer's distortion from the part's (the analyzer is probably compressing).
``slope_off``
    The unconstrained fitted slope of an intermodulation product is outside its order ±10 %
    (IM3: 3 ± 0.3 dB/dB, IM2: 2 ± 0.2 dB/dB): the intercept model does not hold there.
``fund_slope_off``
    The unconstrained fitted slope of the fundamental is outside 1 ± 0.1 dB/dB.
``not_compressed``
    The power sweep ended before the compression level was reached: bound ">".
``not_saturated``
    The output was still rising at the top of the sweep: saturated output is a bound ">".
``compressed_at_start``
    The sweep was already compressed past the level at its lowest drive: bound "<".
``few_points``
    Fewer than 3 points in the linear region (small-signal gain) or in the fit range.
``no_valid_range``
    No point met the validity conditions of a fit; the figure is a bound or not a number.
``in_compression``
    Two-tone drive where the wanted tones' own gain fell more than 0.2 dB below the sweep's
    low-drive gain, or above P1dB − 10 dB when a compression study gave P1dB (single-point
    intercepts; such drives are left out of the fits), or every point of the sweep was there
    (fit).
``points_excluded``
    Some points of the sweep were left out of a fit because of overload or analyzer
    distortion (the fit itself used clean points only).
``edge_of_sweep``
    The result lies at the edge of the swept range (e.g. the LO drive needed may be lower than
    the lowest LO power tested, or the gain was still rising at the highest one).
``missing_reading``
    A reading the figure needs was not in the capture.
``unpowered``
    At a point behind the figure the conversion gain was more than 20 dB below the part's
    ``expected_gain``: the part looks unpowered, wrongly powered or not driven.
``analyzer_compression``
    The planner predicted the analyzer's first mixer compresses the product (by more than
    0.1 dB) or is past its overload level at the settings used, though the instrument's
    own overload status may not show it.
``source_harmonic``
    The planner predicted a product made from a source's harmonic or spurious lands on this
    frequency less than the distortion margin below the product.
``rbw_merged``
    Another known line was closer to the product than 3 RBW (the analysis' own check of the
    stored frequencies and RBW), or the planner predicted the RBW filter could not separate
    them: the displayed level is the sum of both.
``noise_limited``
    The planner predicted the noise (the part's and the analyzer's, or reciprocal mixing of a
    strong neighbour) within its margin of the product, and the measured floor could not
    confirm or clear it (no floor estimate was possible).
``coarse_steps``
    The compression sweep's input-power step bracketing this compression point is so coarse
    that the linear interpolation may be off by more than the stated accuracy (0.2 dB).
``frequency_offset``
    The windowed peak search found the product's peak farther from its computed frequency
    than the bench's ``[timebase]`` references explain (:mod:`sweeprig.plan.search_window`).
``window_edge``
    The highest point of the peak search's window was on its edge: the product is most
    likely outside the window.
``supply_current_off``
    At a point behind the figure the DUT supply current was more than 30 % away from the
    part's ``expected_supply_current``: the part looks wrongly powered or damaged.
``supply_limited``
    At a point behind the figure the DC supply was found in current limit (its own status,
    asked with its status read after every point and with any ``supply_current`` reading) or,
    by a ``supply_current`` reading, its output more than 2 % below the setting: the part ran
    below its stated supply (a bench current limit below the part's draw, often only at the
    hot corner).
``source_unleveled``
    At a point behind the figure a signal source reported its output not leveled (its
    questionable status' POWer bit, asked with its status read after every point): it
    delivered less than its setting, so the part got less drive than the plan says (a
    setting above the source's maximum leveled output, often only at the top of its band).
``reference_unlocked``
    At a point behind the figure a source or the analyzer reported its 10 MHz reference
    unlocked (its questionable status, asked with its status read after every point or with
    the reading): it ran on its own crystal, its frequencies off by that crystal's error, so
    a narrow-RBW reading may have missed the product (a house reference or its cable lost
    in the night).
``analyzer_uncalibrated``
    The analyzer flagged a reading behind the figure uncalibrated (its questionable status'
    CALibration bit, read in the reading's own message): on a real analyzer a trace above
    the reference level, a sweep too fast for its RBW, or another state in which it does not
    vouch for the level it shows.
``image_ratio_doubtful``
    A single-sideband noise figure converted with a measured image-to-signal ratio whose
    wanted reading stood less than 6 dB above its noise floor, or that put the image response
    more than 10 dB above the wanted one (both common practice, no source): the ratio, and
    with it the SSB figure, says more about the measurement than about the part
    (:mod:`sweeprig.analysis.noise_figure`).

:data:`FLAG_MEANINGS` holds one line per flag for people (reports, ``figures.json``);
:data:`SUSPECT_FLAGS` the flags that make a limit check on the figure inconclusive.
"""

from __future__ import annotations

import gc
import math
from collections.abc import Callable, Iterable, Iterator, Mapping, Sequence
from contextlib import contextmanager
from dataclasses import dataclass, field
from functools import lru_cache
from types import MappingProxyType
from typing import TYPE_CHECKING, Literal

import numpy as np

from sweeprig.analysis.condition_rows import ConditionRow
from sweeprig.analysis.writable_twin import writable_twin

if TYPE_CHECKING:
    from sweeprig.analysis.budget_parts import FigureBudget

Bound = Literal["<", ">"] | None

BOUND_NONE = 0
BOUND_BELOW = -1  # "<": the true value is below the reported one
BOUND_ABOVE = 1  # ">": the true value is above the reported one

IN_NOISE = "in_noise"
OVERLOAD = "overload"
ANALYZER_DISTORTION = "analyzer_distortion"
ATTEN_CARRIER_MOVED = "atten_carrier_moved"
SLOPE_OFF = "slope_off"
FUND_SLOPE_OFF = "fund_slope_off"
NOT_COMPRESSED = "not_compressed"
NOT_SATURATED = "not_saturated"
COMPRESSED_AT_START = "compressed_at_start"
FEW_POINTS = "few_points"
NO_VALID_RANGE = "no_valid_range"
IN_COMPRESSION = "in_compression"
POINTS_EXCLUDED = "points_excluded"
EDGE_OF_SWEEP = "edge_of_sweep"
MISSING_READING = "missing_reading"
UNPOWERED = "unpowered"
ANALYZER_COMPRESSION = "analyzer_compression"
SOURCE_HARMONIC = "source_harmonic"
RBW_MERGED = "rbw_merged"
NOISE_LIMITED = "noise_limited"
COARSE_STEPS = "coarse_steps"
SUPPLY_CURRENT_OFF = "supply_current_off"
Y_TOO_SMALL = "y_too_small"
ANALYZER_NOISE_DOMINATES = "analyzer_noise_dominates"
HOT_COMPRESSION = "hot_compression"
INTERFERER = "interferer"
FREQUENCY_OFFSET = "frequency_offset"
WINDOW_EDGE = "window_edge"
IMAGE_RATIO_DOUBTFUL = "image_ratio_doubtful"
SUPPLY_LIMITED = "supply_limited"
SOURCE_UNLEVELED = "source_unleveled"
REFERENCE_UNLOCKED = "reference_unlocked"
ANALYZER_UNCALIBRATED = "analyzer_uncalibrated"
TEMPERATURE_OFF = "temperature_off"

#: Every flag, in a fixed order: the position is the flag's bit in a flag mask.
FLAGS: tuple[str, ...] = (
    IN_NOISE,
    OVERLOAD,
    ANALYZER_DISTORTION,
    ATTEN_CARRIER_MOVED,
    SLOPE_OFF,
    FUND_SLOPE_OFF,
    NOT_COMPRESSED,
    NOT_SATURATED,
    COMPRESSED_AT_START,
    FEW_POINTS,
    NO_VALID_RANGE,
    IN_COMPRESSION,
    POINTS_EXCLUDED,
    EDGE_OF_SWEEP,
    MISSING_READING,
    UNPOWERED,
    # appended for the planner's risks and the analysis' own checks: never reorder
    ANALYZER_COMPRESSION,
    SOURCE_HARMONIC,
    RBW_MERGED,
    NOISE_LIMITED,
    COARSE_STEPS,
    SUPPLY_CURRENT_OFF,
    # noise-figure readings (sweeprig.analysis.noise_figure)
    Y_TOO_SMALL,
    ANALYZER_NOISE_DOMINATES,
    HOT_COMPRESSION,
    INTERFERER,
    # the windowed peak search (sweeprig.plan.search_window)
    FREQUENCY_OFFSET,
    WINDOW_EDGE,
    # the SSB conversion's image ratio (sweeprig.analysis.noise_figure)
    IMAGE_RATIO_DOUBTFUL,
    # the supply read at a point (sweeprig.instruments.supply.supply_limited)
    SUPPLY_LIMITED,
    # a source's level state read after a point (its unleveled flag)
    SOURCE_UNLEVELED,
    # a reference lock lost at a point (a source's status read, the analyzer's reading)
    REFERENCE_UNLOCKED,
    # the analyzer's uncalibrated flag at a reading
    ANALYZER_UNCALIBRATED,
    # the DUT probe away from its set point at a point (the chamber not holding it)
    TEMPERATURE_OFF,
)

#: Flags that make a figure untrustworthy as a number: a limit check on it is inconclusive.
#: Bounds (``in_noise``, ``not_compressed``, ...) are judged through their bound instead.
#: Of the later flags, every one that names a cause that can move the figure by more than
#: its stated uncertainty is suspect: ``analyzer_compression``, ``source_harmonic``,
#: ``rbw_merged``, ``noise_limited`` (all of them add to or squash the product by an amount
#: nothing measured), ``coarse_steps`` (the interpolation error exceeds the stated P1dB
#: accuracy) and ``supply_current_off`` (the part was not in the state the spec assumes).
#: ``points_excluded`` and ``edge_of_sweep`` stay informative: the figure was computed from
#: clean points only, or is already reported as a bound.
SUSPECT_FLAGS: frozenset[str] = frozenset(
    {
        ANALYZER_COMPRESSION,
        SOURCE_HARMONIC,
        RBW_MERGED,
        NOISE_LIMITED,
        COARSE_STEPS,
        SUPPLY_CURRENT_OFF,
        OVERLOAD,
        ANALYZER_DISTORTION,
        ATTEN_CARRIER_MOVED,
        SLOPE_OFF,
        FUND_SLOPE_OFF,
        FEW_POINTS,
        NO_VALID_RANGE,
        IN_COMPRESSION,
        MISSING_READING,
        UNPOWERED,
        Y_TOO_SMALL,
        ANALYZER_NOISE_DOMINATES,
        HOT_COMPRESSION,
        INTERFERER,
        FREQUENCY_OFFSET,
        WINDOW_EDGE,
        IMAGE_RATIO_DOUBTFUL,
        SUPPLY_LIMITED,
        SOURCE_UNLEVELED,
        REFERENCE_UNLOCKED,
        ANALYZER_UNCALIBRATED,
        TEMPERATURE_OFF,
    }
)

#: One line per flag, in words an engineer reads beside the figure (reports, figures.json).
FLAG_MEANINGS: Mapping[str, str] = MappingProxyType({
    IN_NOISE: "the product was within 6 dB of the analyzer's noise floor: the value is only "
    "a bound",
    OVERLOAD: "the analyzer reported input overload while reading it",
    ANALYZER_DISTORTION: "the analyzer made (part of) this product: the +10 dB attenuation "
    "repeat moved it, or (without a repeat) the planner predicted the analyzer's own "
    "distortion within 20 dB of it",
    ATTEN_CARRIER_MOVED: "in the +10 dB attenuation repeat the carrier itself moved: the "
    "analyzer is probably compressing and the attenuation test is in doubt",
    SLOPE_OFF: "the product's fitted slope is not its order (3:1 or 2:1 within 10 %): the "
    "intercept model does not hold there",
    FUND_SLOPE_OFF: "the fundamental's fitted slope is not 1 dB/dB within 0.1",
    NOT_COMPRESSED: "the power sweep ended before this compression level: the value is a "
    "lower bound",
    NOT_SATURATED: "the output was still rising at the top of the sweep: the value is a "
    "lower bound",
    COMPRESSED_AT_START: "the sweep was already compressed past this level at its lowest "
    "drive: the value is an upper bound",
    FEW_POINTS: "fewer than 3 points in the linear region or fit range",
    NO_VALID_RANGE: "no point met the conditions for a fit",
    IN_COMPRESSION: "the part was in compression at this two-tone drive (the tones' own gain "
    "fell more than 0.2 dB, or the drive was above P1dB - 10 dB): per-drive intercepts read "
    "low",
    POINTS_EXCLUDED: "some drives were left out of the fit (overload or analyzer distortion); "
    "the fit used clean points only",
    EDGE_OF_SWEEP: "the result lies at the edge of the swept range",
    MISSING_READING: "a reading the figure needs is missing",
    UNPOWERED: "the gain was more than 20 dB below the expected gain: the part looks "
    "unpowered, wrongly powered or not driven",
    ANALYZER_COMPRESSION: "the planner predicted the analyzer's own input compresses or "
    "overloads at these settings: the level may read low even without an overload indication",
    SOURCE_HARMONIC: "a product of a source's harmonic or spurious was predicted on this "
    "frequency within 20 dB of the product: the level may be the source's, not the part's",
    RBW_MERGED: "another line was within 3 RBW of the product (or predicted so): the RBW "
    "filter could not separate them and the level is their sum",
    NOISE_LIMITED: "noise (or reciprocal mixing) was predicted within 10 dB of the product "
    "and the measured floor could not confirm it: the level may be noise",
    COARSE_STEPS: "the power steps around this compression point are too coarse: the "
    "interpolated value may be off by more than 0.2 dB",
    SUPPLY_CURRENT_OFF: "the supply current was more than 30 % from the expected current: "
    "the part looks wrongly powered or damaged",
    Y_TOO_SMALL: "the Y-factor (hot over cold noise) was too small for the stated accuracy: "
    "every error of the noise readings is multiplied by Y/(Y - 1)",
    ANALYZER_NOISE_DOMINATES: "the part's cold output noise stood less than 3 dB above the "
    "analyzer's own: the second-stage correction dominates the figure",
    HOT_COMPRESSION: "the hot source compressed the receiver: the hot-cold difference changed "
    "with 10 dB more input attenuation",
    INTERFERER: "a line stood out of the noise in the measured band: an interferer raised the "
    "noise readings",
    FREQUENCY_OFFSET: "the peak found lay farther from the product's frequency than the "
    "bench's frequency references explain: it is probably another line, or a reference is "
    "off its stated tolerance",
    WINDOW_EDGE: "the highest point of the search window was its edge: the product most "
    "likely lies outside the window, and the level read is not the product's",
    IMAGE_RATIO_DOUBTFUL: "the image-to-signal ratio behind this SSB noise figure came from "
    "a wanted reading within 6 dB of its noise floor, or was above +10 dB: the figure is not "
    "the part's",
    SUPPLY_LIMITED: "at a point behind it the DC supply was in current limit or more than 2 % "
    "below its setting: the part ran below its stated supply",
    SOURCE_UNLEVELED: "at a point behind it a signal source reported its output not leveled: "
    "the part got less drive than the plan says",
    REFERENCE_UNLOCKED: "at a point behind it a source or the analyzer reported its 10 MHz "
    "reference unlocked: its frequencies were off, a narrow-RBW reading may have missed the "
    "product",
    ANALYZER_UNCALIBRATED: "the analyzer flagged a reading behind it uncalibrated (a trace "
    "above its reference level, a sweep too fast for its RBW): it did not vouch for the level",
    TEMPERATURE_OFF: "at a point behind it the DUT probe read outside the temperature "
    "tolerance of its set point: the chamber was not holding the part at that temperature",
})

_FLAG_BIT = {name: 1 << i for i, name in enumerate(FLAGS)}


def flag_bit(name: str) -> int:
    """The bit of flag ``name`` in a flag mask."""
    return _FLAG_BIT[name]


@lru_cache(maxsize=4096)
def flags_from_mask(mask: int) -> tuple[str, ...]:
    """The flag names set in ``mask``, in :data:`FLAGS` order."""
    return tuple(name for name, bit in _FLAG_BIT.items() if mask & bit)


def mask_where(condition: np.ndarray, name: str) -> np.ndarray:
    """A flag-mask array: the bit of ``name`` where ``condition`` is true, else 0."""
    return np.where(np.asarray(condition, dtype=bool), np.int64(_FLAG_BIT[name]), np.int64(0))


#: The figures the analysis produces: name → (unit, what it is).
FIGURE_CATALOGUE: Mapping[str, tuple[str, str]] = MappingProxyType(
    {
        "conversion_gain": ("dB", "P_IF − P_RF at one point"),
        "gain_flatness": ("dB", "max − min conversion gain over a frequency band"),
        "gain_tempco": ("dB/°C", "least-squares slope of conversion gain versus temperature"),
        "lo_power_for_gain": (
            "dBm",
            "lowest LO power from which the gain stays within 0.5 dB of its maximum",
        ),
        "small_signal_gain": ("dB", "conversion gain in the linear region of a power sweep"),
        "input_p0p1db": ("dBm", "input power at 0.1 dB gain compression"),
        "output_p0p1db": ("dBm", "output power at 0.1 dB gain compression"),
        "input_p1db": ("dBm", "input power at 1 dB gain compression"),
        "output_p1db": ("dBm", "output power at 1 dB gain compression"),
        "input_p3db": ("dBm", "input power at 3 dB gain compression"),
        "output_p3db": ("dBm", "output power at 3 dB gain compression"),
        "output_psat": ("dBm", "saturated (highest) output power"),
        "iip3_point_low": ("dBm", "single-point IIP3 from the lower IM3 product, one drive"),
        "iip3_point_high": ("dBm", "single-point IIP3 from the upper IM3 product, one drive"),
        "oip3_point_low": ("dBm", "single-point OIP3 from the lower IM3 product, one drive"),
        "oip3_point_high": ("dBm", "single-point OIP3 from the upper IM3 product, one drive"),
        "im3_low": ("dBc", "lower IM3 product relative to the fundamental, one drive"),
        "im3_high": ("dBc", "upper IM3 product relative to the fundamental, one drive"),
        "im3_asymmetry": ("dB", "upper minus lower IM3 product level, one drive"),
        "iip3_low": ("dBm", "IIP3 from slope-1/slope-3 line fits, lower product"),
        "iip3_high": ("dBm", "IIP3 from slope-1/slope-3 line fits, upper product"),
        "oip3_low": ("dBm", "OIP3 from line fits, lower product"),
        "oip3_high": ("dBm", "OIP3 from line fits, upper product"),
        "iip3": ("dBm", "the worse (lower) of iip3_low and iip3_high"),
        "oip3": ("dBm", "the worse (lower) of oip3_low and oip3_high"),
        "iip3_asymmetry": ("dB", "iip3_high − iip3_low"),
        "fund_slope": ("dB/dB", "unconstrained fitted slope of the fundamental (diagnostic)"),
        "im3_slope_low": ("dB/dB", "unconstrained fitted slope of the lower IM3 (diagnostic)"),
        "im3_slope_high": ("dB/dB", "unconstrained fitted slope of the upper IM3 (diagnostic)"),
        "iip2_point_low": ("dBm", "single-point IIP2 from the lower IM2 product, one drive"),
        "iip2_point_high": ("dBm", "single-point IIP2 from the upper IM2 product, one drive"),
        "iip2_low": ("dBm", "IIP2 from slope-1/slope-2 line fits, lower product"),
        "iip2_high": ("dBm", "IIP2 from slope-1/slope-2 line fits, upper product"),
        "iip2": ("dBm", "the worse (lower) of iip2_low and iip2_high"),
        "iip2_asymmetry": ("dB", "iip2_high − iip2_low"),
        "im2_slope_low": ("dB/dB", "unconstrained fitted slope of the lower IM2 (diagnostic)"),
        "im2_slope_high": ("dB/dB", "unconstrained fitted slope of the upper IM2 (diagnostic)"),
        "spur_dbc": ("dBc", "m×n spur level relative to the wanted IF at the same point"),
        "spur_excluded_dbc": ("dBc", "m×n product the worst spur does not count (outside the "
                              "output band, or named expected), relative to the wanted output"),
        "noise_figure": ("dB", "noise figure by the Y-factor method with second-stage "
                         "correction, double- or single-sideband as its conditions say"),
        "noise_figure_gain": ("dB", "the Y-factor method's own gain estimate (signal and image "
                              "bands together)"),
        "spur_dbm": ("dBm", "m×n spur absolute level at the DUT output port"),
        "lo_if_isolation": ("dB", "LO power at the LO port − LO leakage at the IF port"),
        "lo_rf_isolation": ("dB", "LO power at the LO port − LO leakage at the RF port"),
        "rf_if_isolation": ("dB", "RF power at the RF port − RF leakage at the IF port"),
        "image_rejection": ("dB", "gain at the wanted RF − gain at the image frequency"),
        "if_rf_isolation": ("dB", "upconverter: IF power at the IF (input) port − IF leakage "
                            "at the RF (output) port"),
        "sideband_suppression": ("dBc", "upconverter: wanted output − unwanted sideband, both "
                                 "at the RF (output) port"),
        "lo_suppression": ("dBc", "upconverter: wanted output − LO leakage at the RF (output) "
                           "port (carrier suppression)"),
        "lo_leakage": ("dBm", "upconverter: LO leakage at the RF (output) port"),
        "supply_current": ("A", "DC supply current"),
        "dc_power": ("W", "DC power: supply voltage × supply current"),
    }
)


@dataclass(frozen=True, slots=True)
class Figure:
    """One datasheet figure.

    ``value`` is in ``unit``; ``bound`` is None for a number, "<" or ">" for a bound (see the
    module docstring). ``conditions`` are the fixed settings it was measured under (SI units,
    keys as in the capture table: ``rf_freq_hz``, ``lo_power_dbm``, ``temperature_c``, ...,
    plus ``study``). ``flags`` are names from :data:`FLAGS`; ``points`` the run-store point
    indices it came from.
    """

    name: str
    value: float
    unit: str
    bound: Bound = None
    conditions: Mapping[str, float | int | str] = field(default_factory=dict, hash=False)
    flags: tuple[str, ...] = ()
    points: tuple[int, ...] = ()
    #: Expanded uncertainty (k = 2), in ``unit``; NaN when the figure has no budget
    #: (see :mod:`sweeprig.analysis.uncertainty`), and ``budget`` that budget.
    uncertainty_db: float = field(default=math.nan, compare=False)
    budget: FigureBudget | None = field(default=None, compare=False, hash=False)

    @property
    def is_number(self) -> bool:
        """True when ``value`` is a finite measured number (not a bound, not NaN)."""
        return self.bound is None and math.isfinite(self.value)

    def text(self, digits: int = 2) -> str:
        """The value as people write it: ``"12.30 dBm"``, ``"< -80.00 dBc"``, ``"n/a"``."""
        return value_words(self.value, self.unit, self.bound, digits)


def value_words(value: float, unit: str, bound: Bound = None, digits: int = 2) -> str:
    """:meth:`Figure.text` of a figure of these fields: ``"12.30 dBm"``, ``"< -80.00 dBc"``,
    ``"n/a"``."""
    if not math.isfinite(value):
        return "n/a"
    body = f"{value:.{digits}f} {unit}"
    return f"{bound} {body}" if bound else body


_FIGURE_SLOTS: tuple[str, ...] = Figure.__slots__


#: Figures are built through a writable twin (:mod:`sweeprig.analysis.writable_twin`):
#: several times faster than one ``object.__setattr__`` call per field; None: this
#: interpreter refuses the switch, and the slow path is taken.
_OpenFigure = writable_twin(Figure)
_OPEN_FIGURES = _OpenFigure is not None
_FIGURE_SLOT_SET = frozenset(_FIGURE_SLOTS)
# new_figure sets every field by name: a field added to Figure must be added there too
# (tests/analysis/test_figures.py compares with_changes with dataclasses.replace field by
# field).


def new_figure(name: str, value: float, unit: str, bound: Bound,
               conditions: Mapping[str, float | int | str], flags: tuple[str, ...],
               points: tuple[int, ...], uncertainty_db: float = math.nan,
               budget: FigureBudget | None = None) -> Figure:
    """A :class:`Figure` of these fields, set directly as the generated frozen ``__init__``
    sets them, without its per-call overhead (Figure has no validation to skip; a large run
    makes and replaces hundreds of thousands): the one builder of figures from fields."""
    if _OPEN_FIGURES:
        figure = _OpenFigure()
        figure.name = name
        figure.value = value
        figure.unit = unit
        figure.bound = bound
        figure.conditions = conditions
        figure.flags = flags
        figure.points = points
        figure.uncertainty_db = uncertainty_db
        figure.budget = budget
        figure.__class__ = Figure  # type: ignore[assignment]
        return figure  # type: ignore[return-value]
    out = object.__new__(Figure)
    set_attr = object.__setattr__
    set_attr(out, "name", name)
    set_attr(out, "value", value)
    set_attr(out, "unit", unit)
    set_attr(out, "bound", bound)
    set_attr(out, "conditions", conditions)
    set_attr(out, "flags", flags)
    set_attr(out, "points", points)
    set_attr(out, "uncertainty_db", uncertainty_db)
    set_attr(out, "budget", budget)
    return out


def with_changes(figure: Figure, **changes: object) -> Figure:
    """``figure`` with the fields in ``changes`` replaced: what :func:`dataclasses.replace`
    gives, without re-running ``__init__`` (:func:`new_figure`). An unknown field is
    refused."""
    if not changes.keys() <= _FIGURE_SLOT_SET:
        unknown = sorted(set(changes).difference(_FIGURE_SLOTS))
        raise TypeError(f"Figure has no field {', '.join(unknown)}")
    get = changes.get
    return new_figure(
        get("name", figure.name), get("value", figure.value),  # type: ignore[arg-type]
        get("unit", figure.unit), get("bound", figure.bound),  # type: ignore[arg-type]
        get("conditions", figure.conditions), get("flags", figure.flags),  # type: ignore[arg-type]
        get("points", figure.points), get("uncertainty_db", figure.uncertainty_db),  # type: ignore[arg-type]
        get("budget", figure.budget))  # type: ignore[arg-type]


def with_conditions(figure: Figure, conditions: Mapping[str, float | int | str]) -> Figure:
    """``with_changes(figure, conditions=conditions)`` with its one field given directly: a
    pass that gives every figure of a large run new conditions makes one call each."""
    return new_figure(figure.name, figure.value, figure.unit, figure.bound, conditions,
                      figure.flags, figure.points, figure.uncertainty_db, figure.budget)


def with_uncertainty(figure: Figure, uncertainty_db: float, budget: FigureBudget | None,
                     conditions: Mapping[str, float | int | str] | None = None) -> Figure:
    """``with_changes(figure, uncertainty_db=..., budget=...)`` (and ``conditions=`` unless
    None) with its fields given directly: the budget pass replaces most figures of a run."""
    return new_figure(figure.name, figure.value, figure.unit, figure.bound,
                      figure.conditions if conditions is None else conditions,
                      figure.flags, figure.points, uncertainty_db, budget)


#: Bound code → its symbol (None: a number), and back.
BOUND_SYMBOLS: Mapping[int, Bound] = MappingProxyType(
    {BOUND_NONE: None, BOUND_BELOW: "<", BOUND_ABOVE: ">"})
BOUND_CODES: Mapping[Bound, int] = MappingProxyType(
    {symbol: code for code, symbol in BOUND_SYMBOLS.items()})


def bound_symbol(code: int) -> Bound:
    """Bound code (:data:`BOUND_BELOW`, :data:`BOUND_NONE`, :data:`BOUND_ABOVE`) → symbol."""
    return BOUND_SYMBOLS.get(code)


def read_only_conditions(conditions: Iterable[Mapping[str, float | int | str]]
                         ) -> list[Mapping[str, float | int | str]]:
    """Each conditions mapping as a read-only one: a mapping proxy or a
    :class:`~sweeprig.analysis.condition_rows.ConditionRow` as it is (so the figures of one
    point go on sharing theirs), any other mapping copied into a new proxy."""
    proxy = MappingProxyType
    return [c if type(c) is proxy or type(c) is ConditionRow else proxy(dict(c))
            for c in conditions]


def make_figures(
    name: str,
    unit: str,
    value: Sequence[float] | np.ndarray,
    bound: Sequence[int] | np.ndarray | int = BOUND_NONE,
    flag_mask: Sequence[int] | np.ndarray | int = 0,
    conditions: Sequence[Mapping[str, float | int | str]] | None = None,
    points: Sequence[tuple[int, ...]] | None = None,
) -> list[Figure]:
    """Build one :class:`Figure` per element of the equal-length arrays given.

    ``bound`` holds bound codes, ``flag_mask`` flag masks (see :func:`flag_bit`); either may
    be a scalar for all. ``conditions`` and ``points`` are per-figure (None: empty).
    """
    values = np.asarray(value, dtype=float).ravel()
    count = values.size
    bounds = np.broadcast_to(np.asarray(bound, dtype=np.int64), (count,))
    masks = np.broadcast_to(np.asarray(flag_mask, dtype=np.int64), (count,))
    empty: Mapping[str, float | int | str] = MappingProxyType({})
    conds: Iterable[Mapping[str, float | int | str]] = (
        read_only_conditions(conditions)
        if conditions is not None
        else [empty] * count
    )
    pts: Iterable[tuple[int, ...]] = points if points is not None else [()] * count
    symbols = BOUND_SYMBOLS
    mask_list = masks.tolist()
    flag_sets = {m: flags_from_mask(m) for m in set(mask_list)}
    nan = math.nan
    with collector_paused():
        return [new_figure(name, v, unit, symbols[b], c, flag_sets[m], p, nan, None)
                for v, b, m, c, p in zip(values.tolist(), bounds.tolist(), mask_list, conds,
                                         pts, strict=True)]


#: What makes the figures of one name from arrays, as :func:`make_figures` does (its
#: arguments): an analysis that makes many takes one as ``make``; the reduction gives one
#: whose list may hold the figures as one block of columns instead
#: (:func:`sweeprig.analysis.figure_block.block_maker`).
Maker = Callable[..., list]


def flag_points(
    figures: Iterable[Figure], points: Iterable[int], name: str
) -> list[Figure]:
    """The figures, with flag ``name`` added to every one that came from any of ``points``
    (run-store point indices); the others are returned as they are."""
    return flag_marked_points(figures, [(name, points)])


def flag_marked_points(
    figures: Iterable[Figure], marks: Sequence[tuple[str, Iterable[int]]]
) -> list[Figure]:
    """The figures, with each mark's flag added to every one that came from any of its
    points ((flag name, run-store point indices) per mark); the others are returned as
    they are. One pass however many marks: a figure flagged several times is made again
    once."""
    bits = mark_bits(marks)
    if not bits:
        return list(figures)
    get = bits.get
    masks: dict[tuple[str, ...], int] = {}  # a flags tuple's mask (most figures share one)
    out: list[Figure] = []
    append = out.append
    for figure in figures:
        pts = figure.points
        if len(pts) == 1:
            added = get(pts[0], 0)
        else:
            added = 0
            for p in pts:
                added |= get(p, 0)
        if added:
            flags = figure.flags
            mask = masks.get(flags)
            if mask is None:
                mask = masks[flags] = sum(_FLAG_BIT[f] for f in flags)
            if mask | added != mask:
                figure = with_changes(figure, flags=flags_from_mask(mask | added))
        append(figure)
    return out


def mark_bits(marks: Sequence[tuple[str, Iterable[int]]]) -> dict[int, int]:
    """Per run-store point, the flag bits ``marks`` add to its figures ((flag name,
    points) per mark, as :func:`flag_marked_points` takes them)."""
    bits: dict[int, int] = {}
    for name, points in marks:
        bit = _FLAG_BIT[name]
        for p in set(map(int, points)):
            bits[p] = bits.get(p, 0) | bit
    return bits


@contextmanager
def collector_paused() -> Iterator[None]:
    """Pause the cyclic garbage collector while building many acyclic objects (it would
    rescan every one of them repeatedly); restore its previous state afterwards."""
    was_enabled = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if was_enabled:
            gc.enable()


def worst_of(
    values: np.ndarray, bounds: np.ndarray, axis: int = -1
) -> tuple[np.ndarray, np.ndarray]:
    """The lower (worse, for an intercept) of several estimates, keeping bounds honest.

    ``values``/``bounds`` hold the candidates along ``axis``. Without "<" candidates the
    result is the smallest candidate: a number stays a number (a ">" bound above it cannot be
    lower), a ">" bound stays a ">" bound. With a "<" candidate the minimum is only known to
    lie below the smallest number or "<" value, so the result is that "<" bound. Any NaN
    candidate makes the result NaN. Returns (value, bound code) arrays.
    """
    values = np.moveaxis(np.asarray(values, dtype=float), axis, -1)
    bounds = np.moveaxis(np.asarray(bounds, dtype=np.int64), axis, -1)
    nan = np.isnan(values).any(axis=-1)
    filled = np.where(np.isnan(values), np.inf, values)
    smallest = filled.min(axis=-1, initial=np.inf)
    pick = np.argmin(filled, axis=-1)
    picked_bound = np.take_along_axis(bounds, pick[..., None], axis=-1)[..., 0]
    has_below = (bounds == BOUND_BELOW).any(axis=-1)
    below_value = np.where(bounds == BOUND_ABOVE, np.inf, filled).min(axis=-1, initial=np.inf)
    value = np.where(has_below, below_value, smallest)
    bound = np.where(has_below, BOUND_BELOW, picked_bound)
    value = np.where(nan | ~np.isfinite(value), np.nan, value)
    return value, np.where(np.isnan(value), BOUND_NONE, bound)


def bound_difference(
    a: np.ndarray, a_bound: np.ndarray, b: np.ndarray, b_bound: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """a − b carrying bounds: a "<" a or a ">" b makes a "<" difference, and the reverse a
    ">"; two bounds pulling opposite ways leave nothing known (NaN). Returns (value, code)."""
    a_dir = np.asarray(a_bound, dtype=np.int64)
    b_dir = -np.asarray(b_bound, dtype=np.int64)
    bound = np.where(a_dir == BOUND_NONE, b_dir, np.where(b_dir == BOUND_NONE, a_dir, a_dir))
    conflict = (a_dir != BOUND_NONE) & (b_dir != BOUND_NONE) & (a_dir != b_dir)
    value = np.where(conflict, np.nan, np.asarray(a, dtype=float) - np.asarray(b, dtype=float))
    return value, np.where(conflict, BOUND_NONE, bound)


def bound_sum(
    a: np.ndarray, a_bound: np.ndarray, b: np.ndarray, b_bound: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """a + b carrying bounds (see :func:`bound_difference`)."""
    return bound_difference(a, a_bound, -np.asarray(b, dtype=float), -np.asarray(b_bound))
