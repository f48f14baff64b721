"""Fixed-point texts of many numbers at once, as Python's ``format(x, ".3f")`` writes them.

A large run's figure table spells every figure as ``"12.345 ± 0.180 dB (k = 2)"``: hundreds
of thousands of float formats, the largest part of making its slices. Here the texts are
made from integers by pyarrow's compute functions, without a Python string per number, and
each is the text Python would write, character for character:

- ``format(x, ".Nf")`` is the exact binary value of ``x`` rounded to N decimals, ties to
  even (Python's ``float.__format__``, after C's correctly rounded conversion). With
  ``X = x·10^N`` (exact, a real number) the text is ``round(X)`` with a decimal point N
  digits from the right and the sign of ``x`` (``-0.000`` for -0.0 and for a negative
  value that rounds to zero).
- ``r = x·10^N`` in floating point differs from ``X`` by at most half an ulp of ``r``, so
  ``round(r)`` is ``round(X)`` unless ``r`` lies within an ulp of a half-integer; such
  numbers (and those of 2^52 or more after scaling) are written by Python, once per
  distinct value; non-finite ones are left to the caller: :func:`fixed_texts` says which.

Units: none (texts). pyarrow is optional: :func:`arrow_compute` is None without it.
"""

from __future__ import annotations

import functools
from typing import Any

import numpy as np

#: Scaled magnitudes from this on are left to Python (an ulp of 0.5 or more).
_LARGEST = 2.0**52
#: A scaled value this many of its ulps (or fewer) from a half-integer is left to Python.
_TIE_ULPS = 4.0


@functools.cache
def arrow_compute() -> Any:
    """``(pyarrow, pyarrow.compute)``, or None when pyarrow is not installed."""
    try:
        import pyarrow as pa
        import pyarrow.compute as pc
    except ImportError:
        return None
    return pa, pc


def fixed_texts(values: np.ndarray, digits: int) -> tuple[Any, np.ndarray]:
    """``format(v, f".{digits}f")`` of each of ``values`` (float64) as an Arrow
    ``large_string`` array, and where that text is made (bool array: every finite value);
    elsewhere (not a number, an infinity) the array holds a placeholder for the caller to
    replace. A value too close to a rounding tie to decide from its scaled float, or too
    large, is written by Python here, once per distinct value (a run repeats a few such
    values many times). Needs pyarrow (:func:`arrow_compute`)."""
    pa, pc = arrow_compute()
    values = np.asarray(values, dtype=np.float64)
    scale = 10.0**digits
    with np.errstate(over="ignore", invalid="ignore"):  # (inf and NaN: left to the caller)
        magnitude = np.abs(values * scale)
        fraction = magnitude - np.floor(magnitude)
        decided = (magnitude < _LARGEST) & (
            np.abs(fraction - 0.5) > _TIE_ULPS * np.spacing(magnitude))
    whole = np.rint(np.where(decided, magnitude, 0.0)).astype(np.int64)
    unit = 10**digits
    integer_part = pc.cast(pa.array(whole // unit), pa.large_string())
    decimals = pc.utf8_lpad(pc.cast(pa.array(whole % unit), pa.large_string()), digits, "0")
    sign = pc.if_else(pa.array(np.signbit(values)), large_text("-"), large_text(""))
    if digits:
        texts = joined(sign, integer_part, large_text("."), decimals)
    else:
        texts = joined(sign, integer_part)
    finite = np.isfinite(values)
    undecided = np.flatnonzero(finite & ~decided)
    if undecided.size:
        # distinct by their bits (-0.0 is not 0.0 here), each written once by Python
        bits, spread = np.unique(values[undecided].view(np.int64), return_inverse=True)
        written = pa.array([format(v, f".{digits}f") for v in bits.view(np.float64).tolist()],
                           type=pa.large_string())
        take = np.arange(values.size)
        take[undecided] = values.size + spread.reshape(-1)
        texts = pa.concat_arrays([texts, written]).take(pa.array(take))
    return texts, finite


def large_text(text: str) -> Any:
    """``text`` as an Arrow ``large_string`` scalar (a piece of :func:`joined`)."""
    pa, _ = arrow_compute()
    return pa.scalar(text, pa.large_string())


def joined(*pieces: Any) -> Any:
    """The row-wise concatenation of Arrow ``large_string`` arrays and scalars."""
    _, pc = arrow_compute()
    return pc.binary_join_element_wise(*pieces, large_text(""))


def comma_joined(texts: Any) -> str:
    """The texts of an Arrow string array joined by commas, one Python text (no Python
    string per element)."""
    pa, pc = arrow_compute()
    whole = pa.LargeListArray.from_arrays(pa.array([0, len(texts)], type=pa.int64()), texts)
    return str(pc.binary_join(whole, large_text(","))[0].as_py())
