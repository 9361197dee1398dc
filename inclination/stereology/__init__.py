"""Stereology: the distribution of boundary planes in the crystal frame from one section.

``grid`` (the equal-area hemisphere of plane normals), ``estimate`` (great-circle
accumulation, background removal and bootstrap: :func:`plane_distribution`),
``stereogram`` (figures) and ``outputs`` (plane_distribution.json, figures and the
report section).
"""

from __future__ import annotations

from .estimate import (
    WEIGHTINGS,
    MisorientationClass,
    PlaneDistribution,
    accumulation_kernel,
    plane_distribution,
    remove_background,
    zone_accumulation,
)
from .grid import HemisphereGrid

__all__ = [
    "WEIGHTINGS",
    "HemisphereGrid",
    "MisorientationClass",
    "PlaneDistribution",
    "accumulation_kernel",
    "plane_distribution",
    "remove_background",
    "zone_accumulation",
]
