"""docs/job-file.md against schemas/job.schema.json, and its worked examples as jobs."""

from __future__ import annotations

import importlib.util
from pathlib import Path

import pytest

from inclination.cli import main
from inclination.io.job import job_from_dict
from inclination.io.schemas import load_schema

ROOT = Path(__file__).resolve().parents[1]


def _script():
    spec = importlib.util.spec_from_file_location("make_job_doc", ROOT / "scripts" / "make_job_doc.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def test_page_is_the_schema_rendered():
    page = (ROOT / "docs" / "job-file.md").read_text(encoding="utf-8")
    assert page == _script().render(load_schema("job.schema.json")), (
        "docs/job-file.md has drifted from the schema: run python scripts/make_job_doc.py"
    )


def _fields(node, root, prefix, out):
    """Every property path of the schema, as the page names it (independent walk)."""
    while "$ref" in node:
        ref = node["$ref"].split("/")[-1]
        if ref == "map" and prefix != "map":
            out.add(prefix)
            return
        node = {**root["$defs"][ref], **{k: v for k, v in node.items() if k != "$ref"}}
    out.add(prefix)
    for key, sub in node.get("properties", {}).items():
        if not (prefix.endswith("]") and key == "kind"):
            _fields(sub, root, f"{prefix}.{key}", out)
    items = node.get("items")
    if isinstance(items, dict):
        while "$ref" in items:
            items = root["$defs"][items["$ref"].split("/")[-1]]
        for key, sub in items.get("properties", {}).items() if items.get("type") == "object" else ():
            _fields(sub, root, f"{prefix}[].{key}", out)


def test_every_field_has_a_row_with_type_default_and_example():
    schema = load_schema("job.schema.json")
    names = set()
    for key, node in schema["properties"].items():
        if key != "sections":
            _fields(node, schema, key, names)
    for kind, ref in (("cross-section", "cross_section"), ("serial", "serial_section")):
        _fields(schema["$defs"][ref], schema, f"sections[{kind}]", names)
    page = (ROOT / "docs" / "job-file.md").read_text(encoding="utf-8")
    rows = {line.split("|")[1].strip().strip("`"): line for line in page.splitlines()
            if line.startswith("| `")}
    assert names - set(rows) == set()
    for name in names:
        cells = [c.strip() for c in rows[name].split("|")[1:-1]]
        assert len(cells) == 5 and all(cells[:4]), name


@pytest.mark.parametrize("which", ["CROSS_SECTION_EXAMPLE", "SERIAL_SECTION_EXAMPLE"])
def test_worked_examples_are_valid_jobs(tmp_path, which):
    for name in ("surface.csv", "surface.npz", "serial.h5"):
        (tmp_path / name).write_bytes(b"")
    job = job_from_dict(getattr(_script(), which), base_dir=tmp_path)
    assert job.sections


def test_linked_from_readme_and_analyse_help(capsys):
    assert "docs/job-file.md" in (ROOT / "README.md").read_text(encoding="utf-8")
    main(["analyse", "--help"])
    assert "docs/job-file.md" in capsys.readouterr().out
