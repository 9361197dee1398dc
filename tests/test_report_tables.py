"""Table writers: absent values, round trips, schema validity, LaTeX form, atomic output."""

from __future__ import annotations

import csv
import json
from pathlib import Path

import jsonschema
import numpy as np
import pytest
from numpy.testing import assert_allclose

from inclination.errors import InputError
from inclination.report.atomic import staged_output_dir, write_json_atomic
from inclination.report.columns import BOUNDARY_COLUMNS, GRAIN_COLUMNS, Column
from inclination.report.schemas import SCHEMAS, render
from inclination.report.tables import (
    format_cell,
    latex_indices,
    write_csv,
    write_latex,
    write_markdown,
    write_table_json,
)

ROOT = Path(__file__).resolve().parents[1]


def _boundary_table(n=3):
    rng = np.random.default_rng(0)
    table = {}
    for c in BOUNDARY_COLUMNS:
        if c.kind == "float":
            table[c.name] = rng.uniform(0, 1, n)  # inside every column's range
        elif c.kind == "int":
            table[c.name] = np.arange(1, n + 1)
        elif c.kind == "bool":
            table[c.name] = np.zeros(n, bool)
        else:
            table[c.name] = np.array([""] * n, dtype=object)
    table["plane_a"] = np.array(["(1 1 -1)", "", "(0 0 1)"], dtype=object)
    table["sense"] = np.array(["agrees", "", "undecided"], dtype=object)
    table["measured_dip_deg"][1] = np.nan
    table["candidates_within_tolerance"][2] = 0
    return table


def test_committed_schemas_equal_fresh_rendering():
    # The schemas are generated from the column lists (scripts/make_schemas.py); a
    # difference means someone edited one without the other.
    for name in SCHEMAS:
        committed = (ROOT / "schemas" / f"{name}.schema.json").read_text(encoding="utf-8")
        assert committed == render(name), f"schemas/{name}.schema.json is stale"


def test_json_round_trip_validates_against_schema(tmp_path):
    table = _boundary_table()
    path = write_table_json(
        tmp_path / "b.json", table, BOUNDARY_COLUMNS, schema_version="1.0", meta={}
    )
    doc = json.loads(path.read_text())
    schema = json.loads(render("boundaries"))
    jsonschema.Draft202012Validator.check_schema(schema)
    jsonschema.validate(doc, schema)
    assert doc["rows"][1]["measured_dip_deg"] is None
    assert doc["rows"][1]["plane_a"] is None
    assert doc["rows"][2]["candidates_within_tolerance"] == 0
    assert_allclose(doc["rows"][0]["length_um"], table["length_um"][0], rtol=0, atol=1e-6)


def test_schema_rejects_made_up_values(tmp_path):
    table = _boundary_table()
    table["sense"][0] = "maybe"
    doc = json.loads(
        write_table_json(
            tmp_path / "b.json", table, BOUNDARY_COLUMNS, schema_version="1.0", meta={}
        ).read_text()
    )
    with pytest.raises(jsonschema.ValidationError, match="maybe"):
        jsonschema.validate(doc, json.loads(render("boundaries")))


def test_csv_absent_values_are_empty(tmp_path):
    table = _boundary_table()
    path = write_csv(tmp_path / "b.csv", table, BOUNDARY_COLUMNS)
    rows = list(csv.DictReader(path.read_text().splitlines()))
    assert len(rows) == 3
    assert rows[1]["measured_dip_deg"] == ""
    assert rows[1]["plane_a"] == ""
    assert rows[0]["plane_a"] == "(1 1 -1)"
    assert list(rows[0]) == [c.name for c in BOUNDARY_COLUMNS]


def test_format_cell_rules():
    assert format_cell(-0.0001, Column("x", "float", 3)) == "0.000"
    assert format_cell(-1, Column("n", "int")) == ""
    assert format_cell(True, Column("b", "bool")) == "true"


def test_latex_overbars_and_booktabs(tmp_path):
    # LaTeX convention for negative Miller indices: an overbar (International Tables, Vol. A).
    assert latex_indices("(1 1 -1)") == r"$(1\,1\,\bar{1})$"
    assert latex_indices("{1 1 1}") == r"$\{1\,1\,1\}$"
    table = {
        "plane": np.array(["(1 -1 0)"], dtype=object),
        "dip_deg": np.array([54.7]),
        "s_deg": np.array([0.4]),
    }
    cols = (Column("plane", "str"), Column("dip_deg", "float", 1), Column("s_deg", "float", 1))
    text = write_latex(
        tmp_path / "t.tex",
        table,
        cols,
        caption="Test",
        label="tab:t",
        sigma_of={"dip_deg": "s_deg"},
    ).read_text()
    assert r"\toprule" in text and r"\bottomrule" in text
    assert r"$54.7 \pm 0.4$" in text
    assert r"\bar{1}" in text


def test_markdown_empty_table(tmp_path):
    table = {c.name: np.array([]) for c in GRAIN_COLUMNS}
    text = write_markdown(tmp_path / "g.md", table, GRAIN_COLUMNS, title="Grains").read_text()
    assert "(no rows)" in text


def test_unequal_columns_refused(tmp_path):
    with pytest.raises(InputError, match="equal length"):
        write_csv(
            tmp_path / "x.csv",
            {"a": np.zeros(2), "b": np.zeros(3)},
            (Column("a", "float"), Column("b", "float")),
        )


def test_staged_output_dir_refuses_and_keeps_old_results(tmp_path):
    out = tmp_path / "out"
    with staged_output_dir(out) as stage:
        (stage / "a.txt").write_text("first")
    assert (out / "a.txt").read_text() == "first"
    with pytest.raises(InputError, match="--overwrite"):
        with staged_output_dir(out):
            pass
    # A run that fails part-way leaves the earlier results untouched.
    with pytest.raises(RuntimeError):
        with staged_output_dir(out, overwrite=True) as stage:
            (stage / "a.txt").write_text("second")
            raise RuntimeError("boom")
    assert (out / "a.txt").read_text() == "first"
    with staged_output_dir(out, overwrite=True) as stage:
        (stage / "b.txt").write_text("second")
    assert sorted(p.name for p in out.iterdir()) == ["b.txt"]
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".")]


def test_json_nan_becomes_null(tmp_path):
    path = write_json_atomic(
        tmp_path / "x.json", {"a": float("nan"), "b": np.float32(1.5), "c": np.arange(2)}
    )
    assert json.loads(path.read_text()) == {"a": None, "b": 1.5, "c": [0, 1]}


def test_atomic_files_get_ordinary_permissions(tmp_path):
    import os
    import stat

    path = write_json_atomic(tmp_path / "x.json", {"a": 1})
    mode = stat.S_IMODE(os.stat(path).st_mode)
    current = os.umask(0)
    os.umask(current)
    assert mode == 0o666 & ~current


def test_csv_cells_equal_format_cell(tmp_path):
    # The fast column-wise CSV path must write exactly what format_cell writes.
    cols = (Column("f", "float", 3), Column("i", "int"), Column("b", "bool"), Column("s", "str"))
    table = {
        "f": np.array([1.23456, -0.0001, np.nan, -2.5]),
        "i": np.array([3, -1, 0, 7]),
        "b": np.array([True, False, True, False]),
        "s": np.array(["(1 1 -1)", "", "x", "y"], dtype=object),
    }
    rows = list(csv.reader(write_csv(tmp_path / "t.csv", table, cols).read_text().splitlines()))[1:]
    expected = [[format_cell(table[c.name][i], c) for c in cols] for i in range(4)]
    assert rows == expected


def test_long_tables_become_longtable(tmp_path):
    cols = (Column("n", "int"),)
    short = write_latex(tmp_path / "s.tex", {"n": np.arange(3)}, cols, caption="c", label="l")
    long = write_latex(tmp_path / "l.tex", {"n": np.arange(100)}, cols, caption="c", label="l")
    assert r"\begin{table}" in short.read_text()
    text = long.read_text()
    assert r"\begin{longtable}" in text and r"\endhead" in text and "longtable}." in text


def test_ambiguous_rows_give_a_dip_range_not_a_dip(demo_run):
    # Ground truth: the candidates table the same run writes (candidates.jsonl), read back
    # independently; the measured normal is compared as an axis (conventions §5).
    text = (demo_run / "results" / "boundaries.csv").read_text(encoding="utf-8")
    rows = list(csv.DictReader(text.splitlines()))
    lines = (demo_run / "results" / "candidates.jsonl").read_text(encoding="utf-8").splitlines()
    names = [c["name"] for c in json.loads(lines[0])["columns"]]
    cands = [dict(zip(names, json.loads(line), strict=True)) for line in lines[1:]]
    fitting = {}
    for c in cands:
        if c["fits"]:
            fitting.setdefault(c["segment_id"], []).append(c)
    ambiguous = [r for r in rows if r["identification"] == "ambiguous"]
    assert ambiguous and all(r["predicted_dip_deg"] == "" for r in ambiguous)
    for r in ambiguous:
        dips = [c["dip_deg"] for c in fitting[int(r["boundary_id"])]]
        assert float(r["predicted_dip_min_deg"]) == pytest.approx(min(dips), abs=1e-3)
        assert float(r["predicted_dip_max_deg"]) == pytest.approx(max(dips), abs=1e-3)
    for r in rows:
        if r["identification"] in ("identified", "coherent_twin"):
            assert (
                r["predicted_dip_min_deg"] == r["predicted_dip_deg"] == r["predicted_dip_max_deg"]
            )
    supported = [r for r in rows if r["measured_supports"]]
    assert supported and all(r["measured_dip_deg"] for r in supported)
    for r in supported:
        side, plane = r["measured_supports"].split(" ", 1)
        (c,) = [
            c for c in fitting[int(r["boundary_id"])] if c["side"] == side and c["plane"] == plane
        ]
        # The declared axes of the demo are S's (x right, y down), so normals compare as is.
        m = np.array([float(r[f"normal_{k}"]) for k in "xyz"])
        n = np.array([c[f"normal_{k}"] for k in "xyz"])
        angle = np.degrees(np.arccos(min(1.0, abs(m @ n) / np.linalg.norm(m) / np.linalg.norm(n))))
        sigma = np.hypot(float(r["measured_dip_sigma_deg"]), c["tolerance_deg"] / 2.0)
        assert angle <= 3.0 * sigma + 1e-3


def _awkward_floats(n=20000, seed=5):
    g = np.random.default_rng(seed)
    x = np.concatenate(
        [
            g.uniform(-400, 400, n),
            np.round(g.uniform(-90, 90, n), 4) + 0.00005,  # ties at the fifth decimal
            g.uniform(0, 1, n) ** 12,  # many decades, down to 1e-24
            [0.0, -0.0, 1e-320, 5e-324, 2.0**50, 2.0**53 + 2, 1e13, -9.9999e13],
            [np.nan, np.inf, -np.inf, np.nan],
        ]
    )
    return g.permutation(x)


@pytest.mark.parametrize("decimals", [0, 3, 4, 6])
def test_json_number_array_is_pythons_rounding(decimals):
    from inclination.report.tables import json_number_array

    x = _awkward_floats()
    got = json.loads(json_number_array(x, decimals))
    # Reference: numpy.round (half to even on x·10^d, numpy's documented rounding), and
    # within half a unit of the last decimal of Python's correctly rounded f-string.
    rounded = np.round(x, decimals)
    want = [float(r) if np.isfinite(v) else None for v, r in zip(x, rounded, strict=True)]
    assert got == want
    python = np.array([float(f"{v:.{decimals}f}") for v in x[np.isfinite(x)]])
    ours = np.array([v for v in got if v is not None])
    assert np.max(np.abs(ours - python)) <= 1.0000001 * 10.0**-decimals
    assert "-0," not in json_number_array(np.array([-0.0, -1e-9, 1.0]), decimals)


@pytest.mark.parametrize("digits", [1, 6, 12])
def test_json_number_array_significant_is_pythons_g(digits):
    from inclination.report.tables import json_number_array

    for x in (_awkward_floats(), np.array([1e300, np.nan, -1e200]), np.array([np.inf])):
        got = json.loads(json_number_array(x, digits, significant=True))
        # Reference: Python's "g" format with that precision (as "%.*g"), read back.
        want = [float(f"{v:.{digits}g}") if np.isfinite(v) else None for v in x]
        assert got == want


def test_sections_json_rounds_by_unit_and_keeps_ids():
    from inclination.report.atomic import dumps_json
    from inclination.report.outputs import section_table_json

    table = {
        "segment_id": np.array([7, -1, 3]),
        "along_um": np.array([1.23456789, np.nan, 2.0]),
        "beta_deg": np.array([52.000049, 0.5, np.inf]),
        "normal_x": np.array([0.123456789, -0.0, 1.0]),
        "reversal_probability": np.array([3.2e-31, np.nan, 0.25]),
        "status": np.array(["measured", "unmatched", "measured"]),
        "dip_source": np.array(["serial-section", "", "serial-section"], dtype=object),
    }
    back = json.loads(dumps_json(section_table_json(table)))
    assert back == {
        "segment_id": [7, -1, 3],
        "along_um": [1.23457, None, 2],
        "beta_deg": [52.0, 0.5, None],
        "normal_x": [0.123457, 0, 1],
        "reversal_probability": [3.2e-31, None, 0.25],
        "status": ["measured", "unmatched", "measured"],
        "dip_source": ["serial-section", "", "serial-section"],
    }


def test_json_int_array_is_json_dumps():
    from inclination.report.tables import json_int_array

    g = np.random.default_rng(2)
    cases = [
        g.integers(-(2**63), 2**63 - 1, 5000, dtype=np.int64),
        np.array([-1, 0, 1, -(2**63), 2**63 - 1]),
        np.arange(-300, 300, dtype=np.int16),
        np.array([2**64 - 1, 0], dtype=np.uint64),
        np.zeros(0, np.int32),
    ]
    for x in cases:
        # Reference: the standard library's encoder on the same integers.
        assert json.loads(json_int_array(x)) == json.loads(json.dumps(x.tolist()))
