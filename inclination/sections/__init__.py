"""Second views of the boundaries: cross-sections, serial sections, stacks (§7–§8).

The public names of the submodules are gathered here; each submodule's opening
docstring says what it owns:

- :mod:`.formulas`: the closed-form relations of conventions §7–§8;
- :mod:`.cross_section`: the :class:`CrossSection` record and its measurement;
- :mod:`.face_image`: boundaries measured on the image of a cross-section face;
- :mod:`.registration`: placing a deeper map on the surface map, matching grains;
- :mod:`.serial`: the :class:`SerialLayer` record and the two-section measurement;
- :mod:`.stack`: one plane per boundary through the traces of many sections.
"""

from __future__ import annotations

from .cross_section import (
    CROSS_SECTION_STATUSES,
    CrossSection,
    measure_cross_section,
    network_crossings,
    network_junctions_um,
)
from .face_image import (
    FACE_LINE_STATUSES,
    FaceMeasurement,
    along_offsets_um,
    measure_face_image,
    neighbour_check,
    neighbour_check_notes,
    predicted_image_direction,
    read_face_image,
)
from .formulas import (
    VICKERS_DEPTH_FACTOR,
    SectionLineFrame,
    apparent_dip_deg,
    depth_from_indent_um,
    face_angle_from_image_deg,
    face_depth_scale,
    image_right_sample,
    section_line_frame,
    serial_dip_deg,
    serial_dip_sigma_deg,
    serial_offset_um,
    true_dip_from_apparent_deg,
)
from .registration import Registration, match_grains, register_sections
from .serial import (
    LayerDepth,
    SerialLayer,
    SerialSection,
    TwinDepth,
    estimate_depth_from_twins,
    measure_serial_section,
    section_depth,
)
from .stack import PlaneFit, fit_plane_through_traces, measure_stack

__all__ = [
    "CROSS_SECTION_STATUSES",
    "network_crossings",
    "network_junctions_um",
    "CrossSection",
    "FACE_LINE_STATUSES",
    "FaceMeasurement",
    "LayerDepth",
    "PlaneFit",
    "Registration",
    "SectionLineFrame",
    "SerialLayer",
    "SerialSection",
    "TwinDepth",
    "VICKERS_DEPTH_FACTOR",
    "along_offsets_um",
    "apparent_dip_deg",
    "depth_from_indent_um",
    "estimate_depth_from_twins",
    "face_angle_from_image_deg",
    "face_depth_scale",
    "fit_plane_through_traces",
    "image_right_sample",
    "match_grains",
    "measure_face_image",
    "measure_cross_section",
    "measure_serial_section",
    "measure_stack",
    "neighbour_check",
    "neighbour_check_notes",
    "predicted_image_direction",
    "read_face_image",
    "register_sections",
    "section_depth",
    "section_line_frame",
    "serial_dip_deg",
    "serial_offset_um",
    "serial_dip_sigma_deg",
    "true_dip_from_apparent_deg",
]
