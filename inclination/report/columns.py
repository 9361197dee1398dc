"""Column definitions of the tables the tool writes: the contract users rely on.

Each column has a name (units in the name), a kind (``int``, ``float``,
``str``, ``bool``), the number of decimals written to the full-precision text
tables (CSV), a description that goes into the JSON output, the schema and the
glossary, and for the paper tables a human header, a unit and a rounding rule:

``fixed``
    the column's ``decimals``;
``uncertainty``
    a standard uncertainty: two significant digits;
``sigma:<column>``
    a value with an uncertainty in ``<column>``: rounded to the last digit the
    uncertainty keeps (two significant digits of σ; common practice, e.g. the
    ISO/IEC Guide 98-3 §7.2.6 recommendation of at most two digits).

The paper table (:data:`PAPER_COLUMNS`) is drawn from the boundaries table
by :func:`inclination.report.tables.paper_table`; every Markdown, LaTeX and
HTML table takes its headers, units and rounding from here. Positions and
in-plane angles are in the user's declared axes (conventions §2); the
conversion happens in :mod:`inclination.report.outputs`, never here.
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = [
    "Column",
    "GEOMETRY_COLUMNS",
    "BOUNDARY_COLUMNS",
    "SEGMENT_COLUMNS",
    "GRAIN_COLUMNS",
    "PAPER_COLUMNS",
    "CLASS_SYMBOLS",
    "SOURCE_SYMBOLS",
    "CLASS_DESCRIPTIONS",
    "ROUNDING_RULES",
    "header_text",
]

#: The closed set of rounding rules (the ``sigma:`` rule names its uncertainty column).
ROUNDING_RULES = ("fixed", "uncertainty", "sigma:")


@dataclass(frozen=True)
class Column:
    """One column of an output table: its name, kind, precision, meaning and paper form."""

    name: str
    kind: str
    decimals: int = 0
    description: str = ""
    header: str = ""
    unit: str = ""
    rounding: str = "fixed"

    @property
    def sigma_column(self) -> str:
        """Name of the uncertainty column this value is rounded to; empty if none."""
        return self.rounding[len("sigma:") :] if self.rounding.startswith("sigma:") else ""


def _c(name, kind, decimals=0, description="", header="", unit="", rounding="fixed"):
    return Column(name, kind, decimals, description, header or name, unit, rounding)


def header_text(column: Column) -> str:
    """The human header with its unit, e.g. ``'Trace (°)'``.

    Examples
    --------
    >>> header_text(Column("length_um", "float", 3, "", "Length", "µm"))
    'Length (µm)'
    >>> header_text(Column("sigma", "str", 0, "", "Σ"))
    'Σ'
    """
    return f"{column.header} ({column.unit})" if column.unit else column.header


#: Columns shared by the segments and boundaries tables, in the declared frame.
GEOMETRY_COLUMNS = (
    _c("grain_a", "int", 0, "grain on one side (grain ids of grains.csv)", "Grain a", ""),
    _c("grain_b", "int", 0, "grain on the other side; grain_a < grain_b", "Grain b", ""),
    _c("phase_a", "int", 0, "phase id of grain_a", "Phase a", ""),
    _c("phase_b", "int", 0, "phase id of grain_b", "Phase b", ""),
    _c("x0_um", "float", 3, "first end point, x, declared axes (µm)", "x₀", "µm"),
    _c("y0_um", "float", 3, "first end point, y, declared axes (µm)", "y₀", "µm"),
    _c("x1_um", "float", 3, "second end point, x, declared axes (µm)", "x₁", "µm"),
    _c("y1_um", "float", 3, "second end point, y, declared axes (µm)", "y₁", "µm"),
    _c("length_um", "float", 3, "fitted length of the straight segment (µm)", "Length", "µm"),
    _c(
        "trace_angle_deg",
        "float",
        3,
        "trace angle from +x toward +y, declared axes, [0, 180)",
        "Trace",
        "°",
        "sigma:trace_sigma_deg",
    ),
    _c(
        "trace_sigma_deg",
        "float",
        3,
        "standard uncertainty of the trace angle",
        "σ trace",
        "°",
        "uncertainty",
    ),
)

SEGMENT_COLUMNS = (
    (_c("segment_id", "int", 0, "segment number, from 1", "Segment"),)
    + GEOMETRY_COLUMNS
    + (
        _c(
            "residual_um",
            "float",
            4,
            "RMS distance of the edge midpoints from the fitted line",
            "Residual",
            "µm",
        ),
        _c("n_edges", "int", 0, "number of pixel edges along the segment", "Edges", ""),
        _c(
            "too_short",
            "bool",
            0,
            "shorter than min_length_um: kept, not used for planes",
            "Too short",
            "",
        ),
        _c(
            "misorientation_deg",
            "float",
            3,
            "mean disorientation of the pixel pairs along it",
            "Misorientation",
            "°",
        ),
        _c(
            "is_phase_boundary",
            "bool",
            0,
            "the two grains are of different phases",
            "Phase boundary",
            "",
        ),
        _c("wkt", "str", 0, "the segment as an OGC WKT LINESTRING, declared axes, µm", "WKT", ""),
    )
)

BOUNDARY_COLUMNS = (
    (_c("boundary_id", "int", 0, "boundary (straight segment) number, from 1", "ID"),)
    + GEOMETRY_COLUMNS
    + (
        _c(
            "misorientation_deg",
            "float",
            3,
            "disorientation angle between the grains",
            "Misorientation",
            "°",
        ),
        _c(
            "axis_a",
            "str",
            0,
            "disorientation axis in grain a's crystal frame",
            "Axis (grain a)",
            "",
        ),
        _c(
            "sigma",
            "str",
            0,
            "coincidence-site-lattice class, e.g. 3 or 13b; empty if none",
            "Σ",
            "",
        ),
        _c(
            "sigma_deviation_deg",
            "float",
            3,
            "angular distance from the exact CSL relation",
            "Deviation from Σ",
            "°",
        ),
        _c(
            "plane_a",
            "str",
            0,
            "plane whose trace fits best, in grain a's indices (a plane both grains share first; "
            "empty when it is grain b's alone); if ambiguous, only the closest-fitting trace of "
            "several candidates, not an identified plane",
            "Plane (grain a)",
            "",
        ),
        _c(
            "plane_b",
            "str",
            0,
            "the same plane in grain b's indices; empty when it is grain a's alone; if ambiguous, "
            "only the closest-fitting trace of several candidates",
            "Plane (grain b)",
            "",
        ),
        _c(
            "trace_deviation_deg",
            "float",
            3,
            "measured minus predicted trace angle, absolute",
            "Trace misfit",
            "°",
        ),
        _c("tolerance_deg", "float", 3, "trace tolerance used for this boundary", "Tolerance", "°"),
        _c(
            "candidates_within_tolerance",
            "int",
            0,
            "how many candidate planes fit the trace (a plane both grains share counts once)",
            "Planes fitting",
            "",
        ),
        _c(
            "chance_fit",
            "float",
            4,
            "chance that a random trace fits some candidate: union of their windows / 180°",
            "Chance fit",
            "",
        ),
        _c("identification", "str", 0, "coherent_twin, identified, ambiguous or none", "Class", ""),
        _c(
            "twin_test",
            "str",
            0,
            "Σ3 only: pass or fail of the coherent-twin trace test",
            "Twin test",
            "",
        ),
        _c(
            "predicted_dip_deg",
            "float",
            3,
            "dip of the identified plane (0 parallel to surface, 90 vertical); empty for an "
            "ambiguous boundary, which has no predicted plane (see predicted_dip_min_deg/max)",
            "Predicted dip",
            "°",
        ),
        _c(
            "predicted_dip_azimuth_deg",
            "float",
            3,
            "dip direction of the identified plane, declared axes; empty if ambiguous",
            "Predicted dip direction",
            "°",
        ),
        _c(
            "predicted_dip_min_deg",
            "float",
            3,
            "smallest dip of the candidate planes within tolerance (the prediction if identified)",
            "Predicted dip, min",
            "°",
        ),
        _c(
            "predicted_dip_max_deg",
            "float",
            3,
            "largest dip of the candidate planes within tolerance (the prediction if identified)",
            "Predicted dip, max",
            "°",
        ),
        _c(
            "measured_supports",
            "str",
            0,
            "candidate within tolerance the measured plane supports, 'a (hkl)' or 'b (hkl)' in "
            "that grain's indices: the one normal within 3σ of the measured normal, every other "
            "candidate beyond 3σ; else empty",
            "Measured supports",
            "",
        ),
        _c(
            "measured_dip_deg",
            "float",
            3,
            "dip measured on a section",
            "Measured dip",
            "°",
            "sigma:measured_dip_sigma_deg",
        ),
        _c(
            "measured_dip_sigma_deg",
            "float",
            3,
            "standard uncertainty of the measured dip",
            "σ measured dip",
            "°",
            "uncertainty",
        ),
        _c(
            "measured_dip_azimuth_deg",
            "float",
            3,
            "measured dip direction, declared axes",
            "Measured dip direction",
            "°",
        ),
        _c(
            "dip_source",
            "str",
            0,
            "cross-section (entries typed in the job), cross-section image (measured on the "
            "face image), serial-section or serial-stack; empty if not measured",
            "Dip source",
            "",
            "fixed",
        ),
        _c("sense", "str", 0, "agrees, opposite or undecided (empty if not measured)", "Sense", ""),
        _c(
            "sense_log10_lr",
            "float",
            3,
            "log10 likelihood ratio, declared frame vs turned, with the blunder rate and reversal "
            "chance mixed in: at most log10((1 - blunder_rate)/blunder_rate)",
            "log₁₀ LR",
            "",
        ),
        _c(
            "sense_reversal_probability",
            "float",
            4,
            "chance that the measured or predicted dip direction is reversed (steep plane)",
            "P(reversed)",
            "",
        ),
        _c("normal_x", "float", 5, "measured plane normal, declared axes, x", "n_x", ""),
        _c("normal_y", "float", 5, "measured plane normal, declared axes, y", "n_y", ""),
        _c("normal_z", "float", 5, "measured plane normal, declared axes, z", "n_z", ""),
        _c(
            "measured_plane_a",
            "str",
            0,
            "nearest low-index plane to the measured normal, grain a",
            "Measured plane (a)",
            "",
        ),
        _c("measured_plane_a_deviation_deg", "float", 3, "angle to that plane", "Misfit (a)", "°"),
        _c(
            "measured_plane_b",
            "str",
            0,
            "nearest low-index plane to the measured normal, grain b",
            "Measured plane (b)",
            "",
        ),
        _c("measured_plane_b_deviation_deg", "float", 3, "angle to that plane", "Misfit (b)", "°"),
        _c(
            "measured_twin_plane_deviation_deg",
            "float",
            3,
            "Σ3: measured plane to common {111}",
            "Misfit to {111}",
            "°",
        ),
        _c(
            "measured_coherent_twin",
            "str",
            0,
            "Σ3: is the measured plane the common {111}, tested against its σ: yes, no or "
            "cannot_tell (σ too large)",
            "Coherent twin",
            "",
        ),
    )
)

GRAIN_COLUMNS = (
    _c("grain_id", "int", 0, "grain number, from 1", "Grain", ""),
    _c("phase", "int", 0, "phase id", "Phase", ""),
    _c("phi1_deg", "float", 3, "mean orientation, Bunge φ1, declared frame", "φ₁", "°"),
    _c("Phi_deg", "float", 3, "mean orientation, Bunge Φ, declared frame", "Φ", "°"),
    _c("phi2_deg", "float", 3, "mean orientation, Bunge φ2, declared frame", "φ₂", "°"),
    _c("area_px", "int", 0, "number of map points", "Area", "points"),
    _c("area_um2", "float", 3, "area (µm²)", "Area", "µm²"),
    _c("centroid_x_um", "float", 3, "centroid, declared axes (µm)", "Centroid x", "µm"),
    _c("centroid_y_um", "float", 3, "centroid, declared axes (µm)", "Centroid y", "µm"),
    _c(
        "spread_mean_deg",
        "float",
        3,
        "mean disorientation of its points to the mean",
        "Mean spread",
        "°",
    ),
    _c(
        "spread_max_deg",
        "float",
        3,
        "largest disorientation of its points to the mean",
        "Largest spread",
        "°",
    ),
    _c("touches_edge", "bool", 0, "the grain reaches the map edge", "At edge", ""),
)


#: Symbols of the identification classes in the paper table (legend under the table).
CLASS_SYMBOLS = {"coherent_twin": "CT", "identified": "I", "ambiguous": "A", "none": "–"}

#: What each identification class means (glossary, legend).
CLASS_DESCRIPTIONS = {
    "coherent_twin": "Σ3 boundary whose trace lies along the {111} plane common to both grains "
    "(passes the coherent-twin trace test)",
    "identified": "exactly one candidate plane of the listed families fits the trace within "
    "the tolerance, and a random trace would rarely fit (low chance fit)",
    "ambiguous": "several candidate planes fit the trace: the trace alone cannot choose",
    "none": "no candidate plane fits the trace within the tolerance",
}

#: Symbols of the dip sources in the paper table.
SOURCE_SYMBOLS = {
    "cross-section": "X",
    "cross-section image": "XI",
    "serial-section": "S",
    "serial-stack": "K",
}

#: The paper table: one row per selected boundary, every cell a rounded string.
PAPER_COLUMNS = (
    _c("boundary_id", "int", 0, "boundary number, as in boundaries.csv and on the map", "ID"),
    _c("grains", "str", 0, "the two grains, a/b (grain ids of grains.csv)", "Grains"),
    _c("sigma", "str", 0, "coincidence-site-lattice class Σ; empty if none", "Σ"),
    _c(
        "class",
        "str",
        0,
        "identification class: CT coherent twin, I identified, A ambiguous, – none",
        "Class",
    ),
    _c(
        "plane",
        "str",
        0,
        "best candidate plane in grain a; '/ plane in grain b' where its indices differ; "
        "'– / (h k l)': a plane of low index in grain b only",
        "Plane",
    ),
    _c(
        "trace",
        "str",
        0,
        "trace angle ± its standard uncertainty, from +x toward +y, declared axes",
        "Trace",
        "°",
        "sigma:trace_sigma_deg",
    ),
    _c(
        "predicted_dip",
        "str",
        0,
        "dip of the identified plane (empty if ambiguous), 0 parallel to the surface, "
        "90 vertical; whole degrees",
        "Pred. dip",
        "°",
    ),
    _c(
        "predicted_direction",
        "str",
        0,
        "azimuth the predicted plane dips toward, declared axes, [0, 360); whole degrees",
        "Pred. dir.",
        "°",
    ),
    _c(
        "measured_dip",
        "str",
        0,
        "dip measured on a section ± its standard uncertainty",
        "Meas. dip",
        "°",
        "sigma:measured_dip_sigma_deg",
    ),
    _c(
        "measured_direction",
        "str",
        0,
        "measured dip direction, declared axes, [0, 360); whole degrees",
        "Meas. dir.",
        "°",
    ),
    _c(
        "source",
        "str",
        0,
        "where the dip was measured: X cross-section, S serial section, K serial stack",
        "Src.",
    ),
    _c(
        "sense",
        "str",
        0,
        "agrees: the measurement confirms the declared frame; opposite: it fits the frame "
        "turned 180° about the surface normal; undecided: it cannot tell",
        "Sense",
    ),
)
