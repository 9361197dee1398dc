"""Write docs/job-file.md, the job file's field reference, from schemas/job.schema.json.

Run after changing the job schema: python scripts/make_job_doc.py
(tests/test_job_doc.py fails when the page and the schema drift apart).
Every field gets its type, default and an example; the examples come from the
two worked examples below, which the test also validates as jobs.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
DOC = ROOT / "docs" / "job-file.md"

_PHASE = {
    "id": 1,
    "name": "austenite",
    "laue": "m-3m",
    "lattice": {"a": 3.59, "b": 3.59, "c": 3.59, "alpha": 90, "beta": 90, "gamma": 90},
    "families": ["{1 1 1}", "{1 0 0}", "{1 1 0}"],
    "slip_systems": ["fcc"],
}

#: A surface map with two milled cross-sections (conventions §7), traces inside grains
#: and the stereology block (coupon LK-7, invented).
CROSS_SECTION_EXAMPLE = {
    "schema_version": 1,
    "description": "Coupon LK-7 (invented): which straight boundaries are coherent twins?",
    "notes": ["Written by 'inclination init'; axes checked against the stage image."],
    "phases": [_PHASE],
    "map": {
        "path": "surface.csv",
        "format": "csv",
        "angles": "deg",
        "step_um": 0.5,
        "grid": "square",
        "axes": {"x": "right", "y": "down"},
        "data_frame_rotation": "identity",
        "columns": {
            "x_um": "X",
            "y_um": "Y",
            "phi1": "Euler1",
            "Phi": "Euler2",
            "phi2": "Euler3",
            "phase": "Phase",
        },
        "delimiter": ",",
    },
    "grains": {
        "threshold_deg": 5,
        "min_pixels": 8,
        "small_grains": "merge",
        "fill_isolated": False,
        "low_angle_deg": 2,
        "subgrain_network": False,
    },
    "traces": {"min_length_um": 5, "tolerance_um": 0.75},
    "planes": {"k": 2, "floor_deg": 1, "max_tolerance_deg": 5, "sigma_criterion": "brandon"},
    "sections": [
        {
            "kind": "cross-section",
            "name": "trench A",
            "line_um": [[10.0, 42.0], [190.0, 42.0]],
            "viewer_at_um": [100.0, 48.0],
            "imaging_tilt_deg": 52,
            "face_inclination_deg": 90,
            "match_tolerance_um": 1.0,
            "boundaries": [
                {"along_um": 23.4, "image_angle_deg": 61.0, "descends": "left",
                 "angle_sigma_deg": 1},
                {"along_um": 57.9, "image_angle_deg": 35.5, "descends": "right"},
            ],
        }
    ],
    "features": {
        "traces": [
            {"at_um": [55.0, 30.0], "trace_angle_deg": 42.0, "kind": "slip",
             "angle_sigma_deg": 0.8},
            {"line_um": [[80.0, 60.0], [92.0, 71.0]], "kind": "twin"},
        ],
        "angle_sigma_deg": 0.5,
        "loading_direction": [1, 0, 0],
        "families": ["{1 1 1}"],
    },
    "stereology": {
        "classes": ["all", "sigma3", {"axis": [1, 1, 1], "angle_deg": 60, "tolerance_deg": 8.66,
                                      "name": "twin"}],
        "resolution_deg": 10,
        "min_traces": 1000,
        "both_sides": True,
        "weighting": "length",
        "bootstrap": 200,
        "projection": "stereographic",
        "seed": 0,
    },
}

#: A surface map (npz) with a serial section measured by Vickers diagonals and
#: registered by fiducial marks (conventions §8), and a hexagonal-grid HDF5 map.
SERIAL_SECTION_EXAMPLE = {
    "schema_version": 1,
    "description": "Coupon LK-7 (invented): 5 µm removed by polishing between two maps.",
    "phases": [
        {**_PHASE, "families": ["{1 1 1}"]},
        {
            "id": 2,
            "name": "alpha-Ti",
            "laue": "6/mmm",
            "lattice": {"a": 2.951, "b": 2.951, "c": 4.684, "alpha": 90, "beta": 90,
                        "gamma": 120},
            "setting": "x_parallel_a",
            "families": ["{1 0 -1 2}"],
        },
    ],
    "map": {
        "path": "surface.npz",
        "format": "npz",
        "angles": "deg",
        "step_x_um": 0.5,
        "step_y_um": 0.5,
        "grid": "square",
        "axes": {"x": "right", "y": "up"},
        "data_frame_rotation": {"axis": [0, 0, 1], "angle_deg": 180},
    },
    "sections": [
        {
            "kind": "serial",
            "name": "after polishing",
            "map": {
                "path": "serial.h5",
                "format": "hdf5",
                "angles": "rad",
                "step_um": 0.5,
                "grid": "hexagonal",
                "axes": {"x": "right", "y": "up"},
                "datasets": {
                    "euler": "scan/euler",
                    "phase": "scan/phase",
                    "x": "scan/x",
                    "y": "scan/y",
                    "quality": {"ci": "scan/ci"},
                },
            },
            "indent": {"diagonal_before_um": 70.0, "diagonal_after_um": 35.0},
            "depth_sigma_um": 0.3,
            "fiducials": [
                {"surface_um": [12.0, 8.0], "section_um": [12.6, 7.1]},
                {"surface_um": [180.0, 9.5], "section_um": [180.4, 8.8]},
                {"surface_um": [95.0, 140.0], "section_um": [95.9, 139.0]},
            ],
        }
    ],
}

#: Examples of fields the worked examples leave out (other branches of a choice).
EXTRA_EXAMPLES = {
    "map.sidecar": "surface.tif.json",
    "map.storage_options": {"anon": True},
    "tiles": {"tile_px": 2048, "memory_mib": 6144},
    "tiles.tile_px": 2048,
    "tiles.memory_mib": 6144,
    "sections[serial].depth_um": 5.0,
    "sections[cross-section].image": {
        "path": "trench_a.tif",
        "pixel_um": 0.05,
        "line_start_px": [112, 40],
    },
    "sections[cross-section].image.path": "trench_a.tif",
    "sections[cross-section].image.pixel_um": 0.05,
    "sections[cross-section].image.line_start_px": [112, 40],
    "sections[cross-section].image.surface_row": 38,
    "sections[cross-section].image.rotation_deg": 0.0,
    "sections[cross-section].image.depth_um": 6.0,
}


def _resolve(node, root):
    while isinstance(node, dict) and "$ref" in node:
        target = root
        for part in node["$ref"].lstrip("#/").split("/"):
            target = target[part]
        node = {**target, **{k: v for k, v in node.items() if k != "$ref"}}
    return node


def _type_text(node, root) -> str:
    node = _resolve(node, root)
    if "const" in node:
        return f"`{json.dumps(node['const'])}`"
    if "enum" in node:
        return "one of " + ", ".join(f"`{json.dumps(v)}`" for v in node["enum"])
    if "oneOf" in node and "type" not in node:
        parts = [_type_text(s, root) for s in node["oneOf"] if set(s) != {"required"}]
        if parts:
            return " or ".join(parts)
    kind = node.get("type", "any")
    kinds = kind if isinstance(kind, list) else [kind]
    words = []
    for k in kinds:
        if k == "array":
            item = node.get("items") or (node.get("prefixItems") or [{}])[0]
            n = ""
            if node.get("minItems") == node.get("maxItems") and "minItems" in node:
                n = f"{node['minItems']} × "
            words.append(f"array of {n}{_type_text(item, root)}")
        elif k == "object" and "additionalProperties" in node and isinstance(
            node["additionalProperties"], dict
        ):
            words.append(f"object of {_type_text(node['additionalProperties'], root)}")
        else:
            words.append(k)
    text = " or ".join(words)
    bounds = []
    for key, sign in (("minimum", "≥"), ("exclusiveMinimum", ">"), ("maximum", "≤"),
                      ("exclusiveMaximum", "<")):
        if key in node:
            bounds.append(f"{sign} {node[key]}")
    if node.get("pattern"):
        bounds.append(f"matching `{node['pattern']}`")
    return text + (f" ({', '.join(bounds)})" if bounds else "")


def _lookup(example, parts):
    """Value at a field path in an example job; list steps take the first item that has it."""
    if not parts:
        return example
    head, rest = parts[0], parts[1:]
    if isinstance(example, list):
        for item in example:
            found = _lookup(item, parts)
            if found is not _MISSING:
                return found
        return _MISSING
    if isinstance(example, dict) and head in example:
        return _lookup(example[head], rest)
    return _MISSING


_MISSING = object()


def _example(name, parts, node, root):
    if name in EXTRA_EXAMPLES:
        return EXTRA_EXAMPLES[name]
    # A section's map is a map too: its fields are examples of the surface map's.
    tries = [parts] + ([["sections", *parts]] if parts[:1] == ["map"] else [])
    for ex in (CROSS_SECTION_EXAMPLE, SERIAL_SECTION_EXAMPLE):
        for path in tries:
            found = _lookup(_filter_kind(ex, name), path)
            if name.endswith("]") and isinstance(found, list):
                found = found[0] if found else _MISSING
            if found is not _MISSING:
                return found
    node = _resolve(node, root)
    if "default" in node:
        return node["default"]
    if "enum" in node:
        return node["enum"][0]
    raise KeyError(f"no example for {name}: add one to the worked examples or EXTRA_EXAMPLES")


def _filter_kind(example, name):
    """Only sections of the kind the field belongs to."""
    if "[cross-section]" in name or "[serial]" in name:
        kind = "cross-section" if "[cross-section]" in name else "serial"
        return {**example, "sections": [s for s in example.get("sections", [])
                                        if s["kind"] == kind]}
    return example


def _short(value) -> str:
    text = json.dumps(value, ensure_ascii=False)
    return text if len(text) <= 70 else text[:67] + "…"


def _rows(node, root, name, parts, required, out):
    if isinstance(node, dict) and node.get("$ref") == "#/$defs/map" and name != "map":
        example = _short(_example(name, parts, node, root))
        out.append((name, "object: a map, the same fields as `map`", "required" if required
                    else "—", example, "The section's own map file and how to read it."))
        return
    node = _resolve(node, root)
    default = f"`{_short(node['default'])}`" if "default" in node else (
        "required" if required else "—")
    desc = " ".join(node.get("description", "").split()).replace("|", "\\|")
    out.append((name, _type_text(node, root), default, _short(_example(name, parts, node, root)),
                desc))
    if node.get("type") == "object" or "properties" in node:
        req = set(node.get("required", ()))
        for key, sub in node.get("properties", {}).items():
            if name.endswith("]") and key == "kind":
                continue
            _rows(sub, root, f"{name}.{key}", [*parts, key], key in req, out)
    items = node.get("items")
    if isinstance(items, dict):
        items = _resolve(items, root)
        if "properties" in items and items.get("type") == "object":
            req = set(items.get("required", ()))
            for key, sub in items["properties"].items():
                _rows(sub, root, f"{name}[].{key}", [*parts, key], key in req, out)


def _table(rows) -> list[str]:
    lines = ["| field | type | default | example | description |", "|---|---|---|---|---|"]
    for name, kind, default, example, desc in rows:
        lines.append(f"| `{name}` | {kind} | {default} | `{example}` | {desc} |")
    return lines


def render(schema: dict) -> str:
    """The page's Markdown from the parsed schema."""
    root = schema
    top = schema["properties"]
    req = set(schema["required"])
    lines = [
        "# The job file",
        "",
        "<!-- Generated by scripts/make_job_doc.py from schemas/job.schema.json; do not edit. -->",
        "",
        " ".join(schema["description"].split()),
        "",
        "Start from `inclination init MAP` (it recognises the map's columns or datasets, the "
        "angle unit, the grid, the step and the phases, and leaves `FILL-IN` placeholders for "
        "what only you can decide: the axes, the data frame and the phases). Frames and signs: "
        "[conventions](conventions.md). A field marked required must be given; every other "
        "field takes its default when left out.",
        "",
    ]
    blocks = [
        ("Top level", [k for k in top if k not in ("map", "grains", "traces", "planes",
                                                    "sections", "features", "stereology",
                                                    "phases")]),
    ]
    rows = []
    for key in blocks[0][1]:
        _rows(top[key], root, key, [key], key in req, rows)
    lines += ["## Top level", "", *_table(rows), ""]
    sections = [
        ("phases", "Phases (`phases[]`)", top["phases"], "phases"),
        ("map", "The map (`map`)", top["map"], "map"),
        ("grains", "Grains (`grains`)", top["grains"], "grains"),
        ("traces", "Traces (`traces`)", top["traces"], "traces"),
        ("planes", "Planes (`planes`)", top["planes"], "planes"),
    ]
    for key, title, node, name in sections:
        rows = []
        _rows(node, root, name, [key], key in req, rows)
        lines += [f"## {title}", "", *_table(rows), ""]
    for kind, ref in (("cross-section", "cross_section"), ("serial", "serial_section")):
        rows = []
        _rows(root["$defs"][ref], root, f"sections[{kind}]", ["sections"], False, rows)
        lines += [f"## Sections: {kind} (`sections[]` with `\"kind\": \"{kind}\"`)", "",
                  *_table(rows), ""]
    for key, title in (("features", "Traces inside grains (`features`)"),
                       ("stereology", "Stereology (`stereology`)")):
        rows = []
        _rows(top[key], root, key, [key], False, rows)
        lines += [f"## {title}", "", *_table(rows), ""]
    lines += [
        "## Worked example: a cross-section",
        "",
        "A CSV map with renamed columns, one milled trench imaged at 52° tilt, two traces "
        "inside grains and the stereology block.",
        "",
        "```json",
        json.dumps(CROSS_SECTION_EXAMPLE, indent=2, ensure_ascii=False),
        "```",
        "",
        "## Worked example: a serial section with fiducials and Vickers diagonals",
        "",
        "The layer removed is measured by a Vickers indent's diagonals (depth = (before − "
        "after) / 7.0, conventions §8) and the second map, an HDF5 file on a hexagonal grid, is "
        "registered to the first by three fiducial marks.",
        "",
        "```json",
        json.dumps(SERIAL_SECTION_EXAMPLE, indent=2, ensure_ascii=False),
        "```",
        "",
    ]
    return "\n".join(lines)


def main() -> int:
    sys.path.insert(0, str(ROOT))
    from inclination.io.schemas import load_schema

    DOC.write_text(render(load_schema("job.schema.json")), encoding="utf-8")
    print(DOC.relative_to(ROOT))
    return 0


if __name__ == "__main__":
    sys.exit(main())
