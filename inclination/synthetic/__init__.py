"""3D microstructures with known planes, sectioned into maps: the demo and the oracle.

- :mod:`.microstructure`: the 3D model (Voronoi grains, twin lamellae, regions);
- :mod:`.sampling`: orientation maps of the surface or of a plane at depth, with noise,
  non-indexed and mis-indexed points, and maps recorded in a turned data frame;
- :mod:`.sectioning`: milled cross-sections along a line, and serial sections at depth;
- :mod:`.truth`: the true boundary normals and the JSON-ready ground truth.

The public names of the submodules are gathered here; each submodule's opening
docstring says what it owns. Trace, dip and dip direction of every plane come from the
package's one §5 function, :func:`inclination.planes.geometry.surface_geometry`.
"""

from __future__ import annotations

from .faces import FaceImage, render_face_image
from .microstructure import (
    Microstructure,
    TwinLamella,
    TwinSpec,
    make_microstructure,
    region_at,
    twin_planes_crystal,
)
from .sampling import (
    SampledMap,
    as_orientation_map,
    grid_positions_um,
    recorded_in_frame,
    sample_map,
)
from .sectioning import cross_section_crossings, simulate_cross_section
from .truth import boundary_normals_sample, ground_truth

__all__ = [
    "FaceImage",
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
    "recorded_in_frame",
    "region_at",
    "render_face_image",
    "sample_map",
    "simulate_cross_section",
    "twin_planes_crystal",
]
