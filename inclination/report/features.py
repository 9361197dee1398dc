"""Output of the traces inside grains: features.csv/json, its schema, report section, overlay.

The features table arrives in the sample frame S (:mod:`inclination.features`); here
positions, angles, azimuths and normals are converted into the map's declared axes
(conventions §2) and written. Nothing here computes a result.
"""

from __future__ import annotations

import json

import numpy as np

from .columns import Column
from .schemas import SCHEMA_VERSION, table_schema
from .tables import format_cell, write_csv, write_table_json

__all__ = [
    "FEATURE_COLUMNS",
    "feature_summary",
    "features_section_html",
    "features_section_markdown",
    "features_table",
    "plot_features",
    "render_schema",
    "write_features",
]


def _c(name, kind, decimals=0, description=""):
    return Column(name, kind, decimals, description)


#: Columns of features.csv and features.json, in the declared axes.
FEATURE_COLUMNS = (
    _c("feature_id", "int", 0, "the trace's place in the job's features.traces, from 1"),
    _c("kind", "str", 0, "the job's free text (slip, twin, crack, ...)"),
    _c("grain_id", "int", 0, "grain under the trace (grain ids of grains.csv)"),
    _c("trace_angle_deg", "float", 3, "trace angle from +x toward +y, declared axes, [0, 180)"),
    _c("identification", "str", 0, "identified (one plane fits), ambiguous (several), none"),
    _c("plane", "str", 0, "the identified plane (empty unless identified)"),
    _c("trace_deviation_deg", "float", 3, "angle between measured and predicted trace"),
    _c("candidates_within_tolerance", "int", 0, "candidate planes whose trace fits"),
    _c("predicted_dip_deg", "float", 3, "dip of the identified plane (0 flat, 90 vertical)"),
    _c(
        "predicted_dip_azimuth_deg",
        "float",
        3,
        "dip direction of the identified plane, declared axes, [0, 360): the settled frame, "
        "or the frame as declared while unsettled",
    ),
    _c("schmid_factor", "float", 3, "largest Schmid factor of the slip systems on the plane"),
    _c(
        "schmid_rank",
        "int",
        0,
        "rank of that factor among all slip systems of the grain (1 = highest; ties share)",
    ),
    _c("candidates", "str", 0, "fitting candidate planes, ';'-joined, best fit first"),
    _c("candidate_deviations_deg", "str", 0, "their trace deviations, ';'-joined"),
    _c("candidate_schmid_factors", "str", 0, "their largest Schmid factors, ';'-joined"),
    _c("given", "str", 0, "point (at_um with its angle) or line (line_um)"),
    _c("x_um", "float", 3, "the point, or the line's midpoint, x, declared axes (µm)"),
    _c("y_um", "float", 3, "the point, or the line's midpoint, y, declared axes (µm)"),
    _c("phase", "int", 0, "phase id of the grain"),
    _c("trace_sigma_deg", "float", 3, "standard uncertainty of the trace angle"),
    _c("family", "str", 0, "family of the identified plane"),
    _c("tolerance_deg", "float", 3, "trace tolerance of the identified plane"),
    _c("predicted_trace_angle_deg", "float", 3, "predicted trace of the identified plane"),
    _c(
        "predicted_dip_azimuth_if_turned_deg",
        "float",
        3,
        "dip direction if the data frame is turned 180° about the surface normal; empty once "
        "the frame is settled",
    ),
    _c("frame", "str", 0, "unsettled, as_declared or turned_180_about_normal (frame verdict)"),
    _c("predicted_normal_x", "float", 4, "unit normal of the identified plane, x, declared axes"),
    _c("predicted_normal_y", "float", 4, "unit normal, y, declared axes"),
    _c("predicted_normal_z", "float", 4, "unit normal, z, declared axes"),
    _c("slip_direction", "str", 0, "slip direction of the system with the largest factor"),
    _c("schmid_factors", "str", 0, "every system on the plane: direction and factor, ';'"),
    _c("schmid_factor_grain_max", "float", 3, "largest Schmid factor of any system of the grain"),
    _c("measured_dip_deg", "float", 3, "dip measured on a cross-section through the trace"),
    _c("measured_dip_sigma_deg", "float", 3, "its standard uncertainty"),
    _c("measured_dip_azimuth_deg", "float", 3, "measured dip direction, declared axes"),
    _c("sense", "str", 0, "measured dip direction against the prediction, frame as declared"),
)

_ENUMS = {
    "identification": ["identified", "ambiguous", "none"],
    "frame": ["unsettled", "as_declared", "turned_180_about_normal"],
    "given": ["point", "line"],
    "sense": ["agrees", "opposite", "undecided"],
}
_TRACES = ("trace_angle_deg", "predicted_trace_angle_deg")
_AZIMUTHS = (
    "predicted_dip_azimuth_deg",
    "predicted_dip_azimuth_if_turned_deg",
    "measured_dip_azimuth_deg",
)


def render_schema() -> str:
    """schemas/features.schema.json as text (a test checks the committed file against it).

    Examples
    --------
    >>> json.loads(render_schema())["title"]
    'Traces inside grains'
    """
    schema = table_schema("Traces inside grains", "features", FEATURE_COLUMNS)
    props = schema["properties"]["rows"]["items"]["properties"]
    for name, values in _ENUMS.items():
        props[name] = {"enum": [*values, None], "description": props[name]["description"]}
    return json.dumps(schema, indent=2, ensure_ascii=False) + "\n"


def features_table(analysis) -> dict:
    """The features table of ``analysis`` in declared axes (conventions §2)."""
    f = analysis.features
    axes = analysis.omap.axes
    out = {c.name: np.asarray(f[c.name]) for c in FEATURE_COLUMNS if c.name in f}
    xy = axes.points_to_declared(np.stack([f["x_um"], f["y_um"]], axis=-1).astype(float))
    out["x_um"], out["y_um"] = xy[:, 0], xy[:, 1]
    for name in _TRACES:
        out[name] = axes.angle_to_declared_deg(np.asarray(f[name], float), kind="trace")
    for name in _AZIMUTHS:
        out[name] = axes.angle_to_declared_deg(np.asarray(f[name], float), kind="azimuth")
    normal = np.stack([np.asarray(f[f"predicted_normal_{c}"], float) for c in "xyz"], axis=-1)
    normal = axes.vectors_to_declared(normal.reshape(-1, 3)).reshape(-1, 3)
    out["predicted_normal_x"], out["predicted_normal_y"], out["predicted_normal_z"] = normal.T
    return out


def feature_summary(analysis, table: dict) -> dict:
    """What summary.json says of the features (and the report shows)."""
    ident = np.asarray(table["identification"], dtype=object)
    counts = {k: int(np.count_nonzero(ident == k)) for k in _ENUMS["identification"]}
    n = int(len(ident))
    spec = analysis.job.raw["features"]
    columns = {c: np.asarray(table[c]).tolist() for c in _REPORT_COLUMNS}
    rows = [
        {
            c: (None if isinstance(v[i], float) and not np.isfinite(v[i]) else v[i])
            for c, v in columns.items()
        }
        for i in range(n)
    ]
    return {
        "traces": n,
        "identification": counts,
        "identified_fraction": counts["identified"] / n if n else None,
        "frame": str(table["frame"][0]) if n else "unsettled",
        "loading_direction": spec.get("loading_direction"),
        "note": "dip directions are given for both senses of the frame until the frame verdict "
        "settles it (conventions §6)",
        "rows": rows,
    }


def write_features(analysis, out_dir, meta: dict):
    """Write features.csv and features.json; returns (paths, declared table)."""
    table = features_table(analysis)
    paths = [
        write_csv(out_dir / "features.csv", table, FEATURE_COLUMNS),
        write_table_json(
            out_dir / "features.json",
            table,
            FEATURE_COLUMNS,
            schema_version=SCHEMA_VERSION,
            meta=meta,
        ),
    ]
    return paths, table


_REPORT_COLUMNS = (
    "feature_id",
    "kind",
    "grain_id",
    "trace_angle_deg",
    "identification",
    "plane",
    "candidates",
    "predicted_dip_deg",
    "predicted_dip_azimuth_deg",
    "predicted_dip_azimuth_if_turned_deg",
    "schmid_factor",
    "schmid_rank",
    "measured_dip_deg",
)
_BY_NAME = {c.name: c for c in FEATURE_COLUMNS}


def _section_lines(summary: dict):
    f = summary.get("features")
    if not f:
        return None
    counts = f["identification"]
    frame = {
        "unsettled": "The frame is not settled: each dip direction is given for the frame as "
        "declared and for the frame turned 180° about the surface normal.",
        "as_declared": "The frame verdict settles the frame as declared; one dip direction each.",
        "turned_180_about_normal": "The frame verdict settles the frame as turned 180° about the "
        "surface normal; dip directions are given for the settled frame.",
    }[f["frame"]]
    text = (
        f"{f['traces']} traces: {counts['identified']} identified, {counts['ambiguous']} "
        f"ambiguous (several planes fit; listed), {counts['none']} with no fitting plane. {frame}"
    )
    if f.get("loading_direction") is not None:
        text += (
            f" Schmid factors for a uniaxial load along {f['loading_direction']} (declared axes)."
        )
    cells = [
        ["" if r[c] is None else format_cell(r[c], _BY_NAME[c]) for c in _REPORT_COLUMNS]
        for r in f["rows"]
    ]
    return text, cells


def features_section_markdown(summary: dict) -> list:
    """Report lines (Markdown) of the features section; none without features."""
    got = _section_lines(summary)
    if got is None:
        return []
    text, cells = got
    lines = ["## Traces inside grains", "", text, ""]
    lines.append("| " + " | ".join(_REPORT_COLUMNS) + " |")
    lines.append("|" + "|".join("---" for _ in _REPORT_COLUMNS) + "|")
    lines += ["| " + " | ".join(row) + " |" for row in cells]
    return lines + [""]


def features_section_html(summary: dict) -> list:
    """Report parts (HTML) of the features section; none without features."""
    import html

    got = _section_lines(summary)
    if got is None:
        return []
    text, cells = got
    esc = html.escape
    parts = ["<h2>Traces inside grains</h2>", f"<p>{esc(text)}</p>", "<table><thead><tr>"]
    parts.append("".join(f"<th>{esc(c)}</th>" for c in _REPORT_COLUMNS) + "</tr></thead><tbody>")
    parts += ["<tr>" + "".join(f"<td>{esc(v)}</td>" for v in row) + "</tr>" for row in cells]
    parts.append("</tbody></table>")
    return parts


def plot_features(ax, features_sample, *, colour: str = "#CC79A7"):
    """Draw each feature trace on a map axes in S, labelled by its feature id.

    A line is drawn as given; a trace given at a point as a short stroke through the
    point along its angle. Returns the artists (lines and labels).

    Examples
    --------
    >>> import matplotlib
    >>> matplotlib.use("Agg")
    >>> import matplotlib.pyplot as plt
    >>> fig, ax = plt.subplots()
    >>> f = {"feature_id": np.array([1]), "given": np.array(["point"]),
    ...      "x_um": np.array([2.0]), "y_um": np.array([3.0]),
    ...      "x0_um": np.array([np.nan]), "y0_um": np.array([np.nan]),
    ...      "x1_um": np.array([np.nan]), "y1_um": np.array([np.nan]),
    ...      "trace_angle_deg": np.array([45.0])}
    >>> len(plot_features(ax, f))
    2
    >>> plt.close(fig)
    """
    artists = []
    x_lo, x_hi = sorted(ax.get_xlim())
    y_lo, y_hi = sorted(ax.get_ylim())
    stroke = 0.04 * max(x_hi - x_lo, y_hi - y_lo, 1e-9)
    for i, fid in enumerate(np.asarray(features_sample["feature_id"]).tolist()):
        if features_sample["given"][i] == "line":
            xs = [features_sample["x0_um"][i], features_sample["x1_um"][i]]
            ys = [features_sample["y0_um"][i], features_sample["y1_um"][i]]
        else:
            t = np.deg2rad(features_sample["trace_angle_deg"][i])
            dx, dy = stroke * np.cos(t), stroke * np.sin(t)
            x, y = features_sample["x_um"][i], features_sample["y_um"][i]
            xs, ys = [x - dx, x + dx], [y - dy, y + dy]
        (line,) = ax.plot(xs, ys, color=colour, linewidth=2.0, zorder=4)
        label = ax.annotate(
            f"F{fid}",
            (float(np.mean(xs)), float(np.mean(ys))),
            xytext=(3, 3),
            textcoords="offset points",
            fontsize=7,
            color=colour,
            fontweight="bold",
            zorder=4,
        )
        artists += [line, label]
    return artists
