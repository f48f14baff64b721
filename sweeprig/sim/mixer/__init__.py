"""Behavioural double-balanced Gilbert-cell mixer model (pure numpy).

Public API: :func:`load_part` → :class:`MixerPart`, whose :meth:`MixerPart.evaluate` maps an
operating point, an LO tone and input tones to a :class:`MixerResponse`; and
:func:`reference_figures` for a part's datasheet-style figures computed from the model.
"""

from sweeprig.sim.mixer.part import (
    MixerPart,
    PartFile,
    PortNetwork,
    load_part,
    part_from_mapping,
    shipped_parts,
)
from sweeprig.sim.mixer.reference import ReferenceFigures, reference_figures
from sweeprig.sim.mixer.types import MixerResponse, OperatingPoint, Product, ToneInput

__all__ = [
    "MixerPart",
    "MixerResponse",
    "OperatingPoint",
    "PartFile",
    "PortNetwork",
    "Product",
    "ReferenceFigures",
    "ToneInput",
    "load_part",
    "part_from_mapping",
    "reference_figures",
    "shipped_parts",
]
