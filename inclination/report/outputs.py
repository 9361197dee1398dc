"""Every output file of a run, in the user's declared axes (conventions §2).

The computation hands over an :class:`inclination.pipeline.Analysis` in the
sample frame S; this module converts positions, angles, normals and
orientations back into the declared axes and writes the files. Nothing here
computes a result: it only reshapes, converts and writes.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..compare.comparison import TRUSTED_IDENTIFICATIONS
from ..run_tables import aligned_columns
from .atomic import RawJSON, write_json_atomic, write_text_atomic
from .columns import BOUNDARY_COLUMNS, GEOMETRY_COLUMNS, GRAIN_COLUMNS, SEGMENT_COLUMNS
from .schemas import SCHEMA_VERSION
from .tables import json_int_array, json_number_array, write_csv, write_table_json

__all__ = ["write_all", "grains_table", "segments_table", "boundaries_table"]


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


def grains_table(analysis) -> dict:
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


def segments_table(analysis, segments=None) -> dict:
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


def _candidate_dips(analysis, ids):
    """Per boundary: the dip range of its candidates within tolerance, and the one the
    measured plane supports.

    The supported candidate is the one whose normal (sample frame S, conventions §5)
    lies closest to the measured normal, taken as an axis so the 180° sense does not
    enter, in units of σ = hypot(σ measured dip, tolerance / 2); it is named only when
    within 3σ while every other candidate lies beyond 3σ. Labels are ``a (hkl)`` or
    ``b (hkl)``: the plane in that grain's indices.
    """
    n = len(ids)
    low, high = np.full(n, np.nan), np.full(n, np.nan)
    supports = np.full(n, "", dtype=object)
    cands = getattr(analysis, "candidates", None)
    if cands is None or not len(cands["segment_id"]) or n == 0:
        return low, high, supports
    fits = np.asarray(cands["fits"], bool)
    # A plane both grains share is one candidate: keep its grain-a row only.
    shared = np.asarray(cands["shared_with"], dtype=object) != ""
    side = np.asarray(cands["side"], dtype=object)
    keep = fits & ~((side == "b") & shared)
    seg = np.asarray(cands["segment_id"])[keep]
    dip = np.asarray(cands["dip_deg"], float)[keep]
    normal = np.stack([np.asarray(cands[f"normal_{c}"], float)[keep] for c in "xyz"], -1)
    tol = np.asarray(cands["tolerance_deg"], float)[keep]
    label = side[keep].astype(object) + " " + np.asarray(cands["plane"], dtype=object)[keep]
    measured = analysis.measured
    from_measured = aligned_columns(measured, ids)
    m_normal = np.stack([from_measured(f"normal_{c}", np.nan) for c in "xyz"], -1)
    m_sigma = from_measured("measured_dip_sigma_deg", np.nan) if measured is not None else None
    row = {int(s): k for k, s in enumerate(np.asarray(ids).tolist())}
    groups = {}
    for k, s in enumerate(seg.tolist()):
        groups.setdefault(int(s), []).append(k)
    for s, ks in groups.items():
        r = row.get(s)
        if r is None:
            continue
        low[r], high[r] = dip[ks].min(), dip[ks].max()
        if m_sigma is None or not np.all(np.isfinite(m_normal[r])):
            continue
        cos = np.abs(normal[ks] @ m_normal[r]) / np.linalg.norm(m_normal[r])
        angle = np.rad2deg(np.arccos(np.clip(cos, 0.0, 1.0)))
        z = angle / np.hypot(m_sigma[r], tol[ks] / 2.0)
        order = np.argsort(z)
        best = z[order[0]]
        # The measurement supports a candidate only when it agrees with it (≤ 3σ) and
        # rules out every other one (> 3σ): being merely the closer of two is no support.
        if best <= 3.0 and (len(ks) == 1 or z[order[1]] > 3.0):
            supports[r] = label[ks[order[0]]]
    return low, high, supports


def boundaries_table(analysis) -> dict:
    """The per-boundary table (one row per segment long enough for planes), declared axes."""
    seg = segments_table(analysis)
    keep = ~seg["too_short"]
    ident = analysis.identification
    ids = seg["segment_id"][keep]
    axes = analysis.omap.axes
    out = {"boundary_id": ids}
    for c in GEOMETRY_COLUMNS:
        out[c.name] = seg[c.name][keep]
    from_ident = aligned_columns(ident, ids)
    from_measured = aligned_columns(analysis.measured, ids)
    from_senses = aligned_columns(analysis.senses, ids)
    from_planes = aligned_columns(analysis.planes_full, ids)
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
    # An ambiguous boundary has no predicted plane: its dip is only a range over the
    # candidates within tolerance, never a single value that reads as an answer.
    unique = np.isin(out["identification"], TRUSTED_IDENTIFICATIONS)
    low, high, supports = _candidate_dips(analysis, ids)
    out["predicted_dip_min_deg"] = np.where(unique, out["predicted_dip_deg"], low)
    out["predicted_dip_max_deg"] = np.where(unique, out["predicted_dip_deg"], high)
    out["predicted_dip_deg"] = np.where(unique, out["predicted_dip_deg"], np.nan)
    out["predicted_dip_azimuth_deg"] = np.where(unique, out["predicted_dip_azimuth_deg"], np.nan)
    out["measured_supports"] = supports
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


def paper_caption(axes, paper) -> str:
    """Caption of the paper table: frame, conventions and the selection rule."""
    return (
        f"Boundary planes, in the declared axes (x {axes.x}, y {axes.y} on the screen). "
        "Trace angles from +x toward +y in [0, 180); dip 0 parallel to the surface, 90 "
        "vertical; dip direction: the azimuth the plane dips toward, from +x toward +y in "
        "[0, 360) (conventions in docs/conventions.md). Shown: "
        f"{paper.n_rows} of {paper.n_total} boundaries ({paper.rule}); the full table at full "
        "precision is boundaries.csv and boundaries.json."
    )


def _paper_files(analysis, out_dir, boundaries) -> list:
    from .tables import paper_latex, paper_legend, paper_markdown, paper_table

    paper = paper_table(boundaries)
    caption = paper_caption(analysis.omap.axes, paper)
    md = ["# Boundaries", "", caption, ""] + paper_markdown(paper) + ["", paper_legend(), ""]
    return [
        write_text_atomic(out_dir / "boundaries.md", "\n".join(md)),
        write_text_atomic(
            out_dir / "boundaries.tex", paper_latex(paper, caption=caption, label="tab:boundaries")
        ),
    ]


def _cross_sections(analysis):
    """(name, CrossSection record, table) of each cross-section of the job, in S."""
    from ..sections import CrossSection

    out = []
    for index, (section, table) in enumerate(
        zip(analysis.job.sections, analysis.section_tables, strict=False)
    ):
        if section.get("kind") != "cross-section":
            continue
        record = CrossSection.from_job_entry(
            section,
            axes=analysis.omap.axes,
            path=analysis.job.source_path,
            pointer=f"/sections/{index}",
        )
        out.append((section.get("name") or f"section {index + 1}", record, table))
    return out


def _poles(phase):
    """Labelled low-index plane normals (C) of a phase, upper hemisphere."""
    from ..crystal.families import default_families, expand_family
    from ..crystal.indices import format_indices, parse_indices
    from ..crystal.lattice import plane_normals_crystal

    out = []
    for family in default_families(phase.laue)[:3]:
        members = expand_family(phase.lattice, parse_indices(family).values, phase.laue)
        for row, n in zip(members, plane_normals_crystal(phase.lattice, members), strict=True):
            sign = -1 if n[2] < -1e-9 else 1
            out.append((format_indices(tuple(int(x) * sign for x in row), "plane"), sign * n))
    return out


def _figures(analysis, out_dir, boundaries):
    """Every figure of the planes stage; returns (paths, [{file, title}] for the report)."""
    import matplotlib

    matplotlib.use("Agg", force=False)
    import matplotlib.pyplot as plt

    from ..crystal.rotations import quat_apply
    from ..sections.formulas import apparent_dip_deg
    from .figures import (
        plot_boundary_map,
        plot_dip_comparison,
        plot_normals_stereogram,
        plot_section_sketch,
        save_figure,
    )

    omap = analysis.omap
    s = analysis.segments
    keep = ~np.asarray(s["too_short"], bool)
    ids = np.asarray(s["segment_id"])[keep]
    classes = np.asarray(boundaries["identification"], dtype=object)
    classes = np.where(classes == "", "none", classes)
    seg_s = {k: np.asarray(s[k])[keep] for k in ("x0_um", "y0_um", "x1_um", "y1_um")}
    seg_s["segment_id"] = ids
    ident, measured = analysis.identification, analysis.measured
    # Dip symbols in S (conventions §5): the measured plane where there is one, else the
    # predicted plane of a uniquely identified boundary.
    from_measured, from_ident = aligned_columns(measured, ids), aligned_columns(ident, ids)
    m_dip = from_measured("measured_dip_deg", np.nan)
    m_az = from_measured("dip_direction_azimuth_deg", np.nan)
    p_dip = from_ident("predicted_dip_deg", np.nan)
    p_az = from_ident("predicted_dip_azimuth_deg", np.nan)
    unique = np.isin(classes, TRUSTED_IDENTIFICATIONS)
    use_m = np.isfinite(m_dip) & np.isfinite(m_az)
    dips = {
        "dip_deg": np.where(use_m, m_dip, np.where(unique, p_dip, np.nan)),
        "dip_azimuth_deg": np.where(use_m, m_az, np.where(unique, p_az, np.nan)),
    }
    sections = _cross_sections(analysis)
    paths, shown = [], []

    def save(fig, stem, title):
        try:
            paths.extend(save_figure(fig, out_dir / stem))
        finally:
            plt.close(fig)
        shown.append({"file": f"{stem}.png", "vector": f"{stem}.svg", "title": title})

    art = plot_boundary_map(
        analysis.grain_map.labels,
        seg_s,
        classes,
        step_x_um=omap.step_x_um,
        step_y_um=omap.row_pitch_um,
        axes_declared=(omap.axes.x, omap.axes.y),
        sections=[(name, rec.line_sample) for name, rec, _ in sections],
        dips=dips,
        title="Boundaries by identification class, with ids, section lines and dips",
    )
    if getattr(analysis, "features", None) is not None:
        from .features import plot_features

        plot_features(art["map_ax"], analysis.features)
    save(art["fig"], "boundaries", "Map: boundaries, ids, section lines, dip ticks")

    fig, (ax_s, ax_d) = plt.subplots(1, 2, figsize=(9.2, 4.6))
    normals_s = np.stack([from_measured(f"normal_{c}", np.nan) for c in "xyz"], axis=-1)
    has = np.all(np.isfinite(normals_s), axis=1)
    grains = analysis.grain_map.grains
    row_of = {int(g): k for k, g in enumerate(np.asarray(grains["grain_id"]).tolist())}
    grain_a = np.asarray(boundaries["grain_a"])[has]
    quat = np.asarray(grains["quat"], float).reshape(-1, 4)[[row_of[int(g)] for g in grain_a]]
    normals_c = quat_apply(quat, normals_s[has]) if has.any() else np.zeros((0, 3))
    phases = list(analysis.job.phases.values())
    plot_normals_stereogram(normals_c, classes[has], _poles(phases[0]) if phases else (), ax=ax_s)
    # Only identified planes have a predicted dip; ambiguous rows are left out.
    plot_dip_comparison(
        np.where(unique, p_dip, np.nan),
        m_dip,
        from_measured("measured_dip_sigma_deg", np.nan),
        classes,
        ax=ax_d,
    )
    fig.tight_layout()
    save(fig, "planes", "Stereogram of measured normals; predicted against measured dip")

    for k, (name, record, table) in enumerate(sections, start=1):
        ok = np.asarray(table["status"]) == "measured"
        sid = np.asarray(table["segment_id"])[ok]
        beta = np.asarray(table["beta_deg"], float)[ok]
        u = np.diff(np.asarray(record.line_sample, float), axis=0)[0]
        u = u / np.linalg.norm(u)
        length = float(np.hypot(*np.diff(np.asarray(record.line_sample, float), axis=0)[0]))

        def signed(dip, az, u=u, beta=beta):
            # Positive: the plane descends toward the line's end (its dip direction has a
            # component along the line), as the sketch draws it, left to right.
            side = np.sign(np.cos(np.deg2rad(az)) * u[0] + np.sin(np.deg2rad(az)) * u[1])
            return np.where(side == 0, 1.0, side) * apparent_dip_deg(dip, beta)

        m = signed(
            np.asarray(table["measured_dip_deg"], float)[ok],
            np.asarray(table["dip_direction_azimuth_deg"], float)[ok],
        )
        from_section = aligned_columns(ident, sid)
        pdip = from_section("predicted_dip_deg", np.nan)
        paz = from_section("predicted_dip_azimuth_deg", np.nan)
        # Only a settled plane has one predicted line; an ambiguous boundary's closest
        # candidate would read as an answer (as in the boundary table).
        settled = np.isin(from_section("identification", ""), TRUSTED_IDENTIFICATIONS)
        pdip = np.where(settled, pdip, np.nan)
        pr = np.where(np.isfinite(pdip), signed(np.nan_to_num(pdip), np.nan_to_num(paz)), np.nan)
        art = plot_section_sketch(
            np.asarray(table["along_um"], float)[ok], m, pr, sid, length_um=length, name=name
        )
        save(art["ax"].figure, f"section-{k}", f"Cross-section {name}: face sketch")
    return paths, shown


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


def _relocated(value, staging: str, final: str):
    """``value`` with every path string under ``staging`` moved under ``final``."""
    if isinstance(value, dict):
        return {k: _relocated(v, staging, final) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_relocated(v, staging, final) for v in value]
    if isinstance(value, str) and value.startswith(staging):
        return final + value[len(staging) :]
    return value


#: Decimals of the float columns of ``sections.json`` by the ending of their names: 1e-4°,
#: 10 pm and 1e-6 for a unit normal's components lie far below what any section measures.
SECTION_DECIMALS = (("_deg", 4), ("_um", 5))
NORMAL_DECIMALS = 6
#: Significant digits of a probability (it may be 1e-30: decimals would make it 0).
PROBABILITY_DIGITS = 6


def section_table_json(table) -> dict:
    """A section's table for ``sections.json``: float columns rounded and encoded in bulk.

    Columns in degrees get 4 decimals, in µm 5, the normal's components 6, probabilities
    6 significant digits (``%.6g``); any other float column keeps every digit of Python's
    ``repr``; integers and text as they are (-1 for no segment, as the table has it).
    NaN is ``null``. Encoded in bulk (:func:`~inclination.report.tables.json_number_array`).

    Examples
    --------
    >>> from inclination.report.atomic import dumps_json
    >>> t = {"segment_id": np.array([4, -1]), "beta_deg": np.array([52.123456, np.nan]),
    ...      "normal_z": np.array([0.5, 1.0]), "reversal_probability": np.array([1e-30, 1 / 3])}
    >>> print(dumps_json(section_table_json(t)))
    {
      "segment_id": [4, -1],
      "beta_deg": [52.1235, null],
      "normal_z": [0.5, 1],
      "reversal_probability": [1e-30, 0.333333]
    }
    """
    out = {}
    for name, values in table.items():
        values = np.asarray(values)
        decimals = NORMAL_DECIMALS if name.startswith("normal_") else None
        for ending, d in SECTION_DECIMALS:
            if name.endswith(ending):
                decimals = d
        if values.dtype.kind in "iu" and values.ndim == 1:
            out[name] = RawJSON(json_int_array(values))
        elif values.dtype.kind != "f" or values.ndim != 1:
            out[name] = values
        elif "probability" in name:
            out[name] = RawJSON(json_number_array(values, PROBABILITY_DIGITS, significant=True))
        elif decimals is not None:
            out[name] = RawJSON(json_number_array(values, decimals))
        else:
            out[name] = values
    return out


def write_all(analysis, out_dir: Path, *, summary_base: dict, relocate=None, progress=None):
    """Write every file of ``analysis`` into ``out_dir``; returns (paths, summary).

    ``relocate = (staging, final)``: paths in the summary that lie under the staging
    folder are written as they will read once it is moved to ``final``.
    ``progress(total, desc)`` as for :func:`inclination.pipeline.run`: one step per
    group of files.
    """
    bar = progress(6, "writing") if progress is not None else None

    def step():
        if bar is not None:
            bar.update(1)

    meta = _frame_meta(analysis.omap.axes)
    files = []
    grains = grains_table(analysis)
    files.append(write_csv(out_dir / "grains.csv", grains, GRAIN_COLUMNS))
    step()
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
    step()
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
        files += _paper_files(analysis, out_dir, boundaries)
        cand = analysis.candidates
        if cand is not None:
            from .candidates import write_candidates

            rows = analysis.job.planes.get("candidate_rows", "fit_or_shared")
            files.append(write_candidates(out_dir / "candidates.jsonl", cand, meta=meta, rows=rows))
    step()
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
                            "table": section_table_json(table),
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
    figures = []
    # The figures belong to the planes stage: they colour boundaries by identification
    # class, and drawing a 16-million-point map would dominate a traces-only run.
    if boundaries is not None:
        paths, figures = _figures(analysis, out_dir, boundaries)
        files += paths
    step()
    summary = _summary(analysis, summary_base, boundaries)
    if getattr(analysis, "faces", ()):
        from .faces import write_face_outputs

        face_files, summary["face_images"] = write_face_outputs(analysis, out_dir)
        files += face_files
    if relocate is not None:
        staging, final = (str(Path(p)) for p in relocate)
        summary = _relocated(summary, staging, final)
        summary["provenance"]["output_folder"] = final + str(out_dir)[len(staging) :]
    if figures:
        summary["figures"] = figures
    if features is not None:
        from .features import feature_summary

        summary["features"] = feature_summary(analysis, features)
    files.append(write_json_atomic(out_dir / "summary.json", summary))
    if boundaries is not None:
        from .document import write_report

        files += write_report(out_dir, summary, boundaries)
    step()
    if bar is not None:
        bar.update(1)
        bar.close()
    return files, summary
