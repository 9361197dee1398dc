"""Every output file of a run, in the user's declared axes (conventions §2).

The computation hands over an :class:`inclination.pipeline.Analysis` in the
sample frame S; this module converts positions, angles, normals and
orientations back into the declared axes and writes the files. Nothing here
computes a result: it only reshapes, converts and writes.
"""

from __future__ import annotations

import io
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from .atomic import write_json_atomic
from .columns import BOUNDARY_COLUMNS, GEOMETRY_COLUMNS, GRAIN_COLUMNS, SEGMENT_COLUMNS
from .schemas import SCHEMA_VERSION
from .tables import write_csv, write_latex, write_markdown, write_table_json

if TYPE_CHECKING:
    from ..pipeline import Analysis

__all__ = ["write_all", "grains_table", "segments_table", "boundaries_table"]

_TEX_COLUMNS = (
    "boundary_id",
    "grain_a",
    "grain_b",
    "length_um",
    "trace_angle_deg",
    "trace_sigma_deg",
    "misorientation_deg",
    "sigma",
    "plane_a",
    "plane_b",
    "trace_deviation_deg",
    "candidates_within_tolerance",
    "predicted_dip_deg",
    "measured_dip_deg",
    "measured_dip_sigma_deg",
    "sense",
)


def _frame_meta(axes) -> dict:
    return {
        "axes": axes.as_dict(),
        "units": {"length": "µm", "angle": "degrees"},
        "angles": "in-plane angles from +x toward +y of the declared axes; traces in [0, 180), "
        "azimuths in [0, 360)",
        "conventions": "docs/conventions.md",
    }


def _declared_points(axes, x, y):
    xy = axes.points_to_declared(np.stack([np.asarray(x, float), np.asarray(y, float)], axis=-1))
    return xy[..., 0], xy[..., 1]


def grains_table(analysis: Analysis) -> dict:
    """The grains table in declared axes (orientations back in the data frame)."""
    from ..crystal.rotations import quat_as_euler_deg
    from ..frames import orientations_to_declared

    g = analysis.grain_map.grains
    omap = analysis.omap
    q = np.asarray(g["quat"], float).reshape(-1, 4)
    if len(q):
        euler = quat_as_euler_deg(
            orientations_to_declared(
                q, omap.axes, omap.data_frame_rotation, rotation_sense=omap.rotation_sense
            )
        )
    else:
        euler = np.zeros((0, 3))
    cx, cy = _declared_points(omap.axes, g["centroid_x_um"], g["centroid_y_um"])
    return {
        "grain_id": np.asarray(g["grain_id"]),
        "phase": np.asarray(g["phase"]),
        "phi1_deg": euler[:, 0],
        "Phi_deg": euler[:, 1],
        "phi2_deg": euler[:, 2],
        "area_px": np.asarray(g["area_px"]),
        "area_um2": np.asarray(g["area_um2"], float),
        "centroid_x_um": cx,
        "centroid_y_um": cy,
        "spread_mean_deg": np.asarray(g["spread_mean_deg"], float),
        "spread_max_deg": np.asarray(g["spread_max_deg"], float),
        "touches_edge": np.asarray(g["touches_edge"], bool),
    }


def segments_table(analysis: Analysis, segments: dict | None = None) -> dict:
    """A segments table (default: the grain boundaries') in declared axes, with WKT."""
    s = analysis.segments if segments is None else segments
    axes = analysis.omap.axes
    x0, y0 = _declared_points(axes, s["x0_um"], s["y0_um"])
    x1, y1 = _declared_points(axes, s["x1_um"], s["y1_um"])
    out = {name: np.asarray(s[name]) for name in ("segment_id", "grain_a", "grain_b", "phase_a")}
    out.update(
        phase_b=np.asarray(s["phase_b"]),
        x0_um=x0,
        y0_um=y0,
        x1_um=x1,
        y1_um=y1,
        length_um=np.asarray(s["length_um"], float),
        trace_angle_deg=axes.angle_to_declared_deg(np.asarray(s["trace_angle_deg"]), kind="trace"),
        trace_sigma_deg=np.asarray(s["trace_sigma_deg"], float),
        residual_um=np.asarray(s["residual_um"], float),
        n_edges=np.asarray(s["n_edges"]),
        too_short=np.asarray(s["too_short"], bool),
        misorientation_deg=np.asarray(s["misorientation_deg"], float),
        is_phase_boundary=np.asarray(s["is_phase_boundary"], bool),
    )
    out["wkt"] = np.array(
        [
            f"LINESTRING ({a:.4f} {b:.4f}, {c:.4f} {d:.4f})"
            for a, b, c, d in zip(x0, y0, x1, y1, strict=True)
        ],
        dtype=object,
    )
    return out


def _aligned(table, segment_ids):
    """A getter of ``table``'s columns aligned to ``segment_ids``; the row lookup is done once.

    ``column(name, fill)`` returns the column with ``fill`` where a segment is absent.
    """
    rows = np.full(len(segment_ids), -1, dtype=int)
    if table is not None and len(table["segment_id"]):
        index = {int(s): i for i, s in enumerate(table["segment_id"])}
        rows = np.array([index.get(int(s), -1) for s in segment_ids], dtype=int)
    found = rows >= 0

    def column(name, fill):
        out = np.full(len(segment_ids), fill, dtype=object if isinstance(fill, str) else float)
        if found.any():
            out[found] = np.asarray(table[name])[rows[found]]
        return out

    return column


def boundaries_table(analysis: Analysis) -> dict:
    """The per-boundary table (one row per segment long enough for planes), declared axes."""
    seg = segments_table(analysis)
    keep = ~seg["too_short"]
    ident = analysis.identification
    ids = seg["segment_id"][keep]
    axes = analysis.omap.axes
    out = {"boundary_id": ids}
    for c in GEOMETRY_COLUMNS:
        out[c.name] = seg[c.name][keep]
    from_ident = _aligned(ident, ids)
    from_measured = _aligned(analysis.measured, ids)
    from_senses = _aligned(analysis.senses, ids)
    from_planes = _aligned(analysis.planes_full, ids)
    for name, fill in (
        ("misorientation_deg", np.nan),
        ("axis_a", ""),
        ("sigma", ""),
        ("sigma_deviation_deg", np.nan),
        ("plane_a", ""),
        ("plane_b", ""),
        ("trace_deviation_deg", np.nan),
        ("tolerance_deg", np.nan),
        ("candidates_within_tolerance", np.nan),
        ("chance_fit", np.nan),
        ("identification", ""),
        ("twin_test", ""),
        ("predicted_dip_deg", np.nan),
    ):
        out[name] = from_ident(name, fill)
    counts = out["candidates_within_tolerance"]
    out["candidates_within_tolerance"] = np.where(np.isfinite(counts), counts, -1).astype(int)
    out["predicted_dip_azimuth_deg"] = axes.angle_to_declared_deg(
        from_ident("predicted_dip_azimuth_deg", np.nan), kind="azimuth"
    )
    out["measured_dip_deg"] = from_measured("measured_dip_deg", np.nan)
    out["measured_dip_sigma_deg"] = from_measured("measured_dip_sigma_deg", np.nan)
    out["measured_dip_azimuth_deg"] = axes.angle_to_declared_deg(
        from_measured("dip_direction_azimuth_deg", np.nan), kind="azimuth"
    )
    out["dip_source"] = from_measured("dip_source", "")
    out["sense"] = from_senses("sense", "")
    out["sense_log10_lr"] = from_senses("log10_likelihood_ratio", np.nan)
    out["sense_reversal_probability"] = from_senses("reversal_probability", np.nan)
    normal_s = np.stack([from_measured(f"normal_{c}", np.nan) for c in "xyz"], axis=-1)
    normal_d = axes.vectors_to_declared(normal_s.reshape(-1, 3)).reshape(-1, 3)
    out["normal_x"], out["normal_y"], out["normal_z"] = normal_d.T
    out["measured_plane_a"] = from_planes("plane_a_measured", "")
    out["measured_plane_a_deviation_deg"] = from_planes("plane_a_deviation_deg", np.nan)
    out["measured_plane_b"] = from_planes("plane_b_measured", "")
    out["measured_plane_b_deviation_deg"] = from_planes("plane_b_deviation_deg", np.nan)
    out["measured_twin_plane_deviation_deg"] = from_planes("twin_plane_deviation_deg", np.nan)
    out["measured_coherent_twin"] = from_planes("coherent_twin", "")
    for c in BOUNDARY_COLUMNS:
        if c.kind == "float":
            out[c.name] = np.asarray(out[c.name], float)
    return out


def _figure(analysis, out_dir, table_declared):
    import matplotlib

    matplotlib.use("Agg", force=False)
    import matplotlib.pyplot as plt

    from .figures import plot_boundaries, save_figure

    omap = analysis.omap
    s = analysis.segments
    keep = ~np.asarray(s["too_short"], bool)
    classes = table_declared.get("identification")
    if classes is None:
        classes = np.full(int(keep.sum()), "none", dtype=object)
    classes = np.where(np.asarray(classes, dtype=object) == "", "none", classes)
    seg_s = {k: np.asarray(s[k])[keep] for k in ("x0_um", "y0_um", "x1_um", "y1_um")}
    fig, ax = plt.subplots(figsize=(8, 8 * omap.shape[0] / max(omap.shape[1], 1) + 1.0))
    try:
        plot_boundaries(
            analysis.grain_map.labels,
            seg_s,
            classes,
            step_x_um=omap.step_x_um,
            step_y_um=omap.row_pitch_um,
            axes_declared=(omap.axes.x, omap.axes.y),
            ax=ax,
            title="Fitted boundary segments by identification class",
        )
        if getattr(analysis, "features", None) is not None:
            from .features import plot_features

            plot_features(ax, analysis.features)
        paths = save_figure(fig, out_dir / "boundaries")
        buf = io.BytesIO()
        fig.savefig(buf, format="png", dpi=110, bbox_inches="tight")
    finally:
        plt.close(fig)
    return paths, buf.getvalue()


def _summary(analysis, base, boundaries) -> dict:
    summary = dict(base)
    omap = analysis.omap
    gm = analysis.grain_map
    counts = {
        "map_points": int(omap.n_points),
        "valid_points": int(np.count_nonzero(omap.valid)),
        "grains": int(gm.n_grains),
    }
    summary["grains"] = {
        "threshold_deg": gm.threshold_deg,
        "connectivity": gm.connectivity,
        "cleanup": {k: int(v) for k, v in gm.cleanup.items()},
    }
    if analysis.segments is not None:
        too_short = np.asarray(analysis.segments["too_short"], bool)
        counts["segments"] = int(len(too_short))
        counts["segments_for_planes"] = int((~too_short).sum())
    summary["counts"] = counts
    if analysis.identification is not None and boundaries is not None:
        ident = np.asarray(boundaries["identification"], dtype=object)
        summary["identified"] = {
            k: int(np.count_nonzero(ident == k))
            for k in ("coherent_twin", "identified", "ambiguous", "none")
        }
        length = np.asarray(boundaries["length_um"], float)
        total = float(length.sum())
        sig = np.asarray(boundaries["sigma"], dtype=object)
        labels = sorted(
            {s for s in sig.tolist() if s}, key=lambda s: (int(s.rstrip("abcdefgh")), s)
        )
        summary["sigma_length_fraction"] = {
            s: (float(length[sig == s].sum()) / total if total > 0 else None) for s in labels
        }
        summary["sigma_count"] = {s: int(np.count_nonzero(sig == s)) for s in labels}
        t = analysis.twin_summary
        summary["twin_test"] = {
            "n_sigma3": t.n_sigma3,
            "passed": t.n_pass,
            "fraction_by_count": t.fraction_by_count,
            "fraction_by_count_95ci": [t.ci_low, t.ci_high],
            "interval": t.interval_method,
            "length_sigma3_um": t.length_sigma3_um,
            "length_passed_um": t.length_pass_um,
            "fraction_by_length": t.fraction_by_length,
            "note": "failing proves a boundary is not a coherent twin; passing does not prove "
            "that it is one",
        }
    if analysis.section_notes:
        summary["sections"] = list(analysis.section_notes)
    if analysis.verdict is not None:
        summary["frame_verdict"] = analysis.verdict.as_dict()
        senses = np.asarray(analysis.senses["sense"], dtype=object)
        summary["senses"] = {
            k: int(np.count_nonzero(senses == k)) for k in ("agrees", "opposite", "undecided")
        }
    elif analysis.stage == "sections":
        summary["frame_verdict"] = None
    return summary


def write_all(analysis: Analysis, out_dir: Path, *, summary_base: dict) -> tuple[list[Path], dict]:
    """Write every file of ``analysis`` into ``out_dir``; returns (paths, summary)."""
    meta = _frame_meta(analysis.omap.axes)
    files = []
    grains = grains_table(analysis)
    files.append(write_csv(out_dir / "grains.csv", grains, GRAIN_COLUMNS))
    boundaries = None
    if analysis.segments is not None:
        segments = segments_table(analysis)
        files.append(write_csv(out_dir / "segments.csv", segments, SEGMENT_COLUMNS))
        files.append(
            write_table_json(
                out_dir / "segments.json",
                segments,
                SEGMENT_COLUMNS,
                schema_version=SCHEMA_VERSION,
                meta=meta,
            )
        )
        files.append(
            write_json_atomic(
                out_dir / "segments.meta.json", {"schema_version": SCHEMA_VERSION, **meta}
            )
        )
    if analysis.subgrain_segments is not None:
        files.append(
            write_csv(
                out_dir / "subgrain_segments.csv",
                segments_table(analysis, analysis.subgrain_segments),
                SEGMENT_COLUMNS,
            )
        )
    if analysis.identification is not None:
        boundaries = boundaries_table(analysis)
        files.append(write_csv(out_dir / "boundaries.csv", boundaries, BOUNDARY_COLUMNS))
        files.append(
            write_table_json(
                out_dir / "boundaries.json",
                boundaries,
                BOUNDARY_COLUMNS,
                schema_version=SCHEMA_VERSION,
                meta=meta,
            )
        )
        files.append(
            write_markdown(
                out_dir / "boundaries.md",
                boundaries,
                [c for c in BOUNDARY_COLUMNS if c.name in _TEX_COLUMNS],
                title="Boundaries",
                notes=f"Declared axes x {analysis.omap.axes.x}, y {analysis.omap.axes.y}; "
                "lengths in µm, angles in degrees. Empty cells: not available.",
            )
        )
        files.append(
            write_latex(
                out_dir / "boundaries.tex",
                boundaries,
                [c for c in BOUNDARY_COLUMNS if c.name in _TEX_COLUMNS],
                caption=(
                    f"Straight boundary segments and their planes. Positions and angles in the "
                    f"declared axes (x {analysis.omap.axes.x}, y {analysis.omap.axes.y}); trace "
                    "angles from +x toward +y; dip 0 parallel to the surface, 90 vertical; "
                    "Bunge Euler angles, passive."
                ),
                label="tab:boundaries",
                sigma_of={
                    "trace_angle_deg": "trace_sigma_deg",
                    "measured_dip_deg": "measured_dip_sigma_deg",
                },
            )
        )
        cand = analysis.candidates
        if cand is not None:
            from .candidates import write_candidates

            rows = analysis.job.planes.get("candidate_rows", "fit_or_shared")
            files.append(write_candidates(out_dir / "candidates.jsonl", cand, meta=meta, rows=rows))
    if analysis.section_tables:
        files.append(
            write_json_atomic(
                out_dir / "sections.json",
                {
                    "schema_version": SCHEMA_VERSION,
                    "frame": "sample frame S (conventions §2)",
                    "sections": [
                        {
                            "note": note,
                            "table": {k: np.asarray(v).tolist() for k, v in table.items()},
                        }
                        for note, table in zip(
                            analysis.section_notes, analysis.section_tables, strict=True
                        )
                    ],
                },
            )
        )
    features = None
    if getattr(analysis, "features", None) is not None:
        from .features import write_features

        feature_files, features = write_features(analysis, out_dir, meta)
        files += feature_files
    figure_png = None
    # The figure belongs to the planes stage: it colours segments by identification class,
    # and drawing a 16-million-point map would dominate a traces-only run.
    if boundaries is not None:
        paths, figure_png = _figure(analysis, out_dir, boundaries)
        files += paths
    summary = _summary(analysis, summary_base, boundaries)
    if features is not None:
        from .features import feature_summary

        summary["features"] = feature_summary(analysis, features)
    files.append(write_json_atomic(out_dir / "summary.json", summary))
    if boundaries is not None:
        from .document import write_report

        files += write_report(out_dir, summary, boundaries, BOUNDARY_COLUMNS, figure_png=figure_png)
    return files, summary
