"""The largest sequence a load accepts unless told otherwise (a light module: the command line
shows it in its help without loading the file models)."""

from __future__ import annotations

#: Refuse sequences that expand to more points than this (override per call).
DEFAULT_MAX_POINTS = 10_000_000
