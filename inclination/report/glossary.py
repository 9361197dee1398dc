"""The glossary: what every table column and identification class means.

One text, generated from the column lists of :mod:`inclination.report.columns`,
goes into ``docs/glossary.md`` (a test checks the committed file equals a fresh
rendering) and into every report.
"""

from __future__ import annotations

from .columns import (
    BOUNDARY_COLUMNS,
    GRAIN_COLUMNS,
    PAPER_COLUMNS,
    SEGMENT_COLUMNS,
    header_text,
)
from .tables import glossary_entries

__all__ = ["ROUNDING_RULE", "TABLES", "glossary_markdown", "glossary_html"]

#: The rounding rule of the paper tables, as the reader is told it.
ROUNDING_RULE = (
    "Paper tables (boundaries.md, boundaries.tex, the report) round every value that has a "
    "standard uncertainty σ to that uncertainty: σ keeps two significant digits and the value "
    "is given to the same last digit, halves away from zero (common practice; ISO/IEC Guide "
    "98-3 §7.2.6). Examples: 63.132 ± 3.381 → 63.1 ± 3.4; 15.491 ± 0.5 → 15.49 ± 0.50; "
    "12.04 ± 0.996 → 12.0 ± 1.0. Predicted dips and all dip directions are given in whole "
    "degrees. CSV and JSON keep full precision."
)

#: The tables of the glossary: (title, file, columns).
TABLES = (
    ("Paper table", "boundaries.md, boundaries.tex, report", PAPER_COLUMNS),
    ("Boundaries", "boundaries.csv, boundaries.json", BOUNDARY_COLUMNS),
    ("Segments", "segments.csv, segments.json", SEGMENT_COLUMNS),
    ("Grains", "grains.csv", GRAIN_COLUMNS),
)


def glossary_markdown() -> str:
    """The glossary as Markdown (the text of ``docs/glossary.md``).

    Examples
    --------
    >>> glossary_markdown().splitlines()[0]
    '# Glossary'
    """
    lines = [
        "# Glossary",
        "",
        "<!-- Generated from inclination/report/columns.py by "
        "inclination.report.glossary.glossary_markdown(); do not edit by hand. -->",
        "",
        "Positions and in-plane angles are in the map's declared axes; trace angles from +x "
        "toward +y in [0, 180), azimuths in [0, 360); dip 0 parallel to the surface, 90 "
        "vertical (docs/conventions.md).",
        "",
        "## Rounding",
        "",
        ROUNDING_RULE,
        "",
    ]
    for title, files, columns in TABLES:
        lines += [f"## {title} ({files})", "", "| Header | Column | Meaning |", "|---|---|---|"]
        lines += [
            f"| {header_text(c)} | `{c.name}` | {c.description.replace('|', '/')} |"
            for c in columns
        ]
        lines.append("")
    lines += ["## Identification classes", "", "| Symbol | Class | Meaning |", "|---|---|---|"]
    for head, key, text in glossary_entries([]):
        lines.append(f"| {head.removeprefix('class ')} | `{key}` | {text} |")
    return "\n".join(lines) + "\n"


def glossary_html() -> list[str]:
    """The glossary as HTML lines: the rounding rule, then one definition list.

    Examples
    --------
    >>> glossary_html()[0]
    '<section id="glossary"><h2>Glossary</h2>'
    """
    import html

    out = ['<section id="glossary"><h2>Glossary</h2>', f"<p>{html.escape(ROUNDING_RULE)}</p>"]
    out.append("<dl>")
    for head, key, text in glossary_entries([c for _, _, c in TABLES]):
        out.append(
            f"<dt>{html.escape(head)} <code>{html.escape(key)}</code></dt>"
            f"<dd>{html.escape(text)}</dd>"
        )
    out += ["</dl>", "</section>"]
    return out
