"""Column definitions of the tables the tool writes: the contract users rely on.

Each column has a name (units in the name), a kind (``int``, ``float``,
``str``, ``bool``), the number of decimals written to text tables, and a short
description that goes into the JSON output and the schema. Positions and
in-plane angles are in the user's declared axes (conventions §2); the
conversion happens in :mod:`inclination.report.tables`, never here.
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = [
    "Column",
    "GEOMETRY_COLUMNS",
    "BOUNDARY_COLUMNS",
    "SEGMENT_COLUMNS",
    "GRAIN_COLUMNS",
]


@dataclass(frozen=True)
class Column:
    """One column of an output table."""

    name: str
    kind: str
    decimals: int = 0
    description: str = ""


def _c(name, kind, decimals=0, description=""):
    return Column(name, kind, decimals, description)


#: Columns shared by the segments and boundaries tables, in the declared frame.
GEOMETRY_COLUMNS = (
    _c("grain_a", "int", 0, "grain on one side (grain ids of grains.csv)"),
    _c("grain_b", "int", 0, "grain on the other side; grain_a < grain_b"),
    _c("phase_a", "int", 0, "phase id of grain_a"),
    _c("phase_b", "int", 0, "phase id of grain_b"),
    _c("x0_um", "float", 3, "first end point, x, declared axes (µm)"),
    _c("y0_um", "float", 3, "first end point, y, declared axes (µm)"),
    _c("x1_um", "float", 3, "second end point, x, declared axes (µm)"),
    _c("y1_um", "float", 3, "second end point, y, declared axes (µm)"),
    _c("length_um", "float", 3, "fitted length of the straight segment (µm)"),
    _c("trace_angle_deg", "float", 3, "trace angle from +x toward +y, declared axes, [0, 180)"),
    _c("trace_sigma_deg", "float", 3, "standard uncertainty of the trace angle"),
)

SEGMENT_COLUMNS = (
    (_c("segment_id", "int", 0, "segment number, from 1"),)
    + GEOMETRY_COLUMNS
    + (
        _c("residual_um", "float", 4, "RMS distance of the edge midpoints from the fitted line"),
        _c("n_edges", "int", 0, "number of pixel edges along the segment"),
        _c("too_short", "bool", 0, "shorter than min_length_um: kept, not used for planes"),
        _c("misorientation_deg", "float", 3, "mean disorientation of the pixel pairs along it"),
        _c("is_phase_boundary", "bool", 0, "the two grains are of different phases"),
        _c("wkt", "str", 0, "the segment as an OGC WKT LINESTRING, declared axes, µm"),
    )
)

BOUNDARY_COLUMNS = (
    (_c("boundary_id", "int", 0, "boundary (straight segment) number, from 1"),)
    + GEOMETRY_COLUMNS
    + (
        _c("misorientation_deg", "float", 3, "disorientation angle between the grains"),
        _c("axis_a", "str", 0, "disorientation axis in grain a's crystal frame"),
        _c("sigma", "str", 0, "coincidence-site-lattice class, e.g. 3 or 13b; empty if none"),
        _c("sigma_deviation_deg", "float", 3, "angular distance from the exact CSL relation"),
        _c(
            "plane_a",
            "str",
            0,
            "plane whose trace fits best, in grain a's indices (a plane both grains share "
            "first; empty when it is grain b's alone); if ambiguous, the closest of several",
        ),
        _c(
            "plane_b",
            "str",
            0,
            "the same plane in grain b's indices; empty when it is grain a's alone",
        ),
        _c("trace_deviation_deg", "float", 3, "measured minus predicted trace angle, absolute"),
        _c("tolerance_deg", "float", 3, "trace tolerance used for this boundary"),
        _c(
            "candidates_within_tolerance",
            "int",
            0,
            "how many candidate planes fit the trace (a plane both grains share counts once)",
        ),
        _c(
            "chance_fit",
            "float",
            4,
            "chance that a random trace fits some candidate: union of their windows / 180°",
        ),
        _c("identification", "str", 0, "coherent_twin, identified, ambiguous or none"),
        _c("twin_test", "str", 0, "Σ3 only: pass or fail of the coherent-twin trace test"),
        _c(
            "predicted_dip_deg",
            "float",
            3,
            "dip of that plane (0 parallel to surface, 90 vertical); for an ambiguous "
            "boundary only that candidate's dip, not an answer",
        ),
        _c("predicted_dip_azimuth_deg", "float", 3, "dip direction of that plane, declared axes"),
        _c("measured_dip_deg", "float", 3, "dip measured on a section"),
        _c("measured_dip_sigma_deg", "float", 3, "standard uncertainty of the measured dip"),
        _c("measured_dip_azimuth_deg", "float", 3, "measured dip direction, declared axes"),
        _c(
            "dip_source",
            "str",
            0,
            "cross-section, serial-section or serial-stack; empty if not measured",
        ),
        _c("sense", "str", 0, "agrees, opposite or undecided (empty if not measured)"),
        _c(
            "sense_log10_lr",
            "float",
            3,
            "log10 likelihood ratio, declared frame vs turned, with the blunder rate and "
            "reversal chance mixed in: at most log10((1 - blunder_rate)/blunder_rate)",
        ),
        _c(
            "sense_reversal_probability",
            "float",
            4,
            "chance that the measured or predicted dip direction is reversed (steep plane)",
        ),
        _c("normal_x", "float", 5, "measured plane normal, declared axes, x"),
        _c("normal_y", "float", 5, "measured plane normal, declared axes, y"),
        _c("normal_z", "float", 5, "measured plane normal, declared axes, z"),
        _c("measured_plane_a", "str", 0, "nearest low-index plane to the measured normal, grain a"),
        _c("measured_plane_a_deviation_deg", "float", 3, "angle to that plane"),
        _c("measured_plane_b", "str", 0, "nearest low-index plane to the measured normal, grain b"),
        _c("measured_plane_b_deviation_deg", "float", 3, "angle to that plane"),
        _c("measured_twin_plane_deviation_deg", "float", 3, "Σ3: measured plane to common {111}"),
        _c(
            "measured_coherent_twin",
            "str",
            0,
            "Σ3: is the measured plane the common {111}, tested against its σ: yes, no or "
            "cannot_tell (σ too large)",
        ),
    )
)

GRAIN_COLUMNS = (
    _c("grain_id", "int", 0, "grain number, from 1"),
    _c("phase", "int", 0, "phase id"),
    _c("phi1_deg", "float", 3, "mean orientation, Bunge φ1, declared frame"),
    _c("Phi_deg", "float", 3, "mean orientation, Bunge Φ, declared frame"),
    _c("phi2_deg", "float", 3, "mean orientation, Bunge φ2, declared frame"),
    _c("area_px", "int", 0, "number of map points"),
    _c("area_um2", "float", 3, "area (µm²)"),
    _c("centroid_x_um", "float", 3, "centroid, declared axes (µm)"),
    _c("centroid_y_um", "float", 3, "centroid, declared axes (µm)"),
    _c("spread_mean_deg", "float", 3, "mean disorientation of its points to the mean"),
    _c("spread_max_deg", "float", 3, "largest disorientation of its points to the mean"),
    _c("touches_edge", "bool", 0, "the grain reaches the map edge"),
)
