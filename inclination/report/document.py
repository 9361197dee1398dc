"""The run report: one self-contained HTML page and its Markdown twin.

The page carries the frame verdict in plain words first (it decides whether
any 3D conclusion stands), then the counts, the figure (embedded, so the file
can be mailed on its own) and the per-boundary table.
"""

from __future__ import annotations

import base64
import html
import os
from collections.abc import Sequence
from pathlib import Path

from .atomic import write_text_atomic
from .audit_block import audit_block_html, audit_block_markdown
from .columns import Column
from .features import features_section_html, features_section_markdown
from .tables import format_cell

__all__ = ["render_html", "render_markdown", "write_report"]

_REPORT_COLUMNS = (
    "boundary_id",
    "grain_a",
    "grain_b",
    "length_um",
    "trace_angle_deg",
    "misorientation_deg",
    "sigma",
    "plane_a",
    "plane_b",
    "identification",
    "predicted_dip_deg",
    "measured_dip_deg",
    "sense",
)

_CAVEAT = (
    "This report supports, and does not replace, a qualified analyst's judgement and the "
    "standards and codes of practice that apply to the part."
)


def _facts(summary: dict) -> list[tuple[str, str]]:
    counts = summary.get("counts", {})
    facts = [
        ("map", str(summary.get("provenance", {}).get("map", {}).get("path", ""))),
        ("map points", str(counts.get("map_points", ""))),
        ("grains", str(counts.get("grains", ""))),
        ("straight segments", str(counts.get("segments", ""))),
        ("segments long enough for planes", str(counts.get("segments_for_planes", ""))),
        ("Σ3 length fraction", _fmt(summary.get("sigma_length_fraction", {}).get("3"))),
    ]
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


def _fmt(value) -> str:
    if value is None:
        return ""
    if isinstance(value, float):
        return f"{value:.3f}"
    return str(value)


def _verdict_sentence(summary: dict) -> str:
    verdict = summary.get("frame_verdict")
    if not verdict:
        return "No section measured a dip direction, so the frame could not be checked."
    return str(verdict.get("sentence", verdict.get("verdict", "")))


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


def render_markdown(summary: dict, table: dict, columns: Sequence[Column]) -> str:
    """The report as Markdown text."""
    by_name = {c.name: c for c in columns}
    shown = [by_name[n] for n in _REPORT_COLUMNS if n in by_name]
    lines = [
        f"# {_md(summary.get('title', 'Boundary planes'))}",
        "",
        *audit_block_markdown(summary),
        f"**Frame:** {_md(_verdict_sentence(summary))}",
        "",
    ]
    lines += [f"- {k}: {_md(v)}" for k, v in _facts(summary)]
    lines += ["", "![boundaries](boundaries.png)", ""]
    lines += features_section_markdown(summary)
    lines.append("| " + " | ".join(c.name for c in shown) + " |")
    lines.append("|" + "|".join("---" for _ in shown) + "|")
    n = len(next(iter(table.values()))) if table else 0
    for i in range(n):
        lines.append("| " + " | ".join(_md(format_cell(table[c.name][i], c)) for c in shown) + " |")
    lines += ["", f"_{_CAVEAT}_", ""]
    return "\n".join(lines)


def render_html(
    summary: dict, table: dict, columns: Sequence[Column], *, figure_png: bytes | None = None
) -> str:
    """The report as one self-contained HTML page (the figure embedded as data)."""
    by_name = {c.name: c for c in columns}
    shown = [by_name[n] for n in _REPORT_COLUMNS if n in by_name]
    esc = html.escape
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        f"<title>{esc(summary.get('title', 'Boundary planes'))}</title>",
        "<style>body{font-family:sans-serif;max-width:70em;margin:2em auto;padding:0 1em;"
        "color:#222}table{border-collapse:collapse;font-size:0.85em}"
        "td,th{border-bottom:1px solid #ccc;padding:0.2em 0.5em;text-align:right}"
        "th{text-align:center}.verdict{border-left:0.4em solid #0072B2;padding:0.5em 1em;"
        "background:#f3f6fa}.caveat{font-size:0.85em;color:#555}</style></head><body>",
        f"<h1>{esc(summary.get('title', 'Boundary planes'))}</h1>",
        *audit_block_html(summary),
        f'<p class="verdict"><strong>Frame.</strong> {esc(_verdict_sentence(summary))}</p>',
        "<ul>",
    ]
    parts += [f"<li>{esc(k)}: {esc(v)}</li>" for k, v in _facts(summary)]
    parts.append("</ul>")
    if figure_png:
        data = base64.b64encode(figure_png).decode("ascii")
        parts.append(
            '<p><img alt="map with fitted boundary segments" style="max-width:100%" '
            f'src="data:image/png;base64,{data}"></p>'
        )
    parts += features_section_html(summary)
    parts.append(
        "<table><thead><tr>"
        + "".join(f"<th>{esc(c.name)}</th>" for c in shown)
        + "</tr></thead><tbody>"
    )
    n = len(next(iter(table.values()))) if table else 0
    for i in range(n):
        parts.append(
            "<tr>"
            + "".join(f"<td>{esc(format_cell(table[c.name][i], c))}</td>" for c in shown)
            + "</tr>"
        )
    parts += ["</tbody></table>", f'<p class="caveat">{esc(_CAVEAT)}</p>', "</body></html>"]
    return "\n".join(parts) + "\n"


def write_report(
    out_dir: str | os.PathLike,
    summary: dict,
    table: dict,
    columns: Sequence[Column],
    *,
    figure_png: bytes | None = None,
) -> list[Path]:
    """Write ``report.html`` and ``report.md`` into ``out_dir``; returns their paths."""
    out = Path(out_dir)
    return [
        write_text_atomic(
            out / "report.html", render_html(summary, table, columns, figure_png=figure_png)
        ),
        write_text_atomic(out / "report.md", render_markdown(summary, table, columns)),
    ]
