"""Second views of the boundaries: cross-sections, serial sections, stacks (§7–§8).

The public names of the submodules are gathered here; each submodule's opening
docstring says what it owns:

- :mod:`.formulas`: the closed-form relations of conventions §7–§8;
- :mod:`.cross_section`: the :class:`CrossSection` record and its measurement;
- :mod:`.registration`: placing a deeper map on the surface map, matching grains;
- :mod:`.serial`: the :class:`SerialLayer` record and the two-section measurement;
- :mod:`.stack`: one plane per boundary through the traces of many sections.
"""

from __future__ import annotations

from .cross_section import CROSS_SECTION_STATUSES, CrossSection, measure_cross_section
from .formulas import (
    VICKERS_DEPTH_FACTOR,
    SectionLineFrame,
    apparent_dip_deg,
    depth_from_indent_um,
    face_angle_from_image_deg,
    image_right_sample,
    section_line_frame,
    serial_dip_deg,
    serial_dip_sigma_deg,
    true_dip_from_apparent_deg,
)
from .registration import Registration, match_grains, register_sections
from .serial import (
    LayerDepth,
    SerialLayer,
    SerialSection,
    measure_serial_section,
    section_depth,
)
from .stack import PlaneFit, fit_plane_through_traces, measure_stack

__all__ = [
    "CROSS_SECTION_STATUSES",
    "CrossSection",
    "LayerDepth",
    "PlaneFit",
    "Registration",
    "SectionLineFrame",
    "SerialLayer",
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
    "section_line_frame",
    "serial_dip_deg",
    "serial_dip_sigma_deg",
    "true_dip_from_apparent_deg",
]
