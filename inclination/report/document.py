"""The run report: one self-contained HTML page and its Markdown twin.

Order of the page: the frame verdict first (it decides whether any 3D conclusion
stands; a wrong or doubtful frame is styled as a warning), then the settings and
methods, the counts, the per-section results, the figures (embedded, so the file
can be mailed on its own), the paper table, the glossary and the provenance.
Both pages are written from ``summary.json``, the boundaries table and the
figure files of the run folder, so ``inclination report`` can rebuild them.
"""

from __future__ import annotations

import base64
import html
import os
from pathlib import Path

from ..io.limits import check_regular_file
from .atomic import write_text_atomic
from .audit_block import audit_block_html, audit_block_markdown
from .faces import face_images_section_html, face_images_section_markdown
from .features import features_section_html, features_section_markdown
from .glossary import ROUNDING_RULE, glossary_html, glossary_markdown
from .tables import paper_html, paper_legend, paper_markdown, paper_table

__all__ = ["VERDICT_STYLES", "verdict_style", "render_html", "render_markdown", "write_report"]

#: The verdict box's style class by frame verdict (closed set; no verdict: ``neutral``).
VERDICT_STYLES = {
    "as_declared": "ok",
    "turned_180_about_normal": "warning",
    "inconsistent": "warning",
    "undecided": "neutral",
}

_CAVEAT = (
    "This report supports, and does not replace, a qualified analyst's judgement and the "
    "standards and codes of practice that apply to the part."
)

_CSS = (
    "body{font-family:system-ui,sans-serif;max-width:72em;margin:2em auto;padding:0 1em;"
    "color:#1b1b1b;line-height:1.4}h1{font-weight:600}h2{border-bottom:2px solid #ddd;"
    "padding-bottom:0.15em;margin-top:1.6em}table{border-collapse:collapse;font-size:0.85em}"
    "td,th{border-bottom:1px solid #ccc;padding:0.2em 0.5em;text-align:right}"
    "th{text-align:center;background:#f4f4f4}.bar{text-decoration:overline}"
    ".verdict{border-left:0.5em solid;padding:0.6em 1em;margin:1em 0}"
    ".verdict-ok{border-color:#009E73;background:#eef8f4}"
    ".verdict-warning{border-color:#D55E00;background:#fdf0e8;font-weight:600}"
    ".verdict-warning::before{content:'\\26A0  Warning: ';color:#D55E00}"
    ".verdict-neutral{border-color:#888;background:#f3f3f3}"
    "figure{margin:1em 0}figcaption{font-size:0.85em;color:#444}"
    "dt{font-weight:600;margin-top:0.4em}dd{margin-left:1.5em}"
    ".caveat{font-size:0.85em;color:#555}code{font-size:0.9em}"
)


def verdict_style(summary: dict) -> str:
    """The style class of the verdict box: ``ok``, ``warning`` or ``neutral``.

    Examples
    --------
    >>> verdict_style({"frame_verdict": {"verdict": "turned_180_about_normal"}})
    'warning'
    >>> verdict_style({})
    'neutral'
    """
    verdict = (summary.get("frame_verdict") or {}).get("verdict")
    return VERDICT_STYLES.get(verdict, "neutral")


def _verdict_sentence(summary: dict) -> str:
    verdict = summary.get("frame_verdict")
    if not verdict:
        return "No section measured a dip direction, so the frame could not be checked."
    return str(verdict.get("sentence", verdict.get("verdict", "")))


def _fmt(value) -> str:
    if value is None:
        return ""
    if isinstance(value, float):
        return f"{value:.3f}"
    return str(value)


def _facts(summary: dict) -> list[tuple[str, str]]:
    counts = summary.get("counts", {})
    facts = [
        ("map", str(summary.get("provenance", {}).get("map", {}).get("source_path", ""))),
        ("map points", str(counts.get("map_points", ""))),
        ("grains", str(counts.get("grains", ""))),
        ("straight segments", str(counts.get("segments", ""))),
        ("segments long enough for planes", str(counts.get("segments_for_planes", ""))),
        ("Σ3 length fraction", _fmt(summary.get("sigma_length_fraction", {}).get("3"))),
    ]
    ident = summary.get("identified")
    if ident:
        facts.append(
            ("identification", ", ".join(f"{k.replace('_', ' ')} {v}" for k, v in ident.items()))
        )
    twin = summary.get("twin_test") or {}
    if twin.get("n_sigma3"):
        facts.append(
            (
                "Σ3 segments passing the coherent-twin trace test",
                f"{twin.get('passed', 0)} of {twin.get('n_sigma3')} "
                f"({_fmt(twin.get('fraction_by_count'))}; length-weighted "
                f"{_fmt(twin.get('fraction_by_length'))})",
            )
        )
    return facts


def _settings(summary: dict) -> list[tuple[str, str]]:
    """Settings and methods as (name, value) lines, from the job as it was run."""
    job = summary.get("job") or {}
    out = []
    for phase in job.get("phases", []):
        out.append(
            (
                f"phase {phase.get('id')} ({phase.get('name', '')}, Laue {phase.get('laue')})",
                "candidate families " + ", ".join(phase.get("families", []) or ["default"]),
            )
        )
    for block in ("grains", "traces", "planes", "sections_settings", "compare", "verdict"):
        values = job.get(block)
        if isinstance(values, dict):
            scalars = [f"{k} = {v}" for k, v in values.items() if not isinstance(v, dict | list)]
            if scalars:
                out.append((block, "; ".join(scalars)))
    for key in ("blunder_rate",):
        if key in job:
            out.append((key, str(job[key])))
    conv = summary.get("conventions") or {}
    out.append(
        (
            "conventions",
            f"sample frame {conv.get('sample_frame', '')}; reported in "
            f"{conv.get('reported_in', '')}; dip {conv.get('dip', '')}.",
        )
    )
    out.append(("orientations", str(conv.get("euler", ""))))
    out.append(("rounding", ROUNDING_RULE))
    return out


def _section_lines(summary: dict) -> list[str]:
    lines = []
    for note in summary.get("sections", []):
        status = note.get("status", {})
        total = sum(status.values())
        text = (
            f"{note.get('name')} ({note.get('kind')}): {status.get('measured', 0)} of {total} "
            "entries measured"
        )
        others = [f"{v} {k.replace('_', ' ')}" for k, v in status.items() if k != "measured"]
        if others:
            text += " (" + ", ".join(others) + ")"
        reg = note.get("registration")
        if reg:
            text += (
                f"; registration by {reg.get('method')}: shift ({reg['shift_x_um']:.2f}, "
                f"{reg['shift_y_um']:.2f}) µm, rotation {reg['rotation_deg']:.2f}°, residual "
                f"{reg['residual_um']:.2f} µm over {reg['n_points']} points"
            )
        if note.get("depth_um") is not None:
            text += f"; depth {note['depth_um']:g} ± {note.get('depth_sigma_um', 0):g} µm"
        for warning in note.get("warnings", []):
            text += f"; warning: {warning}"
        lines.append(text)
    return lines


def _md(text) -> str:
    """Text safe inside Markdown: raw HTML (from an edited run folder) shown, not run."""
    return (
        str(text)
        .replace("&", "&amp;")
        .replace("<", "&lt;")
        .replace(">", "&gt;")
        .replace("|", "\\|")
        .replace("\n", " ")
    )


def _provenance(summary: dict) -> list[tuple[str, str]]:
    prov = summary.get("provenance", {})
    tool = summary.get("tool", {})
    out = [
        (
            "tool",
            f"{tool.get('name', '')} {tool.get('version', '')} (Python "
            f"{tool.get('python', '')}, numpy {tool.get('numpy', '')})",
        ),
        ("job file", str(prov.get("job_file", ""))),
        ("map", str(prov.get("map", {}).get("source_path", ""))),
        ("map sha256", str(prov.get("map", {}).get("sha256", ""))),
    ]
    if prov.get("output_folder"):
        out.append(("results", str(prov["output_folder"])))
    return out


def render_markdown(summary: dict, table: dict) -> str:
    """The report as Markdown text (figures linked as files beside it)."""
    style = verdict_style(summary)
    lines = [f"# {_md(summary.get('title', 'Boundary planes'))}", ""]
    lines += audit_block_markdown(summary)
    prefix = "**Warning — frame:**" if style == "warning" else "**Frame:**"
    lines += [f"> {prefix} {_md(_verdict_sentence(summary))}", "", "## Settings and methods", ""]
    lines += [f"- {k}: {_md(v)}" for k, v in _settings(summary)]
    lines += ["", "## Counts", ""] + [f"- {k}: {_md(v)}" for k, v in _facts(summary)]
    sections = _section_lines(summary)
    if sections:
        lines += ["", "## Sections", ""] + [f"- {_md(s)}" for s in sections]
    lines += ["", "## Figures", ""]
    for f in summary.get("figures", []):
        lines += [
            f"![{f['title']}]({f['file']})",
            "",
            f"_{f['title']}_ (vector: {f['vector']})",
            "",
        ]
    lines += features_section_markdown(summary)
    lines += face_images_section_markdown(summary)
    paper = paper_table(table)
    lines += [
        "## Boundaries",
        "",
        f"{paper.n_rows} of {paper.n_total} boundaries: {paper.rule}; "
        "the full table is boundaries.csv / boundaries.json.",
        "",
    ]
    lines += paper_markdown(paper) + ["", paper_legend(), ""]
    lines += [glossary_markdown().replace("# Glossary", "## Glossary", 1), "## Provenance", ""]
    lines += [f"- {k}: {_md(v)}" for k, v in _provenance(summary)]
    lines += ["", f"_{_CAVEAT}_", ""]
    return "\n".join(lines)


def render_html(summary: dict, table: dict, *, figures=(), face_overlays=None) -> str:
    """The report as one self-contained HTML page.

    ``figures`` is a sequence of ``(title, png_bytes)``, embedded as data;
    ``face_overlays`` maps each face image's overlay file (as ``summary`` names it)
    to its PNG bytes, embedded too (a missing one is linked by its path).

    Examples
    --------
    >>> page = render_html({"frame_verdict": {"verdict": "inconsistent", "sentence": "Mixed."}},
    ...                    {k: [] for k in ("boundary_id", "identification", "measured_dip_deg",
    ...                                     "length_um")})
    >>> 'class="verdict verdict-warning" data-verdict="inconsistent"' in page
    True
    """
    esc = html.escape
    verdict = (summary.get("frame_verdict") or {}).get("verdict", "none")
    title = esc(summary.get("title", "Boundary planes"))
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        f"<title>{title}</title>",
        f"<style>{_CSS}</style></head><body>",
        f"<h1>{title}</h1>",
        *audit_block_html(summary),
        f'<div id="verdict" class="verdict verdict-{verdict_style(summary)}" '
        f'data-verdict="{esc(verdict)}"><strong>Frame.</strong> '
        f"{esc(_verdict_sentence(summary))}</div>",
        '<section id="settings"><h2>Settings and methods</h2><ul>',
    ]
    parts += [f"<li><strong>{esc(k)}</strong>: {esc(v)}</li>" for k, v in _settings(summary)]
    parts += ["</ul></section>", '<section id="counts"><h2>Counts</h2><ul>']
    parts += [f"<li>{esc(k)}: {esc(v)}</li>" for k, v in _facts(summary)]
    parts.append("</ul></section>")
    sections = _section_lines(summary)
    if sections:
        parts.append('<section id="sections"><h2>Sections</h2><ul>')
        parts += [f"<li>{esc(s)}</li>" for s in sections]
        parts.append("</ul></section>")
    if figures:
        parts.append('<section id="figures"><h2>Figures</h2>')
        for caption, png in figures:
            data = base64.b64encode(png).decode("ascii")
            parts.append(
                f'<figure><img alt="{esc(caption)}" style="max-width:100%" '
                f'src="data:image/png;base64,{data}"><figcaption>{esc(caption)}</figcaption>'
                "</figure>"
            )
        parts.append("</section>")
    parts += features_section_html(summary)
    parts += face_images_section_html(summary, overlays=face_overlays)
    paper = paper_table(table)
    parts += [
        '<section id="boundaries"><h2>Boundaries</h2>',
        f"<p>{paper.n_rows} of {paper.n_total} boundaries: {esc(paper.rule)}; the full table "
        "is boundaries.csv / boundaries.json.</p>",
    ]
    parts += paper_html(paper)
    parts += [f"<p>{esc(paper_legend())}</p>", "</section>"]
    parts += glossary_html()
    parts.append('<section id="provenance"><h2>Provenance</h2><ul>')
    parts += [f"<li>{esc(k)}: <code>{esc(v)}</code></li>" for k, v in _provenance(summary)]
    parts += ["</ul></section>", f'<p class="caveat">{esc(_CAVEAT)}</p>', "</body></html>"]
    return "\n".join(parts) + "\n"


def write_report(out_dir, summary: dict, table: dict):
    """Write ``report.html`` and ``report.md`` into ``out_dir``; returns their paths.

    The figures listed in ``summary["figures"]`` and the face overlays of
    ``summary["face_images"]`` are read from ``out_dir`` and embedded; a listed
    figure that is missing is left out of the HTML page.
    """
    out = Path(out_dir)
    figures = []
    for f in summary.get("figures", []):
        # A figure is a file of this folder: an edited summary cannot point elsewhere,
        # and a FIFO or device in its place is refused rather than read.
        path = out / Path(str(f["file"])).name
        if os.path.lexists(path):
            check_regular_file(path, kind="run")
            figures.append((f["title"], path.read_bytes()))
    overlays = {}
    for f in summary.get("face_images") or []:
        # The same rule for the face overlays, files of this folder's sections/.
        path = out / "sections" / Path(str(f["overlay"])).name
        if os.path.lexists(path):
            check_regular_file(path, kind="run")
            overlays[f["overlay"]] = path.read_bytes()
    page = render_html(summary, table, figures=figures, face_overlays=overlays)
    return [
        write_text_atomic(out / "report.html", page),
        write_text_atomic(out / "report.md", render_markdown(summary, table)),
    ]
