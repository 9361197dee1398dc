"""Second views of the boundaries: cross-sections, serial sections, stacks (§7–§8).

The public names of the submodules are gathered here; each submodule's opening
docstring says what it owns.
"""

from __future__ import annotations

from .cross_section import (
    CROSS_SECTION_STATUSES,
    VICKERS_DEPTH_FACTOR,
    LayerDepth,
    PlaneFit,
    Registration,
    SerialSection,
    apparent_dip_deg,
    depth_from_indent_um,
    face_angle_from_image_deg,
    fit_plane_through_traces,
    image_right_sample,
    match_grains,
    measure_cross_section,
    measure_serial_section,
    measure_stack,
    register_sections,
    section_depth,
    serial_dip_deg,
    serial_dip_sigma_deg,
    true_dip_from_apparent_deg,
)

__all__ = [
    "CROSS_SECTION_STATUSES",
    "LayerDepth",
    "PlaneFit",
    "Registration",
    "SerialSection",
    "VICKERS_DEPTH_FACTOR",
    "apparent_dip_deg",
    "depth_from_indent_um",
    "face_angle_from_image_deg",
    "fit_plane_through_traces",
    "image_right_sample",
    "match_grains",
    "measure_cross_section",
    "measure_serial_section",
    "measure_stack",
    "register_sections",
    "section_depth",
    "serial_dip_deg",
    "serial_dip_sigma_deg",
    "true_dip_from_apparent_deg",
]
