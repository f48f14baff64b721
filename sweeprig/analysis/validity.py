"""Validity tests on readings: noise floor, attenuation test, linear-region size.

Pure numpy on arrays of any (broadcastable) shape; levels in dBm at the same reference plane
as their noise floors. A NaN noise floor means "not recorded": such a reading is never
called in the noise and always counted as clear of it. The flag names these tests raise are
listed in :mod:`sweeprig.analysis.figures`.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

#: A product closer than this to its noise floor is reported as an upper bound (dB).
NOISE_MARGIN_DB = 6.0
#: Points used in an intercept fit must have the product at least this far above the floor.
FIT_NOISE_MARGIN_DB = 10.0
#: Two-tone points used in a fit must be at least this far below the input P1dB (dB).
COMPRESSION_BACKOFF_DB = 10.0
#: Attenuation test (common practice, no source): adding 10 dB of analyzer input attenuation
#: leaves a product made by the part where it was, while one made in the analyzer's first
#: mixer drops (3rd order by about 20 dB). A product moving more than this is the analyzer's...
ATTEN_PRODUCT_CHANGE_DB = 1.0
#: ...provided the carrier stayed within this (dB); otherwise the test itself is in doubt.
ATTEN_CARRIER_TOLERANCE_DB = 0.3
#: A repeat that rose while less than this above its own (raised) noise floor is not counted
#: as moved: at 6-10 dB above the floor the displayed level still carries about 0.4-1 dB of
#: noise and fluctuates by about as much in one sweep (common practice, no source; the
#: mean rise is corrected exactly, see :func:`attenuation_test`).
ATTEN_REPEAT_NOISE_MARGIN_DB = 10.0
#: Fewer points than this in a linear region or fit range raises ``few_points``.
MIN_LINEAR_POINTS = 3
#: A conversion gain more than this below the part's ``expected_gain`` says the part is
#: unpowered, wrongly powered or not driven, not merely off its spec (dB; common practice,
#: no source: well beyond part-to-part spread, compression and mismatch).
UNPOWERED_GAIN_MARGIN_DB = 20.0
#: A supply current more than this fraction away from the part's ``expected_supply_current``
#: says the part is wrongly powered or damaged (common practice, no source: well beyond the
#: part-to-part spread a datasheet allows, while a dead bias branch, a latched-up or shorted
#: part, or a supply in its current limit lands far outside it).
SUPPLY_CURRENT_TOLERANCE = 0.3


def in_noise(
    level_dbm: ArrayLike, noise_floor_dbm: ArrayLike, margin_db: float = NOISE_MARGIN_DB
) -> np.ndarray:
    """True where a reading is less than ``margin_db`` above its noise floor.

    Such a displayed level is signal plus noise: only an upper bound of the signal.
    """
    level = np.asarray(level_dbm, dtype=float)
    floor = np.asarray(noise_floor_dbm, dtype=float)
    with np.errstate(invalid="ignore"):
        return np.asarray((level - floor) < margin_db)


def clear_of_noise(
    level_dbm: ArrayLike, noise_floor_dbm: ArrayLike, margin_db: float = FIT_NOISE_MARGIN_DB
) -> np.ndarray:
    """True where a finite reading is at least ``margin_db`` above its floor (or the floor
    is unknown)."""
    level = np.asarray(level_dbm, dtype=float)
    floor = np.asarray(noise_floor_dbm, dtype=float)
    return np.isfinite(level) & ~in_noise(level, floor, margin_db)


def attenuation_test(
    product_dbm: ArrayLike,
    product_atten_dbm: ArrayLike,
    carrier_dbm: ArrayLike,
    carrier_atten_dbm: ArrayLike,
    *,
    product_floor_dbm: ArrayLike = np.nan,
    product_atten_floor_dbm: ArrayLike = np.nan,
    product_change_db: float = ATTEN_PRODUCT_CHANGE_DB,
    carrier_tolerance_db: float = ATTEN_CARRIER_TOLERANCE_DB,
) -> tuple[np.ndarray, np.ndarray]:
    """Tell analyzer-made distortion from the part's with the +10 dB attenuation repeat.

    All levels are referred to the DUT port (the attenuation is already corrected for), so a
    product made by the part reads the same in both sweeps (common practice, no source).
    Returns ``(analyzer_distortion, carrier_moved)`` boolean arrays:

    * ``carrier_moved``: both carrier readings exist and differ by more than
      ``carrier_tolerance_db``: the test cannot be trusted at that point.
    * ``analyzer_distortion``: the product was clear of its noise floor, its repeat exists,
      it moved by more than ``product_change_db`` and the carrier did not move. A rise into
      a repeat less than :data:`ATTEN_REPEAT_NOISE_MARGIN_DB` above its own floor (the floor
      rises with the attenuation) is not counted. A missing carrier repeat is taken as a
      steady carrier.

    A move counts only when the floor's rise does not explain it either: where both floors
    are known, the product's own power ``S = P − N`` (powers in mW, mean noise removed) is
    expected to read ``S + N'`` on the repeat's floor ``N'`` (incoherent powers add), and the
    repeat must differ from that too by more than ``product_change_db``.
    """
    product = np.asarray(product_dbm, dtype=float)
    repeat = np.asarray(product_atten_dbm, dtype=float)
    carrier = np.asarray(carrier_dbm, dtype=float)
    carrier_repeat = np.asarray(carrier_atten_dbm, dtype=float)
    with np.errstate(invalid="ignore"):
        carrier_step = np.abs(carrier_repeat - carrier)
        carrier_moved = np.isfinite(carrier_step) & (carrier_step > carrier_tolerance_db)
        expected = _on_other_floor(product, product_floor_dbm, product_atten_floor_dbm)
        change = repeat - product
        unexplained = repeat - expected  # the move the floor's rise does not explain
        testable = np.isfinite(change) & ~in_noise(product, product_floor_dbm)
        noise_rise = in_noise(repeat, product_atten_floor_dbm,
                              ATTEN_REPEAT_NOISE_MARGIN_DB) & (change > 0)
        moved = (testable & ~noise_rise & (np.abs(change) > product_change_db)
                 & (np.abs(unexplained) > product_change_db))
    return np.asarray(moved & ~carrier_moved), np.asarray(carrier_moved)


def _on_other_floor(level_dbm: np.ndarray, floor_dbm: ArrayLike, other_floor_dbm: ArrayLike
                    ) -> np.ndarray:
    """What ``level_dbm`` (signal plus the mean noise of ``floor_dbm``) reads on a floor of
    ``other_floor_dbm`` instead, dBm; the level itself where either floor is unknown."""
    floor = np.broadcast_to(np.asarray(floor_dbm, dtype=float), level_dbm.shape)
    other = np.broadcast_to(np.asarray(other_floor_dbm, dtype=float), level_dbm.shape)
    known = np.isfinite(floor) & np.isfinite(other) & np.isfinite(level_dbm)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        signal_mw = np.maximum(10.0 ** (level_dbm / 10.0) - 10.0 ** (floor / 10.0), 0.0)
        shifted = 10.0 * np.log10(signal_mw + 10.0 ** (other / 10.0))
    return np.where(known, shifted, level_dbm)


def upper_bound_dbm(level_dbm: ArrayLike, noise_floor_dbm: ArrayLike) -> np.ndarray:
    """The displayed level of an in-noise product, used as its upper bound (dBm).

    A reading that happens to fall below its recorded floor is lifted to the floor.
    """
    level = np.asarray(level_dbm, dtype=float)
    floor = np.asarray(noise_floor_dbm, dtype=float)
    return np.where(np.isfinite(floor), np.fmax(level, floor), level)


def gain_collapsed(
    gain_db: ArrayLike, expected_gain_db: float, margin_db: float = UNPOWERED_GAIN_MARGIN_DB
) -> np.ndarray:
    """True where a conversion gain is more than ``margin_db`` below ``expected_gain_db``.

    An in-noise gain (an upper bound) counts too: the true gain is lower still. NaN gains
    are never counted.
    """
    gain = np.asarray(gain_db, dtype=float)
    with np.errstate(invalid="ignore"):
        return np.asarray(gain < float(expected_gain_db) - margin_db)


def supply_current_off(
    current_a: ArrayLike, expected_a: float, tolerance: float = SUPPLY_CURRENT_TOLERANCE
) -> np.ndarray:
    """True where a measured supply current is more than ``tolerance`` (a fraction) away from
    ``expected_a``. NaN currents are never counted."""
    current = np.asarray(current_a, dtype=float)
    expected = float(expected_a)
    with np.errstate(invalid="ignore"):
        return np.asarray(np.abs(current - expected) > tolerance * abs(expected))
