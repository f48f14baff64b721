"""File formats: sequence and bench files (pydantic models, loaders with located errors).

Entry points: :func:`load_sequence`, :func:`load_bench`; JSON Schemas in
:mod:`sweeprig.formats.schema`.

The names below are loaded on first use, so that a command importing one light module of this
package (``sweeprig --help``) does not load the file models.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from sweeprig.lazy import lazy_names

if TYPE_CHECKING:
    from sweeprig.formats.bench import Bench, load_bench
    from sweeprig.formats.sequence import (
        DEFAULT_MAX_POINTS,
        Sequence,
        load_sequence,
        required_roles,
    )

_WHERE = {
    "DEFAULT_MAX_POINTS": "sweeprig.formats.sequence",
    "Bench": "sweeprig.formats.bench",
    "Sequence": "sweeprig.formats.sequence",
    "load_bench": "sweeprig.formats.bench",
    "load_sequence": "sweeprig.formats.sequence",
    "required_roles": "sweeprig.formats.sequence",
}

__all__ = [
    "DEFAULT_MAX_POINTS",
    "Bench",
    "Sequence",
    "load_bench",
    "load_sequence",
    "required_roles",
]


__getattr__ = lazy_names(__name__, _WHERE, globals())
