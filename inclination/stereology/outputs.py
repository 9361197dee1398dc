"""Files of the stereology stage: plane_distribution.json, stereograms and the report section.

Owns turning :class:`~.estimate.PlaneDistribution` records into what a user opens:
the JSON document (``schemas/plane_distribution.schema.json``), one stereogram per
phase and class (PNG and SVG), and the report section with the method's limits, which
goes into the run's report or, for ``inclination stereology``, a report of its own.
"""

from __future__ import annotations

import base64
import html
import math
from pathlib import Path

from ..crystal.phases import Phases
from .estimate import PlaneDistribution, plane_distribution

__all__ = [
    "SCHEMA_VERSION",
    "CAVEATS",
    "distribution_document",
    "run_from_job",
    "write_stereology",
]

SCHEMA_VERSION = "1.0"

#: What the method can and cannot say, as its authors put it (Saylor et al. 2004).
CAVEATS = (
    "This is a distribution of boundary planes over many boundaries; it never gives the "
    "plane of any one boundary.",
    "It needs thousands of traces for the distribution averaged over misorientations, and "
    "many more per misorientation class; with fewer, the background removal amplifies the "
    "noise (the bootstrap σ per bin says by how much).",
    "Peaks at coherent twin planes are sharp, and their height depends on the bin size: "
    "compare MRD values only at one resolution.",
    "The background removal assumes that the wrong part of every great circle spreads like "
    "that of random planes; next to a strong peak the bins stay a little raised, so peaks "
    "look broader than they are.",
    "It assumes the section samples the boundaries without bias: a texture or a section "
    "through a non-random part of the sample biases it.",
)


def _num(value):
    return None if value is None or not math.isfinite(value) else float(value)


def distribution_document(results, *, settings: dict) -> dict:
    """The JSON document of ``plane_distribution.json`` (see its schema)."""
    out = []
    for d in results:
        entry = {
            "phase": int(d.phase),
            "misorientation": d.misorientation,
            "n_traces": int(d.n_traces),
            "n_sides": int(d.n_sides),
            "n_boundaries": int(d.n_boundaries),
            "resolution_deg": float(d.grid.resolution_deg),
            "weighting": d.weighting,
            "both_sides": bool(d.both_sides),
            "n_bootstrap": int(d.n_bootstrap),
            "note": d.note,
            "grid": d.grid.as_dict(),
            "peak": None,
            "mrd": None,
            "mrd_sigma": None,
            "accumulated_mrd": None,
        }
        if d.mrd is not None:
            entry["peak"] = {
                "normal_crystal": [float(v) for v in d.peak_normal_crystal],
                "indices": d.peak_indices,
                "offset_deg": _num(d.peak_offset_deg),
                "mrd": _num(d.peak_mrd),
                "mrd_sigma": _num(d.peak_mrd_sigma),
                "position_sigma_deg": _num(d.peak_position_sigma_deg),
            }
            entry["mrd"] = [float(v) for v in d.mrd]
            entry["mrd_sigma"] = [float(v) for v in d.mrd_sigma]
            entry["accumulated_mrd"] = [float(v) for v in d.accumulated_mrd]
        out.append(entry)
    return {
        "schema_version": SCHEMA_VERSION,
        "frame": "crystal frame C of each phase (conventions §4); normals up to sign",
        "method": {
            "name": "stereology of planar sections (Saylor, El-Dasher, Adams & Rohrer 2004)",
            "accumulation": "great circle perpendicular to each trace direction in each "
            "grain's crystal frame, every proper rotation of the Laue class applied, n ≡ -n",
            "background": "MRD = 1 + F^-1 (accumulated - 1), F the binned accumulation "
            "kernel (share of bin i in the circles of bin j's planes); with F approximated by "
            "self-share a plus a uniform rest it is Saylor's 1 + (accumulated - 1) / a",
            "uncertainty": "bootstrap over boundaries (grain pairs)",
            "caveats": list(CAVEATS),
        },
        "settings": settings,
        "distributions": out,
    }


def _figure_stem(d: PlaneDistribution) -> str:
    safe = "".join(ch if ch.isalnum() else "_" for ch in d.misorientation).strip("_")
    return f"stereogram_phase{d.phase}_{safe}"


def _write_figures(d, phase, out_dir: Path, projection: str):
    import matplotlib

    matplotlib.use("Agg", force=False)
    import io

    import matplotlib.pyplot as plt

    from ..report.figures import save_figure
    from .stereogram import plot_stereogram

    fig, ax = plt.subplots(figsize=(5.2, 4.6))
    try:
        plot_stereogram(d, phase, projection=projection, ax=ax)
        paths = save_figure(fig, out_dir / _figure_stem(d))
        buf = io.BytesIO()
        fig.savefig(buf, format="png", dpi=90, bbox_inches="tight")
    finally:
        plt.close(fig)
    return paths, buf.getvalue()


def _lines(results) -> list[str]:
    lines = []
    for d in results:
        head = (
            f"phase {d.phase}, {d.misorientation}: {d.n_traces} traces on "
            f"{d.n_boundaries} boundaries"
        )
        if d.mrd is None:
            lines.append(f"{head}. {d.note}")
        else:
            lines.append(
                f"{head}; peak {d.peak_mrd:.1f} ± {d.peak_mrd_sigma:.1f} MRD at "
                f"{d.peak_indices} ({d.peak_offset_deg:.1f}° from it; position σ "
                f"{d.peak_position_sigma_deg:.1f}°), {d.grid.resolution_deg:g}° bins, "
                f"{d.n_bootstrap} bootstrap resamples."
            )
    return lines


def _markdown(results, settings, figures) -> str:
    out = [
        "## Plane distribution from the section (stereology)",
        "",
        f"Projection: {settings['projection']}, upper hemisphere of the crystal frame seen from "
        "+Z_C (X_C right, Y_C up); MRD = multiples of a random distribution; "
        f"{settings['weighting']} weighting, "
        f"{'both grains of each trace' if settings['both_sides'] else 'grain a of each trace'}.",
        "",
    ]
    out += [f"- {line}" for line in _lines(results)]
    out.append("")
    for stem in figures:
        out += [f"![{stem}]({stem}.png)", ""]
    out += ["What this can and cannot say:", ""] + [f"- {c}" for c in CAVEATS] + [""]
    return "\n".join(out)


def _html(results, settings, pngs) -> str:
    esc = html.escape
    parts = [
        "<h2>Plane distribution from the section (stereology)</h2>",
        f"<p>Projection: {esc(settings['projection'])}, upper hemisphere of the crystal frame "
        "seen from +Z<sub>C</sub> (X<sub>C</sub> right, Y<sub>C</sub> up); MRD = multiples of "
        f"a random distribution; {esc(settings['weighting'])} weighting.</p>",
        "<ul>",
    ]
    parts += [f"<li>{esc(line)}</li>" for line in _lines(results)]
    parts.append("</ul>")
    for stem, png in pngs:
        data = base64.b64encode(png).decode("ascii")
        parts.append(f'<p><img alt="{esc(stem)}" src="data:image/png;base64,{data}"></p>')
    parts.append("<p><strong>What this can and cannot say.</strong></p><ul>")
    parts += [f"<li>{esc(c)}</li>" for c in CAVEATS]
    parts.append("</ul>")
    return "\n".join(parts)


def run_from_job(job, segments, grains) -> tuple[tuple[PlaneDistribution, ...], dict]:
    """The job's ``stereology`` block (defaults filled by the loader) applied to one map."""
    s = dict(job.raw["stereology"])
    results = plane_distribution(
        segments,
        grains,
        job.phases,
        classes=s["classes"],
        resolution_deg=s["resolution_deg"],
        min_traces=s["min_traces"],
        both_sides=s["both_sides"],
        weighting=s["weighting"],
        n_bootstrap=s["bootstrap"],
        sigma_criterion=job.planes["sigma_criterion"],
        rng=s["seed"],
    )
    return results, s


def write_stereology(results, phases, out_dir, *, settings: dict, standalone: bool) -> list:
    """Write plane_distribution.json and the stereograms; the report section too.

    With ``standalone`` the section becomes ``stereology.md`` and ``stereology.html``;
    otherwise it is added at the end of the run's ``report.md`` and ``report.html``
    (before the closing caveat line of the HTML page), when they exist.
    """
    from jsonschema import Draft202012Validator

    from ..io.schemas import load_schema
    from ..report.atomic import write_json_atomic, write_text_atomic

    out = Path(out_dir)
    doc = distribution_document(results, settings=settings)
    Draft202012Validator(load_schema("plane_distribution.schema.json")).validate(doc)
    files = [write_json_atomic(out / "plane_distribution.json", doc)]
    by_id = dict(Phases.from_records(phases))
    stems, pngs = [], []
    for d in results:
        if d.mrd is None:
            continue
        paths, png = _write_figures(d, by_id[d.phase], out, settings["projection"])
        files += paths
        stems.append(_figure_stem(d))
        pngs.append((_figure_stem(d), png))
    md = _markdown(results, settings, stems)
    page = _html(results, settings, pngs)
    if standalone:
        files.append(write_text_atomic(out / "stereology.md", "# Stereology\n\n" + md))
        files.append(
            write_text_atomic(
                out / "stereology.html",
                '<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8"><title>'
                "Stereology</title></head><body>\n" + page + "\n</body></html>\n",
            )
        )
        return files
    report_md, report_html = out / "report.md", out / "report.html"
    if report_md.exists():
        write_text_atomic(report_md, report_md.read_text(encoding="utf-8") + "\n" + md)
    if report_html.exists():
        text = report_html.read_text(encoding="utf-8")
        cut = text.rfind('<p class="caveat">')
        cut = cut if cut >= 0 else text.rfind("</body>")
        write_text_atomic(report_html, text[:cut] + page + "\n" + text[cut:])
    return files
