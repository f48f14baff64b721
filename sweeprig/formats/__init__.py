"""File formats: sequence and bench files (pydantic models, loaders with located errors).

Entry points: :func:`load_sequence`, :func:`load_bench`; JSON Schemas in
:mod:`sweeprig.formats.schema`.
"""

from sweeprig.formats.bench import Bench, load_bench
from sweeprig.formats.sequence import DEFAULT_MAX_POINTS, Sequence, load_sequence, required_roles

__all__ = [
    "DEFAULT_MAX_POINTS",
    "Bench",
    "Sequence",
    "load_bench",
    "load_sequence",
    "required_roles",
]
