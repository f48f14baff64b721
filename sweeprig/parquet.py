"""Parquet support is optional: pyarrow (large, and used only to write Parquet tables) comes
with the ``parquet`` extra (``pip install 'sweeprig[parquet]'``)."""

from __future__ import annotations

import importlib.util

from sweeprig.errors import InputError

#: How to get Parquet support, for messages.
PARQUET_EXTRA_FIX = ("install the 'parquet' extra (pip install 'sweeprig[parquet]'), or write "
                     "CSV instead")


def parquet_available() -> bool:
    """True when pyarrow, which writes Parquet files, is installed."""
    return importlib.util.find_spec("pyarrow") is not None


def require_parquet(where: str) -> None:
    """Refuse, naming the extra, a Parquet export when pyarrow is not installed."""
    if not parquet_available():
        raise InputError("Parquet files need pyarrow, which is not installed", where=where,
                         fix=PARQUET_EXTRA_FIX)
