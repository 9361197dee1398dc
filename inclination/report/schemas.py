"""JSON Schemas of the output tables, generated from the column definitions.

The column lists in :mod:`inclination.report.columns` are the single source;
``scripts/make_schemas.py`` writes these schemas into ``schemas/`` and a test
checks that the committed files equal a fresh rendering, so they cannot drift.
"""

from __future__ import annotations

import json
from collections.abc import Sequence

from .columns import BOUNDARY_COLUMNS, GRAIN_COLUMNS, SEGMENT_COLUMNS, Column

__all__ = ["SCHEMA_VERSION", "SCHEMAS", "render", "table_schema"]

SCHEMA_VERSION = "1.0"
_INDICES = r"^[\(\[\{<]-?\d+( -?\d+){2,3}[\)\]\}>]$"
_ENUMS = {
    "sense": ["agrees", "opposite", "undecided"],
    "dip_source": ["cross-section", "cross-section image", "serial-section", "serial-stack"],
    "identification": ["coherent_twin", "identified", "ambiguous", "none"],
    "twin_test": ["pass", "fail"],
    "measured_coherent_twin": ["yes", "no", "cannot_tell"],
}
_PATTERNS = {
    "plane_a": _INDICES,
    "plane_b": _INDICES,
    "measured_plane_a": _INDICES,
    "measured_plane_b": _INDICES,
    "axis_a": _INDICES,
    "sigma": r"^\d+[a-z]?$",
    "wkt": r"^LINESTRING \(",
}
_RANGES = {
    "trace_angle_deg": (0, 180, True),
    "predicted_dip_azimuth_deg": (0, 360, True),
    "measured_dip_azimuth_deg": (0, 360, True),
    "predicted_dip_deg": (0, 90, False),
    "predicted_dip_min_deg": (0, 90, False),
    "predicted_dip_max_deg": (0, 90, False),
    "measured_dip_deg": (0, 90, False),
    "misorientation_deg": (0, 180, False),
    "chance_fit": (0, 1, False),
}


def column_schema(c: Column) -> dict:
    if c.kind == "int":
        s = {"type": ["integer", "null"]}
    elif c.kind == "float":
        s = {"type": ["number", "null"]}
        if c.name in _RANGES:
            lo, hi, exclusive = _RANGES[c.name]
            s["minimum"] = lo
            s["exclusiveMaximum" if exclusive else "maximum"] = hi
    elif c.kind == "bool":
        s = {"type": "boolean"}
    else:
        s = {"type": ["string", "null"]}
        if c.name in _ENUMS:
            s = {"enum": [*_ENUMS[c.name], None]}
        elif c.name in _PATTERNS:
            s["pattern"] = _PATTERNS[c.name]
    s["description"] = c.description
    return s


def table_schema(title: str, name: str, columns: Sequence[Column]) -> dict:
    return {
        "$schema": "https://json-schema.org/draft/2020-12/schema",
        "$id": f"inclination/{name}.schema.json",
        "title": title,
        "type": "object",
        "required": ["schema_version", "meta", "columns", "rows"],
        "properties": {
            "schema_version": {"const": SCHEMA_VERSION},
            "meta": {"type": "object"},
            "columns": {"type": "array", "items": {"type": "object", "required": ["name", "kind"]}},
            "rows": {
                "type": "array",
                "items": {
                    "type": "object",
                    "required": [c.name for c in columns],
                    "additionalProperties": False,
                    "properties": {c.name: column_schema(c) for c in columns},
                },
            },
        },
    }


SCHEMAS = {
    "boundaries": ("Per-boundary table", BOUNDARY_COLUMNS),
    "segments": ("Straight boundary segments", SEGMENT_COLUMNS),
    "grains": ("Grains", GRAIN_COLUMNS),
}


def render(name: str) -> str:
    """The schema named ``name`` as JSON text.

    Examples
    --------
    >>> render("grains").startswith("{")
    True
    """
    title, columns = SCHEMAS[name]
    return json.dumps(table_schema(title, name, columns), indent=2, ensure_ascii=False) + "\n"
