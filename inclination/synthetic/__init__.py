"""3D microstructures with known planes, sectioned into maps: the demo and the oracle.

The public names of the submodules are gathered here; each submodule's opening
docstring says what it owns.
"""

from __future__ import annotations

from .microstructure import (
    Microstructure,
    SampledMap,
    TwinLamella,
    TwinSpec,
    as_orientation_map,
    boundary_normals_sample,
    cross_section_crossings,
    grid_positions_um,
    ground_truth,
    make_microstructure,
    plane_geometry,
    recorded_in_frame,
    region_at,
    sample_map,
    simulate_cross_section,
    twin_planes_crystal,
)

__all__ = [
    "Microstructure",
    "SampledMap",
    "TwinLamella",
    "TwinSpec",
    "as_orientation_map",
    "boundary_normals_sample",
    "cross_section_crossings",
    "grid_positions_um",
    "ground_truth",
    "make_microstructure",
    "plane_geometry",
    "recorded_in_frame",
    "region_at",
    "sample_map",
    "simulate_cross_section",
    "twin_planes_crystal",
]
