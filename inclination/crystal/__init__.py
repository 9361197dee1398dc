"""The crystal side of the job: orientations, symmetry, cells, indices, families, phases, CSL.

Owns everything that is true of a crystal whatever map it is seen on (docs/conventions.md §3–§4):
``rotations`` (Euler, matrix, quaternion, axis–angle), ``symmetry`` (the 11 Laue classes and
disorientation), ``lattice`` (cells, reciprocal and metric, plane normals, directions,
spacings), ``indices`` (Miller and Miller–Bravais indices, low-index enumeration),
``families`` (symmetric equivalents, default families), ``phases`` (:class:`Phase`, the typed
:class:`Phases` collection, candidate planes) and ``csl`` (coincidence-site-lattice relations
and hexagonal twins). Nothing here reads a file or knows of a map.
"""

from .families import default_families, expand_family
from .indices import (
    Indices,
    canonical_sign,
    format_indices,
    format_indices_latex,
    integer_indices,
    low_indices,
    parse_indices,
    three_index_array,
    to_bravais,
)
from .lattice import (
    BRAVAIS_SYSTEMS,
    LAUE_CRYSTAL_SYSTEMS,
    SETTINGS,
    Lattice,
    check_cell_fits_laue,
    check_lattice,
    d_spacing,
    direction_crystal,
    interplanar_angle_deg,
    plane_normals_crystal,
)
from .phases import CandidatePlanes, Phase, Phases

__all__ = [
    "BRAVAIS_SYSTEMS",
    "LAUE_CRYSTAL_SYSTEMS",
    "SETTINGS",
    "CandidatePlanes",
    "Indices",
    "Lattice",
    "Phase",
    "Phases",
    "canonical_sign",
    "check_cell_fits_laue",
    "check_lattice",
    "d_spacing",
    "default_families",
    "direction_crystal",
    "expand_family",
    "format_indices",
    "format_indices_latex",
    "integer_indices",
    "interplanar_angle_deg",
    "low_indices",
    "parse_indices",
    "plane_normals_crystal",
    "three_index_array",
    "to_bravais",
]
